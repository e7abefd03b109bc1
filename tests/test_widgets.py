"""Widget tests without a browser: drive ``.value =`` and ``button.click()``, check the record.

ipywidgets 8.1 runs ``on_click`` handlers synchronously on ``Button.click()`` and ``observe``
handlers on assignment (ipywidgets ``widget_button.py`` / traitlets); no kernel or frontend is
needed. Rules checked are the worksheet contract (see tests/test_record.py).
"""

from __future__ import annotations

import json

import pytest
from worksheet_util import example_case, ticking_clock

from pftwork.interpret import STEP_IDS
from pftwork.interpret.cautions import CAUTIONS
from pftwork.ui.widget_worksheet import Worksheet
from pftwork.worksheet import load_record


@pytest.fixture
def case_path(tmp_path, monkeypatch):
    """The example case as a file; autosaves go to tmp_path."""
    monkeypatch.setenv("PFTWORK_AUTOSAVE_DIR", str(tmp_path))
    path = tmp_path / "case.json"
    path.write_text(json.dumps(example_case()), encoding="utf-8")
    return path


@pytest.fixture
def ws(case_path):
    """A worksheet with a reviewer name entered."""
    sheet = Worksheet.from_file(case_path, now=ticking_clock())
    sheet.reviewer.value = "Dr W. Idget"
    return sheet


def _saved(ws):
    return load_record(ws.autosave_path)


class TestPanels:
    """Layout and content."""

    def test_one_panel_per_step_in_order(self, ws):
        """There is one panel per interpretation step, in the engine's order."""
        assert list(STEP_IDS) == [p.step_id for p in ws.panels]

    def test_cautions_visible_above_the_tabs(self, ws):
        """Every caution sentence is shown in a box outside the tabs (so on every tab)."""
        assert ws.cautions in ws.children
        assert all(c.replace("'", "&#x27;") in ws.cautions.value for c in CAUTIONS)

    def test_evidence_table_shows_values(self, ws):
        """The airflow panel lists FEV1/FVC with measured, LLN and z from the values block."""
        values = ws.record.interpretation["values"]["pre"]["FEV1/FVC"]
        table = ws.panel("airflow").values.value

        assert f"{values['z']:+.2f}" in table
        assert f"{values['lln']:.2f}" in table
        assert "pft-zglyph" in table

    def test_progress_starts_at_zero(self, ws):
        """Progress shows 0 of 8 at the start."""
        assert (0, "0 of 8 steps reviewed") == (ws.progress.value, ws.progress_label.value)


class TestActions:
    """Accept, amend, note and sign-off through the buttons."""

    def test_accept_needs_a_reviewer_name(self, case_path):
        """Without a reviewer name, Accept shows an error and records nothing."""
        sheet = Worksheet.from_file(case_path)
        sheet.panel("airflow").accept_button.click()

        assert "Reviewer" in sheet.panel("airflow").error.value
        assert "pending" == sheet.record.step("airflow").decision.status

    def test_accept_records_and_autosaves(self, ws):
        """Accept records the decision, updates chip and progress, and autosaves."""
        ws.panel("airflow").accept_button.click()

        assert "accepted" == ws.record.step("airflow").decision.status
        assert "Dr W. Idget" == ws.record.step("airflow").decision.reviewer
        assert "pft-chip-accepted" in ws.panel("airflow").header.value
        assert "1 of 8 steps reviewed" == ws.progress_label.value
        assert ws.record == _saved(ws)

    def test_amend_without_reason_refused_and_shown(self, ws):
        """Record amendment with a blank reason shows the refusal in the panel."""
        panel = ws.panel("volumes")
        panel.amend_toggle.click()
        panel.amend_text.value = "Air trapping; no restriction."
        panel.amend_save.click()

        assert "reason is mandatory" in panel.error.value
        assert "pending" == ws.record.step("volumes").decision.status

    def test_amend_with_reason_keeps_original_visible(self, ws):
        """An amendment shows the new wording, the reason and the engine's original."""
        panel = ws.panel("volumes")
        engine_text = ws.record.step("volumes").engine["conclusion"]
        panel.amend_text.value = "Air trapping; no restriction."
        panel.amend_reason.value = "clearer for the referrer"
        panel.amend_save.click()

        assert "" == panel.error.value
        assert "amended" == _saved(ws).step("volumes").decision.status
        assert "Air trapping; no restriction." in panel.body.value
        assert "clearer for the referrer" in panel.body.value
        assert engine_text.split(":")[0] in panel.body.value

    def test_note_is_recorded(self, ws):
        """Save note attaches the note to the step and shows it."""
        panel = ws.panel("change")
        panel.note_text.value = "Previous test on another spirometer."
        panel.note_save.click()

        assert ["Previous test on another spirometer."] == [
            n.text for n in _saved(ws).step("change").notes]
        assert "Previous test on another spirometer." in panel.body.value
        assert "" == panel.note_text.value

    def test_signoff_refused_then_allowed(self, ws):
        """Sign-off is refused with the pending steps named, then allowed when all reviewed."""
        ws.signoff_button.click()
        refused = ws.signoff_error.value
        for panel in ws.panels:
            panel.accept_button.click()
        ws.signoff_button.click()

        assert "still pending" in refused and "synthesis" in refused
        assert "" == ws.signoff_error.value
        assert "Signed off by Dr W. Idget" in ws.signoff_banner.value
        assert "Dr W. Idget" == _saved(ws).signoff["reviewer"]

    def test_unexpected_callback_error_is_shown(self, ws, monkeypatch):
        """An unexpected exception inside a handler is shown in the panel, not swallowed."""
        def broken(*args, **kwargs):
            raise RuntimeError("disk on fire")

        monkeypatch.setattr(ws.record, "accept", broken)
        ws.panel("validity").accept_button.click()

        assert "disk on fire" in ws.panel("validity").error.value
        assert "RuntimeError" in ws.last_error


class TestResume:
    """Re-opening a worksheet."""

    def test_from_file_resumes_autosave(self, ws, case_path):
        """Opening the same case again resumes every decision and note."""
        ws.panel("airflow").accept_button.click()
        ws.panel("gas_transfer").note_text.value = "Hb measured the same day."
        ws.panel("gas_transfer").note_save.click()
        again = Worksheet.from_file(case_path)

        assert again.resumed
        assert ws.record == again.record
        assert "1 of 8 steps reviewed" == again.progress_label.value

    def test_resume_reads_exact_file(self, ws):
        """Worksheet.resume(path) restores the record saved at path."""
        ws.panel("validity").accept_button.click()
        again = Worksheet.resume(ws.autosave_path)

        assert ws.record == again.record

    def test_changed_case_file_updates_resumed_record(self, ws, case_path):
        """If the case file changed since the autosave, affected steps return to pending."""
        for panel in ws.panels:
            panel.accept_button.click()
        raw = example_case()
        raw["spirometry"]["post"]["FEV1"] = 1.44
        case_path.write_text(json.dumps(raw), encoding="utf-8")
        again = Worksheet.from_file(case_path)

        assert "pending" == again.record.step("bronchodilator").decision.status
        assert "accepted" == again.record.step("validity").decision.status


class TestCaseForm:
    """Editing the case in the form."""

    def test_valid_edit_recomputes(self, ws):
        """Typing a new post-BD FEV1 recomputes the bronchodilator panel and autosaves."""
        ws.form.set_value("spirometry.post.FEV1", "1.44")

        assert 1.44 == _saved(ws).case_raw["spirometry"]["post"]["FEV1"]
        assert "1.44" in ws.panel("bronchodilator").values.value
        assert "" == ws.form.errors["spirometry.post.FEV1"].value

    def test_invalid_edit_shows_loader_message_beside_field(self, ws):
        """A value in mL shows the loader's message next to the field; the record is unchanged."""
        before = ws.record.to_dict()
        ws.form.set_value("spirometry.post.FEV1", "1660")
        message = ws.form.errors["spirometry.post.FEV1"].value

        assert "spirometry.post.FEV1" in message and "mL" in message
        assert before == ws.record.to_dict()

    def test_text_that_is_not_a_number(self, ws):
        """Non-numeric text is flagged beside the field."""
        ws.form.set_value("subject.height_cm", "tall")

        assert "not a number" in ws.form.errors["subject.height_cm"].value

    def test_trial_blocks_are_read_only(self, ws):
        """Pre-BD FEV1 comes from trials in this case, so its field is disabled."""
        assert ws.form.inputs["spirometry.pre.FEV1"].disabled
        assert not ws.form.inputs["spirometry.post.FEV1"].disabled

    def test_form_edits_survive_reopening_unchanged_source(self, ws, case_path):
        """Data typed into the form are kept when the unchanged case file is opened again."""
        ws.form.set_value("subject.weight_kg", "80")
        again = Worksheet.from_file(case_path)

        assert 80.0 == again.record.case_raw["subject"]["weight_kg"]
        assert "80" == again.form.inputs["subject.weight_kg"].value


class TestRecordTab:
    """De-identification marks and the audit log."""

    def test_mark_identifier_is_saved(self, ws):
        """Marked free text is kept in the record (for de-identified export) and autosaved."""
        ws.mark_text.value = "Mrs Example"
        ws.mark_button.click()

        assert ["Mrs Example"] == _saved(ws).marked_identifiers
        assert "Mrs Example" in ws.marked.value

    def test_audit_log_lists_actions(self, ws):
        """The audit log shows every action with its reviewer."""
        ws.panel("validity").accept_button.click()

        assert "accepted" in ws.audit.value and "Dr W. Idget" in ws.audit.value
