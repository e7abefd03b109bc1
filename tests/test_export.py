"""Export of a worksheet to an auditable notebook (pftwork.export.notebook, .chain, .document).

The case below is invented for these tests (a retired boat-builder with breathlessness on
stairs); no real person is described. Other export tests import ``invented_case`` and
``reviewed_record`` from here.
"""

from __future__ import annotations

import ast
import copy
import hashlib
import html
import json
import re

import nbformat
import pytest

from pftwork.export import auto_worksheet
from pftwork.export.chain import canonical_json, chain_problems, digest, seal_record
from pftwork.export.notebook import (
    GENERATED_TAG,
    NOTEBOOK_FORMAT,
    build_notebook,
    export_notebook,
)
from pftwork.interpret import STEP_IDS, interpret
from pftwork.worksheet.record import WorksheetRecord

REVIEWER = "Dr Imogen Fairweather"


def invented_case() -> dict:
    """An invented case with identifiers, free text, three test blocks and an earlier test."""
    return {
        "format": "pftwork-case/1",
        "subject": {"id": "harbour-clinic-7731", "sex": "male", "age_years": 67.3,
                    "height_cm": 171.0, "weight_kg": 82.0, "name": "Quentin Marlowe-Tisdale",
                    "birth_date": "1959-06-23", "record_number": "MRN-00482913"},
        "test": {"date": "2026-10-14", "altitude_m": 120,
                 "question": "breathless on stairs; Quentin's daughter asks about COPD",
                 "operator_comments": "good effort; MRN-00482913 wristband checked"},
        "spirometry": {"pre": {"FEV1": 1.61, "FVC": 3.30, "PEF": 5.2},
                       "post": {"FEV1": 1.83, "FVC": 3.52}},
        "volumes": {"method": "plethysmography", "TLC": 7.9, "RV": 3.9, "FRC": 4.8},
        "diffusion": {"unit": "SI", "DLCO": 5.1, "VA": 6.2, "hemoglobin_g_dl": 14.1},
        "history": [{"test": {"date": "2025-10-02"},
                     "spirometry": {"pre": {"FEV1": 1.74, "FVC": 3.38}}}],
    }


def md_plain(source: str) -> str:
    """Markdown cell source as the reader sees the text (spans dropped, entities decoded)."""
    return html.unescape(re.sub(r'</?span[^>]*>|<br>', "", source))


def _clock():
    stamps = iter(f"2026-10-15T09:{m:02d}:00Z" for m in range(60))
    return lambda: next(stamps)


def reviewed_record(case: dict | None = None) -> WorksheetRecord:
    """A signed-off worksheet with one amendment (reason given) and one note."""
    record = WorksheetRecord.from_case(case or invented_case(), now=_clock())
    record.accept_all(REVIEWER)
    record.amend("airflow", "Moderate airflow obstruction, consistent with COPD.",
                 "History of 40 pack-years; the question asks about COPD.", REVIEWER)
    record.add_note("volumes", "RV/TLC high: air trapping fits the obstruction.", REVIEWER)
    record.sign_off(REVIEWER)
    return record


@pytest.fixture(scope="module")
def record() -> WorksheetRecord:
    return reviewed_record()


@pytest.fixture(scope="module")
def notebook(record):
    return build_notebook(record, exported_utc="2026-10-15T10:00:00Z")


@pytest.fixture(scope="module")
def executed(tmp_path_factory, record):
    """One executed export shared by the kernel tests of this module."""
    return export_notebook(record, tmp_path_factory.mktemp("exp") / "ws.ipynb", execute=True)


class TestCanonicalHashing:
    def test_canonical_json_sorts_keys_and_escapes(self):
        """Canonical JSON: sorted keys, no spaces, ASCII escapes (json module, Python 3.11)."""
        assert '{"a":[1,2.5],"b":"\\u00e9"}' == canonical_json({"b": "é", "a": [1, 2.5]})

    def test_digest_is_sha256_of_canonical_text(self):
        """The digest is the SHA-256 (FIPS 180-4, via hashlib) of the canonical ASCII text."""
        expected = hashlib.sha256(b'{"x":null,"y":true}').hexdigest()
        assert expected == digest({"y": True, "x": None})

    def test_sha256_known_vector(self):
        """hashlib's SHA-256 of "abc" matches the FIPS 180-4 example (sanity of the primitive)."""
        assert ("ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
                == hashlib.sha256(b"abc").hexdigest())

    def test_sealed_chain_is_intact_then_breaks_on_edit(self, notebook):
        """A sealed record has no chain problem; editing one note names that step and note."""
        export = copy.deepcopy(notebook.metadata["pftwork"]["record"])
        assert [] == chain_problems(export)
        step = next(s for s in export["steps"] if s["id"] == "volumes")
        step["notes"][0]["text"] = "edited later"
        problems = chain_problems(export)
        assert [("volumes", "notes[0]")] == [(p.step, p.field) for p in problems]

    def test_reseal_gives_same_head(self, notebook):
        """Sealing is deterministic: the same content gives the same chain head."""
        export = copy.deepcopy(notebook.metadata["pftwork"]["record"])
        head = export["chain"]["head"]
        assert head == seal_record(export)["chain"]["head"]


class TestBuildNotebook:
    def test_layout_and_ids(self, notebook):
        """Header, record and chart cells, a markdown + check cell per step, sign-off and seal."""
        expected = ["pftwork-header", "pftwork-record", "pftwork-zchart"]
        for sid in STEP_IDS:
            expected += [f"pftwork-step-{sid}", f"pftwork-check-{sid}"]
        expected += ["pftwork-signoff", "pftwork-seal"]
        assert expected == [c.id for c in notebook.cells]

    def test_valid_nbformat_45(self, notebook):
        """The notebook validates against the nbformat 4.5 schema (nbformat 5.11)."""
        nbformat.validate(notebook)
        assert (4, 5) == (notebook.nbformat, notebook.nbformat_minor)

    def test_generated_cells_tagged_and_locked(self, notebook):
        """Every generated cell is tagged and marked not editable / not deletable."""
        for cell in notebook.cells:
            assert GENERATED_TAG in cell.metadata["tags"]
            assert (False, False) == (cell.metadata["editable"], cell.metadata["deletable"])

    def test_metadata_namespace(self, notebook):
        """Tool metadata lives in one namespace with format, version, chain head and record."""
        meta = notebook.metadata["pftwork"]
        assert NOTEBOOK_FORMAT == meta["format"]
        assert {"format", "pftwork_version", "chain_head", "deidentified", "record"} == set(meta)
        assert meta["chain_head"] == meta["record"]["chain"]["head"]

    def test_record_cell_holds_one_literal_equal_to_metadata(self, notebook):
        """The record cell's single string literal decodes to exactly the metadata record."""
        source = next(c.source for c in notebook.cells if c.id == "pftwork-record")
        calls = [n for n in ast.walk(ast.parse(source)) if isinstance(n, ast.Call)]
        literal = ast.literal_eval(calls[0].args[0])
        assert json.loads(literal) == json.loads(canonical_json(notebook.metadata["pftwork"]["record"]))
        assert literal.isascii() and "\n" not in literal

    def test_header_facts(self, notebook, record):
        """Header: checksums of the equation tables, version, UTC times, sign-off, cautions."""
        from pftwork.interpret.cautions import CAUTIONS
        from pftwork.reference import get_equation_set

        header = md_plain(notebook.cells[0].source)
        for set_id in ("gli-global-2022", "gli-2021", "gli-2017"):
            assert get_equation_set(set_id).table_sha256 in header
        assert "signed off by Dr Imogen Fairweather (2026-10-15 09:" in header
        assert notebook.metadata["pftwork"]["chain_head"] in header
        assert "not a certified medical device" in notebook.metadata["pftwork"]["record"]["export"]["cautions"][2]
        assert len(CAUTIONS) - 1 == header.count("\n- ")
        stamp = notebook.metadata["pftwork"]["record"]["export"]["exported_utc"]
        assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ", stamp)

    def test_amendment_reason_and_engine_wording_shown(self, notebook):
        """An amended step shows the amendment, the engine's own wording and the reason."""
        md = md_plain(next(c.source for c in notebook.cells if c.id == "pftwork-step-airflow"))
        assert "amended by Dr Imogen Fairweather" in md
        assert "Engine's conclusion (kept on record)" in md
        assert "Reason for the amendment:** History of 40 pack-years" in md
        assert "Moderate airflow obstruction, consistent with COPD." in md

    def test_value_table_matches_interpretation(self, notebook):
        """The airflow table shows measured, LLN, z and % predicted as interpret() computes them."""
        values = interpret(invented_case()).values["pre"]["FEV1"]
        md = md_plain(next(c.source for c in notebook.cells if c.id == "pftwork-step-airflow"))
        row = next(line for line in md.splitlines() if line.startswith("| FEV1 pre"))
        cells = [c.strip() for c in row.strip("|").split("|")]
        expected = ["FEV1 pre-BD", f"{values['measured']:.2f}", "L", f"{values['predicted']:.2f}",
                    f"{values['lln']:.2f}", f"{values['uln']:.2f}", f"{values['z']:.2f}",
                    f"{values['percent_predicted']:.0f}"]
        assert expected == cells

    def test_partial_worksheet_exports_unsigned(self):
        """A worksheet with pending steps exports and says it is not signed off."""
        record = WorksheetRecord.from_case(invented_case())
        record.accept("validity", REVIEWER)
        nb = build_notebook(record)
        assert "NOT signed off: 1 of 8 steps reviewed" in md_plain(nb.cells[0].source)
        assert "pending review" in md_plain(
            next(c.source for c in nb.cells if c.id == "pftwork-step-airflow"))

    def test_auto_worksheet_accepts_and_signs(self):
        """``auto_worksheet`` accepts every engine conclusion and signs off with the reviewer."""
        record = auto_worksheet(invented_case(), REVIEWER)
        assert record.is_complete() and REVIEWER == record.signoff["reviewer"]


def test_chart_refuses_values_that_differ_from_the_recomputation(notebook):
    """The chart cell raises (as the check cells do) when a recorded z differs from the
    recomputation, instead of drawing values other than the recorded ones."""
    from pftwork.export.audit import AuditError, show_zscore_chart

    export = copy.deepcopy(notebook.metadata["pftwork"]["record"])
    export["interpretation"]["values"]["pre"]["FEV1"]["z"] = 0.5
    with pytest.raises(AuditError, match=r"values\.pre\.FEV1\.z"):
        show_zscore_chart(export)


class TestReExport:
    def test_export_twice_same_cell_count_and_user_cells_kept(self, tmp_path, record):
        """Re-exporting replaces generated cells (same count) and keeps a person's own cell."""
        path = export_notebook(record, tmp_path / "ws.ipynb", execute=False)
        first = nbformat.read(path, as_version=4)
        first.cells.append(nbformat.v4.new_markdown_cell("my own remark"))
        nbformat.write(first, path)
        export_notebook(record, path, execute=False)
        export_notebook(record, path, execute=False)
        again = nbformat.read(path, as_version=4)
        assert len(first.cells) == len(again.cells)
        assert "my own remark" == again.cells[-1].source

    def test_refuses_to_overwrite_foreign_notebook(self, tmp_path, record):
        """An existing notebook that pftwork did not write is not overwritten."""
        from pftwork.errors import NotebookError

        path = tmp_path / "other.ipynb"
        nbformat.write(nbformat.v4.new_notebook(), path)
        with pytest.raises(NotebookError, match="not a pftwork worksheet"):
            export_notebook(record, path, execute=False)


@pytest.mark.kernel
class TestExecutedExport:
    def test_outputs_stored_without_errors(self, executed):
        """Execution stores an output for every code cell and none is an error."""
        nb = nbformat.read(executed, as_version=4)
        code = [c for c in nb.cells if c.cell_type == "code"]
        assert all(c.outputs for c in code)
        assert [] == [o for c in code for o in c.outputs if o.output_type == "error"]

    def test_check_cell_prints_recomputed_values(self, executed):
        """The airflow check cell prints the recomputed FEV1 z-score and the conclusion."""
        nb = nbformat.read(executed, as_version=4)
        text = "".join(o.get("text", "") for o in
                       next(c for c in nb.cells if c.id == "pftwork-check-airflow").outputs)
        result = interpret(invented_case())
        assert f"{result.values['pre']['FEV1']['z']:.2f}" in text
        assert result.step("airflow").conclusion in text
        assert "equals the recomputation" in text

    def test_chart_cell_stores_the_zscore_svg(self, executed):
        """The chart cell stores one image/svg+xml output (REPORT-2017 z-score graphic) whose
        markers carry the z-scores interpret() computes, plus a text summary of them."""
        import xml.etree.ElementTree as ET

        nb = nbformat.read(executed, as_version=4)
        outputs = next(c for c in nb.cells if c.id == "pftwork-zchart").outputs
        assert ["display_data"] == [o.output_type for o in outputs]
        root = ET.fromstring(outputs[0].data["image/svg+xml"])
        marks = {g.get("data-z") for g in root.iter("{http://www.w3.org/2000/svg}g")
                 if "pft-zmark" in (g.get("class") or "")}
        values = interpret(invented_case()).values
        assert f"{values['pre']['FEV1']['z']:+.2f}" in marks
        assert f"{values['diffusion']['DLCO']['z']:+.2f}" in marks
        assert f"FEV1 {values['pre']['FEV1']['z']:+.2f} pre-BD" in outputs[0].data["text/plain"]

    def test_chart_output_equals_the_pure_bundle(self, executed):
        """The stored output is exactly audit.zscore_chart_bundle of the embedded record."""
        from pftwork.export.audit import zscore_chart_bundle

        nb = nbformat.read(executed, as_version=4)
        data = next(c for c in nb.cells if c.id == "pftwork-zchart").outputs[0].data
        assert zscore_chart_bundle(nb.metadata["pftwork"]["record"]) == dict(data)

    def test_no_widget_state_stored(self, executed):
        """Executed with store_widget_state=False: no widget state in the metadata."""
        nb = nbformat.read(executed, as_version=4)
        assert "widgets" not in nb.metadata


def test_stale_record_refused_before_execution(tmp_path):
    """A record whose engine finding differs from this pftwork's is refused (named), not run."""
    from pftwork.errors import NotebookError

    data = reviewed_record().to_dict()
    next(s for s in data["steps"] if s["id"] == "volumes")["engine"]["status"] = "restriction"
    with pytest.raises(NotebookError, match="volumes: engine.status: recorded 'restriction'"):
        export_notebook(WorksheetRecord.from_dict(data), tmp_path / "s.ipynb", execute=True)
    assert not (tmp_path / "s.ipynb").exists()
