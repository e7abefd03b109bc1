"""Verification of exported notebooks: round trip, unreadable inputs, older formats and versions."""

from __future__ import annotations

import copy
import json

import nbformat
import pytest
from test_export import reviewed_record

from pftwork._version import __version__
from pftwork.export.chain import seal_record
from pftwork.export.notebook import build_notebook, export_notebook, notebook_from_record
from pftwork.export.verify import verify_notebook
from pftwork.interpret import STEP_IDS


@pytest.fixture(scope="module")
def unexecuted(tmp_path_factory):
    """An export written without execution (no kernel needed)."""
    return export_notebook(reviewed_record(), tmp_path_factory.mktemp("ver") / "ws.ipynb",
                           execute=False)


@pytest.mark.kernel
def test_round_trip_with_reexecution(tmp_path):
    """Export (executed) then verify in a fresh kernel: valid, exit 0, every step ok."""
    path = export_notebook(reviewed_record(), tmp_path / "ws.ipynb", execute=True)
    report = verify_notebook(path, execute=True)
    assert ("valid", 0, True) == (report.status, report.exit_code, report.executed)
    assert list(STEP_IDS) == [s.id for s in report.steps]
    assert all(s.ok for s in report.steps)
    assert "status: VALID (exit 0)" in report.format_report()


def test_round_trip_in_process(unexecuted):
    """Without a kernel: record, chain, recomputation and cells check out."""
    report = verify_notebook(unexecuted, execute=False)
    assert ("valid", 0) == (report.status, report.exit_code)
    assert [] == report.problems


class TestUnreadable:
    def test_missing_file(self, tmp_path):
        """A path that does not exist is unreadable (exit 2), with the path in the message."""
        report = verify_notebook(tmp_path / "nope.ipynb", execute=False)
        assert ("unreadable", 2) == (report.status, report.exit_code)
        assert "no such file" in report.format_report()
        assert f"{tmp_path / 'nope.ipynb'}: no such file" == report.error_line

    def test_not_json(self, tmp_path):
        """A file that is not notebook JSON is unreadable (exit 2)."""
        (tmp_path / "x.ipynb").write_text("this is not a notebook", encoding="utf-8")
        assert 2 == verify_notebook(tmp_path / "x.ipynb", execute=False).exit_code

    def test_plain_notebook(self, tmp_path):
        """A notebook without pftwork metadata is 'not a pftwork worksheet' (exit 2)."""
        nbformat.write(nbformat.v4.new_notebook(), tmp_path / "plain.ipynb")
        report = verify_notebook(tmp_path / "plain.ipynb", execute=False)
        assert 2 == report.exit_code
        assert "not a pftwork worksheet notebook" in report.format_report()


def _rewrite_meta(src, dst, **changes):
    nb = nbformat.read(src, as_version=4)
    nb.metadata["pftwork"].update(changes)
    nbformat.write(nb, dst)
    return dst


class TestFormatsAndVersions:
    def test_older_format_reported_as_such(self, unexecuted, tmp_path):
        """An older notebook format is exit 2, flagged older, and explicitly not 'tampered'."""
        path = _rewrite_meta(unexecuted, tmp_path / "old.ipynb", format="pftwork-notebook/0",
                             pftwork_version="0.0.1")
        report = verify_notebook(path, execute=False)
        assert (2, True) == (report.exit_code, report.older)
        text = report.format_report()
        assert "older notebook format pftwork-notebook/0 by pftwork 0.0.1" in text
        assert "NOT reported as tampered" in text

    def test_newer_format_asks_for_upgrade(self, unexecuted, tmp_path):
        """A newer notebook format is exit 2 with an upgrade hint."""
        path = _rewrite_meta(unexecuted, tmp_path / "new.ipynb", format="pftwork-notebook/9")
        report = verify_notebook(path, execute=False)
        assert (2, False) == (report.exit_code, report.older)
        assert "upgrade pftwork" in report.format_report()

    @staticmethod
    def _as_written_by(unexecuted, tmp_path, version):
        """A notebook whose record says ``version`` and whose engine wording differs from ours."""
        nb = nbformat.read(unexecuted, as_version=4)
        record = copy.deepcopy(nb.metadata["pftwork"]["record"])
        record["export"]["pftwork_version"] = version
        step = next(s for s in record["steps"] if s["id"] == "volumes")
        step["engine"]["conclusion"] = "Wording of an earlier engine."
        seal_record(record)  # a consistent record, as that version would have written it
        path = tmp_path / f"v{version}.ipynb"
        nbformat.write(notebook_from_record(record), path)
        return path

    def test_older_version_differences_attributed_not_tampered(self, unexecuted, tmp_path):
        """Same format, older pftwork: intact chain, differences noted as the version change."""
        report = verify_notebook(self._as_written_by(unexecuted, tmp_path, "0.0.9"),
                                 execute=False)
        assert ("valid", 0, True) == (report.status, report.exit_code, report.version_changed)
        notes = " ".join(report.step("volumes").notes)
        assert "engine.conclusion" in notes and "attributed to the version change" in notes
        assert "recorded with pftwork 0.0.9" in report.format_report()

    def test_same_version_same_difference_is_a_mismatch(self, unexecuted, tmp_path):
        """Control: the same re-sealed difference under the current version is a mismatch."""
        report = verify_notebook(self._as_written_by(unexecuted, tmp_path, __version__),
                                 execute=False)
        assert 1 == report.exit_code
        assert ["engine.conclusion"] == [p.field for p in report.step("volumes").problems]
        assert report.error_line.startswith(f"{report.path}: volumes: engine.conclusion: recorded")


def test_user_cells_are_not_executed_and_are_listed(unexecuted, tmp_path):
    """A cell a person added is never executed by verification; the report lists it."""
    nb = nbformat.read(unexecuted, as_version=4)
    nb.cells.append(nbformat.v4.new_code_cell("raise SystemExit('must not run')"))
    nbformat.write(nb, tmp_path / "user.ipynb")
    report = verify_notebook(tmp_path / "user.ipynb", execute=False)
    assert 0 == report.exit_code
    assert any("not generated by pftwork" in n for n in report.notes)


def test_build_is_pure_and_deterministic():
    """Building twice with the same export time gives the same notebook JSON."""
    record = reviewed_record()
    a = build_notebook(record, exported_utc="2026-10-15T10:00:00Z")
    b = build_notebook(record, exported_utc="2026-10-15T10:00:00Z")
    assert json.dumps(a, sort_keys=True) == json.dumps(b, sort_keys=True)


def test_cli_verify_exit_codes(unexecuted, tmp_path, capsys):
    """``pftwork verify --no-execute`` exits 0 on the export and 2 on a non-notebook."""
    from pftwork.cli import main

    assert 0 == main(["verify", str(unexecuted), "--no-execute"])
    (tmp_path / "x.ipynb").write_text("{}", encoding="utf-8")
    assert 2 == main(["verify", str(tmp_path / "x.ipynb"), "--no-execute"])
    assert "status: UNREADABLE (exit 2)" in capsys.readouterr().out
