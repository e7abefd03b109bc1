"""Tests of atomic autosave: save/load, crash safety, corrupt files, resume after a killed kernel.

Atomicity relies on ``os.replace`` being an atomic rename within one file system (Python 3.11
docs, ``os.replace``: "If successful, the renaming will be an atomic operation (this is a POSIX
requirement)"), after ``os.fsync`` of the temporary file (POSIX fsync(2)).
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest
from worksheet_util import example_case, ticking_clock

from pftwork.errors import WorksheetError
from pftwork.worksheet import WorksheetRecord, autosave_path, load_record, save_record
from pftwork.worksheet.storage import backup_path

TESTS = Path(__file__).resolve().parent


@pytest.fixture(scope="module")
def template():
    """One interpreted record as a dictionary."""
    return WorksheetRecord.from_case(example_case(), now=ticking_clock()).to_dict()


@pytest.fixture
def record(template):
    """A fresh record."""
    return WorksheetRecord.from_dict(template, now=ticking_clock("2026-12-01T12:00:00"))


class TestSaveLoad:
    """Tests for `save_record` and `load_record`."""

    def test_round_trip(self, record, tmp_path):
        """What is saved is loaded back equal."""
        record.amend("airflow", "Obstruction.", "shorter", "Dr A")
        path = save_record(record, tmp_path / "a.pftwork.json")

        assert record == load_record(path)

    def test_previous_good_copy_is_kept_as_bak(self, record, tmp_path):
        """After a second save, .bak holds the first version."""
        path = tmp_path / "a.pftwork.json"
        save_record(record, path)
        first = record.to_dict()
        record.accept("validity", "Dr A")
        save_record(record, path)

        assert first == load_record(backup_path(path)).to_dict()
        assert record == load_record(path)

    def test_failed_replace_leaves_old_file_and_no_temp(self, record, tmp_path, monkeypatch):
        """If the final rename fails (simulated crash), the old file is intact, no temp left."""
        path = tmp_path / "a.pftwork.json"
        save_record(record, path)
        before = path.read_bytes()
        record.accept("validity", "Dr A")
        real_replace = os.replace

        def failing(src, dst):
            if Path(dst) == path:
                raise OSError(28, "No space left on device")
            return real_replace(src, dst)

        monkeypatch.setattr(os, "replace", failing)
        with pytest.raises(WorksheetError, match="No space left"):
            save_record(record, path)

        assert before == path.read_bytes()
        assert [] == [p.name for p in tmp_path.iterdir() if p.name.endswith(".tmp")]

    def test_file_mode_follows_umask(self, record, tmp_path):
        """The autosave is not left with mkstemp's private 0600 mode (POSIX umask applies)."""
        if os.name != "posix":
            pytest.skip("POSIX file modes only")
        mask = os.umask(0o022)
        os.umask(mask)
        path = save_record(record, tmp_path / "a.pftwork.json")

        assert 0o666 & ~mask == path.stat().st_mode & 0o777


class TestCorruptAutosave:
    """Tests for reading damaged autosaves."""

    def test_truncated_file_gives_clear_error_naming_bak(self, record, tmp_path):
        """A truncated autosave raises WorksheetError naming the file and the .bak copy."""
        path = tmp_path / "a.pftwork.json"
        save_record(record, path)
        record.accept("validity", "Dr A")
        save_record(record, path)
        path.write_text(path.read_text(encoding="utf-8")[:500], encoding="utf-8")

        with pytest.raises(WorksheetError) as info:
            load_record(path)

        assert "corrupt" in str(info.value)
        assert str(backup_path(path)) in str(info.value)
        assert "pending" == load_record(backup_path(path)).step("validity").decision.status

    def test_corrupt_file_is_not_copied_over_the_bak(self, record, tmp_path):
        """Saving over a corrupt file keeps the last good .bak (a corrupt copy never replaces it)."""
        path = tmp_path / "a.pftwork.json"
        save_record(record, path)
        save_record(record, path)
        good_bak = backup_path(path).read_bytes()
        path.write_text("{not json", encoding="utf-8")
        save_record(record, path)

        assert good_bak == backup_path(path).read_bytes()

    def test_other_json_is_refused(self, tmp_path):
        """A JSON file that is not a worksheet record is refused with the expected format named."""
        path = tmp_path / "x.pftwork.json"
        path.write_text(json.dumps(example_case()), encoding="utf-8")

        with pytest.raises(WorksheetError, match="pftwork-worksheet/1"):
            load_record(path)

    def test_missing_file(self, tmp_path):
        """A missing autosave raises WorksheetError naming the path."""
        with pytest.raises(WorksheetError, match="nothing.pftwork.json"):
            load_record(tmp_path / "nothing.pftwork.json")


class TestAutosavePath:
    """Tests for `autosave_path`."""

    def test_named_after_case_id_in_folder(self, tmp_path):
        """The file is `<case id>.pftwork.json`, unsafe characters replaced."""
        assert tmp_path / "clinic_A_01.pftwork.json" == autosave_path("clinic/A 01", tmp_path)

    def test_environment_redirects(self, tmp_path, monkeypatch):
        """PFTWORK_AUTOSAVE_DIR overrides the current folder."""
        monkeypatch.setenv("PFTWORK_AUTOSAVE_DIR", str(tmp_path))

        assert tmp_path / "c1.pftwork.json" == autosave_path("c1")


def test_killed_kernel_resumes_where_reviewer_stopped(tmp_path):
    """A process that reviews three steps and is then SIGKILLed loses nothing already done.

    The child drives the real widget (accept, amend, note) and kills itself with SIGKILL (no
    clean-up runs); a new process-independent object then resumes from the autosave.
    """
    case_path = tmp_path / "case.json"
    case_path.write_text(json.dumps(example_case()), encoding="utf-8")
    script = textwrap.dedent(f"""
        import os, signal, sys
        sys.path.insert(0, {str(TESTS)!r})
        from pftwork.ui.widget_worksheet import Worksheet
        ws = Worksheet.from_file({str(case_path)!r}, reviewer="Dr Kill")
        ws.panel("validity").accept_button.click()
        p = ws.panel("airflow")
        p.amend_text.value = "Obstruction, grading deferred."
        p.amend_reason.value = "repeat test planned"
        p.amend_save.click()
        n = ws.panel("volumes")
        n.note_text.value = "RV high"
        n.note_save.click()
        os.kill(os.getpid(), signal.SIGKILL)
    """)
    env = {**os.environ, "PFTWORK_AUTOSAVE_DIR": str(tmp_path)}
    proc = subprocess.run([sys.executable, "-c", script], cwd=tmp_path, capture_output=True,
                          text=True, timeout=120, env=env)

    assert -signal.SIGKILL == proc.returncode, proc.stderr
    resumed = load_record(autosave_path("clinic-A-0192", tmp_path))
    assert "accepted" == resumed.step("validity").decision.status
    assert "Obstruction, grading deferred." == resumed.step("airflow").conclusion
    assert ["RV high"] == [n.text for n in resumed.step("volumes").notes]
    assert (2, 8) == resumed.progress


def test_saved_case_text_follows_edits(record, tmp_path):
    """After a case edit, the saved case is the edited one (the block text cache is refreshed)."""
    path = tmp_path / "a.pftwork.json"
    save_record(record, path)
    raw = example_case()
    raw["spirometry"]["post"]["FEV1"] = 1.44
    record.update_case(raw)
    save_record(record, path)

    assert raw == load_record(path).case_raw
    assert json.loads(record.case_raw_json()) == record.case_raw
