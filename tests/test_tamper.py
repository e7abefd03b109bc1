"""Tamper evidence: every edit of an exported worksheet is caught and named by verification.

Each tamper edits a copy of one exported notebook the way a person with a text editor would
(both copies of the record kept consistent, unless the test is about the copies) and checks that
``verify_notebook`` reports a mismatch (exit 1) naming the step and the field. Also runs nbval
(0.11, ``pytest --nbval``) on an untouched and a tampered export.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import nbformat
import pytest
from test_export import reviewed_record

from pftwork.export.chain import canonical_json
from pftwork.export.notebook import export_notebook, notebook_from_record
from pftwork.export.verify import verify_notebook

SANITIZE = Path(__file__).with_name("sanitize.cfg")


@pytest.fixture(scope="module")
def exported(tmp_path_factory) -> Path:
    """One executed export shared by this module (tampers are applied to copies)."""
    return export_notebook(reviewed_record(), tmp_path_factory.mktemp("tamper") / "ws.ipynb")


def _step(record: dict, step_id: str) -> dict:
    return next(s for s in record["steps"] if s["id"] == step_id)


def tamper(source: Path, target: Path, edit, *, cell_too: bool = True) -> Path:
    """Apply ``edit(record)`` to the metadata record (and the record cell) and save to ``target``."""
    nb = nbformat.read(source, as_version=4)
    record = nb.metadata["pftwork"]["record"]
    edit(record)
    if cell_too:
        fresh = notebook_from_record(record)
        cell = next(c for c in nb.cells if c.id == "pftwork-record")
        cell.source = next(c for c in fresh.cells if c.id == "pftwork-record").source
    nbformat.write(nb, target)
    return target


def _set_measured(r):
    r["case"]["spirometry"]["pre"]["FEV1"] = 1.91


def _set_conclusion(r):
    _step(r, "airflow")["decision"]["conclusion"] = "Normal spirometry."


def _set_reason(r):
    _step(r, "airflow")["decision"]["reason"] = "Reason rewritten afterwards."


def _set_note(r):
    _step(r, "volumes")["notes"][0]["text"] = "Note rewritten afterwards."


def _swap(r):
    i = [s["id"] for s in r["steps"]].index("airflow")
    r["steps"][i], r["steps"][i + 1] = r["steps"][i + 1], r["steps"][i]


def _delete(r):
    r["steps"] = [s for s in r["steps"] if s["id"] != "gas_transfer"]


def _engine_value(r):
    _step(r, "airflow")["engine"]["evidence"]["FEV1_z"] = -1.0


def _signoff(r):
    r["signoff"]["reviewer"] = "Someone Else"


# (edit, expected (where, field-prefix) pairs) — each expected pair must appear in the report.
TAMPERS = {
    "measured-value-in-case": (_set_measured, [("record", "case"),
                                               ("airflow", "engine.evidence.FEV1_z")]),
    "conclusion": (_set_conclusion, [("airflow", "decision.conclusion")]),
    "amendment-reason": (_set_reason, [("airflow", "decision.reason")]),
    "note": (_set_note, [("volumes", "notes[0]")]),
    "reordered-steps": (_swap, [("airflow", "position"), ("volumes", "position")]),
    "deleted-step": (_delete, [("gas_transfer", "step")]),
    "engine-value": (_engine_value, [("airflow", "engine"), ("airflow", "engine.evidence.FEV1_z")]),
    "sign-off": (_signoff, [("sign-off", "signoff")]),
}


@pytest.mark.parametrize("name", list(TAMPERS), ids=list(TAMPERS))
def test_tamper_is_caught_and_named(exported, tmp_path, name):
    """The edit makes verification fail with exit 1 and names the step and field."""
    edit, expected = TAMPERS[name]
    path = tamper(exported, tmp_path / f"{name}.ipynb", edit)

    report = verify_notebook(path, execute=False)

    assert ("mismatch", 1) == (report.status, report.exit_code)
    found = {(p.where, p.field) for p in report.problems}
    for where, field in expected:
        assert any(w == where and f.startswith(field) for w, f in found), (where, field, found)
    text = report.format_report()
    for where, _ in expected:
        assert where in text


def test_measured_value_report_gives_recorded_and_recomputed(exported, tmp_path):
    """The report says which value changed: recorded FEV1 1.61 against recomputed 1.91."""
    path = tamper(exported, tmp_path / "m.ipynb", _set_measured)
    text = verify_notebook(path, execute=False).format_report()
    assert "engine.evidence.FEV1.pre: recorded 1.61, recomputed 1.91" in text


def test_markdown_only_edit_is_caught(exported, tmp_path):
    """Editing the conclusion shown in a markdown cell (record untouched) is named by cell."""
    nb = nbformat.read(exported, as_version=4)
    cell = next(c for c in nb.cells if c.id == "pftwork-step-airflow")
    cell.source = cell.source.replace("Moderate airflow obstruction", "No obstruction")
    nbformat.write(nb, tmp_path / "md.ipynb")
    report = verify_notebook(tmp_path / "md.ipynb", execute=False)
    assert 1 == report.exit_code
    assert ["cell pftwork-step-airflow"] == [p.field for p in report.step("airflow").problems]


def test_copies_of_the_record_must_agree(exported, tmp_path):
    """Editing only the metadata copy: the record cell (what a kernel runs) disagrees."""
    path = tamper(exported, tmp_path / "meta.ipynb", _set_conclusion, cell_too=False)
    report = verify_notebook(path, execute=False)
    assert 1 == report.exit_code
    assert any(p.field.startswith("record cell: steps[") for p in report.problems_of("record"))


def test_chain_head_in_metadata_must_match(exported, tmp_path):
    """A chain head edited in the metadata is named."""
    nb = nbformat.read(exported, as_version=4)
    nb.metadata["pftwork"]["chain_head"] = "0" * 64
    nbformat.write(nb, tmp_path / "head.ipynb")
    report = verify_notebook(tmp_path / "head.ipynb", execute=False)
    assert ("record", "chain.head") in {(p.where, p.field) for p in report.problems}


@pytest.mark.kernel
def test_edited_stored_output_is_caught_on_reexecution(exported, tmp_path):
    """An edited stored output differs from the fresh re-execution and is named (kernel)."""
    nb = nbformat.read(exported, as_version=4)
    cell = next(c for c in nb.cells if c.id == "pftwork-check-volumes")
    cell.outputs[0]["text"] = cell.outputs[0]["text"].replace("Check:", "Checked:")
    nbformat.write(nb, tmp_path / "out.ipynb")
    report = verify_notebook(tmp_path / "out.ipynb", execute=True)
    assert 1 == report.exit_code and report.executed
    assert ["output of cell pftwork-check-volumes"] == [p.field for p in
                                                         report.step("volumes").problems]


@pytest.mark.kernel
def test_edited_chart_output_is_caught_on_reexecution(exported, tmp_path):
    """A z-score chart whose stored SVG was edited (a marker moved) is named by verify (kernel)."""
    nb = nbformat.read(exported, as_version=4)
    cell = next(c for c in nb.cells if c.id == "pftwork-zchart")
    svg = cell.outputs[0]["data"]["image/svg+xml"]
    edited = svg.replace('data-z="', 'data-z="9', 1)
    assert edited != svg
    cell.outputs[0]["data"]["image/svg+xml"] = edited
    nbformat.write(nb, tmp_path / "chart.ipynb")
    report = verify_notebook(tmp_path / "chart.ipynb", execute=True)
    assert 1 == report.exit_code and report.executed
    assert [("record", "output of cell pftwork-zchart")] == [(p.where, p.field)
                                                              for p in report.problems]
    assert "image/svg+xml" in report.problems[0].message


def _nbval(path: Path) -> subprocess.CompletedProcess:
    cmd = [sys.executable, "-m", "pytest", "--nbval", str(path), "--nbval-sanitize-with",
           str(SANITIZE), "-p", "no:cacheprovider", "-q"]
    return subprocess.run(cmd, cwd=path.parent, capture_output=True, text=True, timeout=180)


@pytest.mark.kernel
def test_nbval_passes_untouched_and_fails_tampered(exported, tmp_path):
    """nbval 0.11 re-runs the notebook: untouched passes; a tampered case value fails."""
    clean = tmp_path / "clean.ipynb"
    clean.write_bytes(exported.read_bytes())
    assert 0 == _nbval(clean).returncode

    bad = tamper(exported, tmp_path / "bad.ipynb", _set_measured)
    result = _nbval(bad)
    assert 1 == result.returncode
    assert "record chain broken" in result.stdout


def test_tampered_json_literal_is_reported(exported, tmp_path):
    """A record cell whose literal is no longer valid JSON is named, not a traceback."""
    nb = nbformat.read(exported, as_version=4)
    cell = next(c for c in nb.cells if c.id == "pftwork-record")
    cell.source = cell.source.replace('{"case"', '{case', 1)
    nbformat.write(nb, tmp_path / "lit.ipynb")
    report = verify_notebook(tmp_path / "lit.ipynb", execute=False)
    assert 1 == report.exit_code
    assert any(p.field == "record cell" and "not valid JSON" in p.message
               for p in report.problems)


def test_record_is_canonical_json(exported):
    """The stored record re-serialises canonically (nothing outside JSON types)."""
    nb = nbformat.read(exported, as_version=4)
    record = nb.metadata["pftwork"]["record"]
    assert record == json.loads(canonical_json(record))


def test_malformed_record_is_a_named_mismatch_not_a_traceback(exported, tmp_path):
    """A record edited into the wrong shape (decision replaced by text) is reported, exit 1."""
    def edit(r):
        _step(r, "volumes")["decision"] = "accepted"

    path = tamper(exported, tmp_path / "shape.ipynb", edit, cell_too=False)
    report = verify_notebook(path, execute=False)
    assert 1 == report.exit_code
    assert ("record", "structure") in {(p.where, p.field) for p in report.problems}
