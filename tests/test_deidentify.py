"""De-identified export: no identifier survives anywhere in the file, and it still verifies.

Rules checked follow the HIPAA Privacy Rule Safe Harbor list, 45 CFR 164.514(b)(2)(i): (A)
names, (C) all elements of dates except year and all ages over 89 (aggregated as 90 or older),
(H) medical record numbers, (R) other unique identifying numbers — text read in the GPO copy of
45 CFR 164.514 (edocket.access.gpo.gov, 2006 edition). pftwork also drops the year (dates are
re-based to 2000-01-01), which is stricter than (C).
"""

from __future__ import annotations

import datetime as dt
import re

import pytest
from test_export import REVIEWER, invented_case, reviewed_record

from pftwork.case import load_case
from pftwork.export.deidentify import (
    AGE_CAP,
    deidentify_record,
    identifiers_of,
    pseudonym,
    scrub_text,
)
from pftwork.export.document import build_export_record
from pftwork.export.html import render_html
from pftwork.export.notebook import export_notebook
from pftwork.export.verify import verify_notebook
from pftwork.interpret import interpret
from pftwork.worksheet.record import WorksheetRecord

# Everything in the invented case that identifies the subject, and the dates of the tests.
IDENTIFIERS = ["Quentin", "Marlowe", "Tisdale", "Marlowe-Tisdale", "MRN-00482913", "00482913",
               "harbour-clinic-7731", "1959-06-23", "23/06/1959", "2026-10-14", "2025-10-02",
               "2026-10-15", "Nettlebridge", "Ward 9 bay 4"]


def _record_with_free_text() -> WorksheetRecord:
    """The reviewed record plus identifiers typed into notes and a reason, two marked."""
    record = reviewed_record()
    record.add_note("airflow", "Spoke with Quentin (MRN-00482913) on 2026-10-15, born "
                    "23/06/1959; lives in Nettlebridge, Ward 9 bay 4.", REVIEWER)
    record.amend("change", "Stable since last year.", "Compared with Mr Marlowe-Tisdale's "
                 "test of 2025-10-02 at Nettlebridge.", REVIEWER)
    record.mark_identifier("Nettlebridge")
    record.mark_identifier("Ward 9 bay 4")
    record.accept_all(REVIEWER)
    record.sign_off(REVIEWER)
    return record


@pytest.fixture(scope="module")
def deid_path(tmp_path_factory):
    return export_notebook(_record_with_free_text(), tmp_path_factory.mktemp("deid") / "d.ipynb",
                           execute=False, deidentify=True)


def test_no_identifier_anywhere_in_the_notebook_file(deid_path):
    """Search the whole .ipynb text: none of the identifiers of the input remains."""
    text = deid_path.read_text(encoding="utf-8")
    found = [i for i in IDENTIFIERS if i.lower() in text.lower()]
    assert [] == found


def test_identifiers_present_in_identified_export(tmp_path):
    """Control: the ordinary export does contain them (so the search above can fail)."""
    path = export_notebook(_record_with_free_text(), tmp_path / "i.ipynb", execute=False)
    text = path.read_text(encoding="utf-8")
    assert all(i in text for i in ("Quentin", "MRN-00482913", "1959-06-23", "2026-10-14"))


def test_no_identifier_in_html_copy():
    """The de-identified HTML copy is free of them too."""
    page = render_html(_record_with_free_text(), deidentify=True, key=b"k")
    assert [] == [i for i in IDENTIFIERS if i.lower() in page.lower()]


@pytest.mark.kernel
def test_deidentified_export_verifies_in_a_kernel(deid_path):
    """The embedded case is the de-identified one, so re-execution verifies (exit 0)."""
    report = verify_notebook(deid_path, execute=True)
    assert (0, True) == (report.exit_code, report.executed), report.format_report()


def test_dates_rebased_intervals_kept():
    """Test date becomes 2000-01-01 (day 0); the earlier test keeps its 377-day interval."""
    ws, _ = deidentify_record(reviewed_record().to_dict(), key=b"k")
    case = ws["case_raw"]
    assert "2000-01-01" == case["test"]["date"]
    earlier = dt.date.fromisoformat(case["history"][0]["test"]["date"])
    assert (dt.date(2026, 10, 14) - dt.date(2025, 10, 2)).days == (dt.date(2000, 1, 1) - earlier).days


def test_values_unchanged_by_deidentification():
    """Reference values of the de-identified case equal the original ones (age < 90)."""
    ws, _ = deidentify_record(reviewed_record().to_dict(), key=b"k")
    before = interpret(load_case(invented_case())).values["pre"]["FEV1"]
    after = interpret(load_case(ws["case_raw"])).values["pre"]["FEV1"]
    assert before == after


def test_direct_identifiers_removed_and_pseudonym():
    """Name, record number and birth date are null; the id is an HMAC pseudonym."""
    ws, info = deidentify_record(reviewed_record().to_dict(), key=b"site key")
    subject = ws["case_raw"]["subject"]
    assert (None, None, None) == (subject["name"], subject["record_number"], subject["birth_date"])
    assert pseudonym("harbour-clinic-7731", b"site key") == subject["id"]
    assert re.fullmatch(r"anon-[0-9a-f]{10}", subject["id"])
    assert "subject.name" in info["removed"]


def test_pseudonym_depends_on_key():
    """Same key, same pseudonym; another key, another one; no key: random per export."""
    assert pseudonym("a", b"k1") == pseudonym("a", b"k1")
    assert pseudonym("a", b"k1") != pseudonym("a", b"k2")
    ids = {deidentify_record(reviewed_record().to_dict())[0]["case_raw"]["subject"]["id"]
           for _ in range(2)}
    assert 2 == len(ids)


class TestAgeOver89:
    @staticmethod
    def _old_record():
        case = invented_case()
        case["subject"]["age_years"] = 93.4
        case["history"][0]["subject"] = {"age_years": 92.4}
        record = WorksheetRecord.from_case(case)
        record.accept_all(REVIEWER)
        return record

    def test_age_capped_and_shown_as_90_or_older(self):
        """Age 93.4 is recorded as 90 and shown as "90 or older" (45 CFR 164.514(b)(2)(i)(C))."""
        export = build_export_record(self._old_record(), deidentify=True, key=b"k")
        assert AGE_CAP == export["case"]["subject"]["age_years"]
        assert "age_years" not in export["case"]["history"][0]["subject"]
        assert export["export"]["deidentification"]["age_capped"]
        page = render_html(self._old_record(), deidentify=True, key=b"k")
        assert "90 or older (reference values computed at 90)" in page
        assert "93.4" not in page and "92.4" not in page

    def test_engine_recomputed_at_displayed_age(self):
        """Engine values in the export are those of age 90, so verification recomputes them."""
        export = build_export_record(self._old_record(), deidentify=True, key=b"k")
        at_90 = invented_case()
        at_90["subject"]["age_years"] = 90.0
        expected = interpret(load_case(at_90)).values["pre"]["FEV1"]["lln"]
        assert expected == export["interpretation"]["values"]["pre"]["FEV1"]["lln"]


class TestFreeText:
    def test_identifiers_of_includes_name_parts_and_date_spellings(self):
        """The removal list has the full name, its parts, the record number and birth date forms."""
        found = identifiers_of(reviewed_record().to_dict())
        for item in ("Quentin Marlowe-Tisdale", "Quentin", "Marlowe-Tisdale", "MRN-00482913",
                     "harbour-clinic-7731", "1959-06-23", "23/06/1959"):
            assert item in found

    def test_scrub_text_whole_words_only(self):
        """Identifiers go, case-insensitively, but not inside other words."""
        assert "[removed] saw Annex" == scrub_text("ANN saw Annex", ["Ann"], None)

    def test_dates_in_text_become_offsets(self):
        """ISO dates become [day N]; other spellings become [date removed]."""
        text = scrub_text("seen 2026-10-01, again 14/10/2026 and 3 March 2026", [],
                          dt.date(2026, 10, 14))
        assert "seen [day -13], again [date removed] and [date removed]" == text

    def test_marked_identifiers_removed_from_reason_and_notes(self):
        """Marked texts leave notes and amendment reasons; the marks themselves are dropped."""
        ws, info = deidentify_record(_record_with_free_text().to_dict(), key=b"k")
        change = next(s for s in ws["steps"] if s["id"] == "change")
        assert "[removed]" in change["decision"]["reason"]
        assert "Nettlebridge" not in str(ws)
        assert ([], 2) == (ws["marked_identifiers"], info["marked_identifiers"])
