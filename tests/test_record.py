"""Tests of the worksheet record (pure state): decisions, notes, sign-off, case edits, JSON.

The rules checked are the worksheet contract of the project (design.md §1 "Worksheet: ordered
steps, reviewer decisions, notes, sign-off"; the record contract in pftwork/worksheet/record.py):
an amendment needs a reason and keeps the engine's wording, sign-off needs every step reviewed
and a named reviewer, nothing is erased. Time stamps are checked against RFC 3339 §5.6
(ISO 8601 profile, "Z" for UTC); JSON safety against RFC 8259 §6 (no NaN/Infinity), using
Python 3.11's ``json`` module with ``allow_nan=False``.
"""

from __future__ import annotations

import json
import re

import pytest
from worksheet_util import example_case, ticking_clock

from pftwork.errors import CaseError, WorksheetError
from pftwork.interpret import STEP_IDS, interpret
from pftwork.worksheet import WorksheetRecord

#: RFC 3339 §5.6 date-time with "Z" offset, whole seconds.
RFC3339_UTC = re.compile(r"^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}Z$")


@pytest.fixture(scope="module")
def template():
    """One interpreted record, copied per test (interpretation takes ~0.1 s)."""
    return WorksheetRecord.from_case(example_case(), now=ticking_clock()).to_dict()


@pytest.fixture
def record(template):
    """A fresh record with a deterministic clock."""
    return WorksheetRecord.from_dict(template, now=ticking_clock("2026-12-01T11:00:00"))


class TestFromCase:
    """Tests for `WorksheetRecord.from_case`."""

    def test_steps_follow_the_engine(self, record):
        """One pending step per interpretation step, in the engine's order, engine text intact."""
        expected = interpret(example_case()).to_dict()["steps"]

        assert list(STEP_IDS) == [s.id for s in record.steps]
        assert expected == [s.engine for s in record.steps]
        assert {"pending"} == {s.decision.status for s in record.steps}
        assert (0, len(STEP_IDS)) == record.progress
        assert not record.is_complete()

    def test_accepts_a_path_and_a_case(self, tmp_path):
        """A case file path and a loaded Case give the same steps as the dictionary."""
        from pftwork.case import load_case

        path = tmp_path / "case.json"
        path.write_text(json.dumps(example_case()), encoding="utf-8")
        by_dict = WorksheetRecord.from_case(example_case())

        assert [s.engine for s in by_dict.steps] == \
            [s.engine for s in WorksheetRecord.from_case(path).steps]
        assert by_dict.case_raw == WorksheetRecord.from_case(load_case(path)).case_raw

    def test_invalid_case_raises_case_error(self):
        """An impossible value raises the loader's CaseError naming the field."""
        raw = example_case()
        raw["spirometry"]["post"]["FEV1"] = 1660  # entered in mL

        with pytest.raises(CaseError) as info:
            WorksheetRecord.from_case(raw)

        assert "spirometry.post.FEV1" == info.value.field

    def test_time_stamps_are_rfc3339_utc(self, record):
        """created_utc/updated_utc are RFC 3339 UTC stamps."""
        assert RFC3339_UTC.match(record.created_utc)
        assert RFC3339_UTC.match(record.updated_utc)


class TestDecisions:
    """Tests for `accept`, `amend` and `add_note`."""

    def test_accept_records_reviewer_and_time(self, record):
        """Accepting stamps the reviewer and an RFC 3339 UTC time."""
        record.accept("airflow", "Dr A. Reviewer")
        d = record.step("airflow").decision

        assert ("accepted", "Dr A. Reviewer") == (d.status, d.reviewer)
        assert RFC3339_UTC.match(d.time_utc)
        assert (1, 8) == record.progress

    def test_amend_without_reason_is_refused(self, record):
        """A blank reason raises WorksheetError saying a reason is mandatory; nothing changes."""
        before = record.to_dict()

        for reason in ("", "   ", None):
            with pytest.raises(WorksheetError, match="reason is mandatory"):
                record.amend("volumes", "Air trapping without restriction.", reason, "Dr A")

        assert before == record.to_dict()

    def test_amend_keeps_engine_conclusion(self, record):
        """The amended wording is in force; the engine's stays in `engine`."""
        engine_text = record.step("volumes").engine["conclusion"]
        record.amend("volumes", "Air trapping; TLC normal.", "RV/TLC reading", "Dr A")
        step = record.step("volumes")

        assert "Air trapping; TLC normal." == step.conclusion
        assert engine_text == step.engine["conclusion"]
        assert ("amended", "RV/TLC reading") == (step.decision.status, step.decision.reason)

    def test_redeciding_moves_old_decision_to_history(self, record):
        """A second decision keeps the first in the step's history (nothing erased)."""
        record.amend("airflow", "Moderate obstruction.", "my grading", "Dr A")
        record.accept("airflow", "Dr B")
        step = record.step("airflow")

        assert "accepted" == step.decision.status
        assert ["amended"] == [h["status"] for h in step.history]
        assert "Moderate obstruction." == step.history[0]["conclusion"]

    def test_note_is_kept_with_author(self, record):
        """Notes are appended with author and time; a blank note is refused."""
        record.add_note("change", "Earlier test done on another device.", "Dr A")

        assert ["Earlier test done on another device."] == [
            n.text for n in record.step("change").notes]
        with pytest.raises(WorksheetError):
            record.add_note("change", "  ", "Dr A")

    def test_unknown_step_names_the_known_ones(self, record):
        """An unknown step id raises WorksheetError listing the valid ids."""
        with pytest.raises(WorksheetError, match="airflow"):
            record.accept("spirometry", "Dr A")


class TestSignOff:
    """Tests for `sign_off`."""

    def test_refused_until_every_step_reviewed(self, record):
        """Sign-off is refused while steps are pending, and the message names them."""
        record.accept("validity", "Dr A")

        with pytest.raises(WorksheetError) as info:
            record.sign_off("Dr A")

        assert all(s in str(info.value) for s in STEP_IDS[1:])
        assert record.signoff is None

    def test_needs_a_reviewer_name(self, record):
        """A blank reviewer name is refused even when every step is reviewed."""
        record.accept_all("Dr A")

        with pytest.raises(WorksheetError, match="name"):
            record.sign_off("  ")

    def test_allowed_when_complete(self, record):
        """With every step accepted or amended, sign-off records reviewer and time."""
        record.amend("synthesis", "Obstruction with air trapping.", "shorter wording", "Dr A")
        record.accept_all("Dr A")
        record.sign_off("Dr A")

        assert record.is_complete()
        assert "Dr A" == record.signoff["reviewer"]
        assert RFC3339_UTC.match(record.signoff["time_utc"])
        assert "amended" == record.step("synthesis").decision.status  # accept_all kept it

    def test_change_after_signoff_clears_it(self, record):
        """A note after sign-off clears the sign-off and logs the cleared one."""
        record.accept_all("Dr A")
        record.sign_off("Dr A")
        record.add_note("synthesis", "Addendum.", "Dr A")
        cleared = [e for e in record.events if e["event"] == "signoff_cleared"]

        assert record.signoff is None
        assert 1 == len(cleared)
        assert "Dr A" == cleared[0]["signoff"]["reviewer"]


class TestUpdateCase:
    """Tests for `update_case`."""

    def test_changed_conclusion_goes_back_to_pending(self, record):
        """A post-BD FEV1 without response resets the bronchodilator step, keeps the others."""
        record.accept_all("Dr A")
        raw = example_case()
        raw["spirometry"]["post"]["FEV1"] = 1.44  # +20 mL: no response (INTERP-2022 > 10 %)
        reset = record.update_case(raw)
        bd = record.step("bronchodilator")

        assert "bronchodilator" in reset
        assert "pending" == bd.decision.status
        assert "accepted" == bd.history[-1]["status"]
        assert "accepted" == record.step("volumes").decision.status
        assert 1.44 == record.case_raw["spirometry"]["post"]["FEV1"]

    def test_invalid_edit_leaves_record_unchanged(self, record):
        """An invalid edit raises CaseError and changes nothing."""
        before = record.to_dict()
        raw = example_case()
        raw["subject"]["height_cm"] = -1

        with pytest.raises(CaseError):
            record.update_case(raw)

        assert before == record.to_dict()

    def test_same_case_is_no_change(self, record):
        """Re-submitting the same data changes nothing (no event, no reset)."""
        before = record.to_dict()

        assert [] == record.update_case(example_case())
        assert before == record.to_dict()


class TestSerialisation:
    """Tests for `to_dict`/`from_dict`."""

    def test_round_trip_through_strict_json(self, record):
        """to_dict survives json.dumps(allow_nan=False) (RFC 8259) and restores an equal record."""
        record.amend("airflow", "Obstruction.", "shorter", "Dr A")
        record.add_note("airflow", "Checked the loop.", "Dr A")
        record.mark_identifier("clinic-A-0192")
        text = json.dumps(record.to_dict(), allow_nan=False)
        again = WorksheetRecord.from_dict(json.loads(text))

        assert record == again
        assert WorksheetRecord.FORMAT == json.loads(text)["format"]
        assert record.digest() == again.digest()

    def test_wrong_format_is_refused(self, record):
        """A document of another format raises WorksheetError naming the expected format."""
        d = record.to_dict()
        d["format"] = "pftwork-interpretation/1"

        with pytest.raises(WorksheetError, match="pftwork-worksheet/1"):
            WorksheetRecord.from_dict(d)

    def test_malformed_record_is_refused(self, record):
        """A record missing its steps raises WorksheetError, not KeyError."""
        d = record.to_dict()
        del d["steps"]

        with pytest.raises(WorksheetError):
            WorksheetRecord.from_dict(d)
