"""The ``pftwork-interpretation/1`` document (design.md §5), its rendering and the demo cases."""

from __future__ import annotations

import json

import pytest

import pftwork
from pftwork.errors import EquationSetError
from pftwork.interpret import STEP_IDS, Finding, Interpretation, interpret
from pftwork.interpret.document import FORMAT
from pftwork.interpret.render import render_text

DEMOS = pftwork.demo_cases()
CASE = {
    "format": "pftwork-case/1",
    "subject": {"id": "doc-01", "sex": "female", "age_years": 61.4, "height_cm": 159.0},
    "test": {"date": "2026-10-14", "altitude_m": 240},
    "spirometry": {"pre": {"FEV1": 1.42, "FVC": 2.51, "PEF": 4.0},
                   "post": {"FEV1": 1.66, "FVC": 2.70}},
    "volumes": {"TLC": 5.6, "RV": 3.0, "FRC": 3.6},
    "diffusion": {"unit": "traditional", "hemoglobin_g_dl": 12.4, "DLCO": 14.6, "VA": 4.3},
    "airway_resistance": {"sRaw": 1.6, "unit": "kPa*s"},
    "history": [{"test": {"date": "2025-09-30"},
                 "spirometry": {"pre": {"FEV1": 1.58, "FVC": 2.62}}}],
}
ENTRY_KEYS = {"measured", "predicted", "lln", "uln", "z", "percent_predicted", "percentile",
              "extrapolated", "unit", "equation"}


@pytest.fixture(scope="module")
def result() -> Interpretation:
    """One full interpretation shared by the document tests."""
    return interpret(CASE)


class TestDocument:
    """Tests for `Interpretation.to_dict`."""

    def test_strict_json(self, result):
        """The document serialises as strict JSON (no NaN, no numpy types)."""
        text = json.dumps(result.to_dict(), allow_nan=False)

        assert json.loads(text)["format"] == FORMAT

    def test_top_level_keys(self, result):
        """Every design.md §5 key is present."""
        doc = result.to_dict()

        assert {"format", "pftwork_version", "equations", "values", "quality", "summary",
                "steps", "cautions"} <= set(doc)
        assert {"pre", "post", "volumes", "diffusion"} <= set(doc["values"])

    def test_steps_in_order(self, result):
        """Steps appear once each, in chain order, with the §5 fields."""
        steps = result.to_dict()["steps"]

        assert list(STEP_IDS) == [s["id"] for s in steps]
        assert all({"conclusion", "evidence", "rule", "source"} <= set(s) for s in steps)

    def test_value_entries(self, result):
        """Each value entry carries the documented keys; ratios are fractions."""
        values = result.to_dict()["values"]

        assert set(values["pre"]["FEV1"]) >= ENTRY_KEYS
        assert 0 < values["pre"]["FEV1/FVC"]["measured"] < 1
        assert 0 < values["volumes"]["RV/TLC"]["measured"] < 1

    def test_diffusion_in_case_unit(self, result):
        """Traditional-unit input is reported in mL/min/mmHg, as entered."""
        dlco = result.to_dict()["values"]["diffusion"]["DLCO"]

        assert (dlco["unit"], pytest.approx(dlco["measured"])) == ("mL/min/mmHg", 14.6)
        assert dlco["adjusted"]["factors"]["hemoglobin_g_dl"] == 12.4

    def test_equation_sets_recorded(self, result):
        """Equation sets in use are named with their citation and table checksum."""
        doc = result.to_dict()

        assert {"gli-global-2022", "gli-2021", "gli-2017"} == set(doc["equation_sets"])
        assert all(len(e["table_sha256"]) == 64 for e in doc["equation_sets"].values())

    def test_cautions(self, result):
        """Cautions state decision support, physician decides, not a certified device."""
        text = " ".join(result.to_dict()["cautions"])

        assert "Decision support" in text and "physician" in text and "not a certified" in text


class TestInterpretApi:
    """Tests for `interpret` and `Interpretation`."""

    def test_step_lookup(self, result):
        """`step` returns the named finding and rejects unknown ids."""
        assert result.step("airflow").id == "airflow"
        with pytest.raises(KeyError):
            result.step("nonsense")

    def test_equations_override(self):
        """A comma-separated override switches the spirometry set."""
        res = interpret(CASE, equations="gli-2012")

        assert res.equations["spirometry"] == "gli-2012"
        assert res.values["pre"]["FEV1"]["equation"] == "gli-2012"

    def test_unknown_equations(self):
        """An unknown set raises EquationSetError naming it."""
        with pytest.raises(EquationSetError, match="gli-1999"):
            interpret(CASE, equations="gli-1999")

    def test_finding_id_checked(self):
        """A Finding outside STEP_IDS cannot be built."""
        with pytest.raises(ValueError):
            Finding("other", "t", "c", "normal")

    def test_finding_json_safe(self):
        """NaN in evidence becomes null in to_dict."""
        f = Finding("airflow", "t", "c", "normal", evidence={"z": float("nan")})

        assert f.to_dict()["evidence"] == {"z": None}


class TestRender:
    """Tests for `render_text`."""

    def test_table_and_chain(self, result):
        """The text shows measured, LLN, z and % predicted, each step and the cautions."""
        text = render_text(result.to_dict())

        for word in ("measured", "LLN", "z", "% pred", "FEV1/FVC", "DLCO", "Cautions"):
            assert word in text
        assert text.index("1. Test quality") < text.index("8. Overall interpretation")


@pytest.mark.parametrize("path", DEMOS, ids=[p.stem for p in DEMOS])
def test_demo_case(path):
    """Each bundled demo case interprets, and gives its ``expected_pattern`` when it names one."""
    raw = json.loads(path.read_text())
    res = interpret(path)

    expected = raw.get("expected_pattern", (raw.get("meta") or {}).get("expected_pattern"))

    json.dumps(res.to_dict(), allow_nan=False)
    if expected is not None:
        assert expected == res.summary["pattern"]


class TestValuesBlock:
    """Tests for the values block and equation resolution."""

    def test_lab_reference_used_where_no_equation(self):
        """PEF has no GLI equation: the lab's own predicted/LLN are shown, labelled 'lab'."""
        case = dict(CASE, lab_reference={"PEF": {"predicted": 6.0, "lln": 4.5}})
        pef = interpret(case).values["pre"]["PEF"]

        assert (pef["equation"], pef["lln"]) == ("lab", 4.5)
        assert pef["percent_predicted"] == pytest.approx(100 * 4.0 / 6.0)

    def test_no_equation_no_guess(self):
        """Without any reference, PEF keeps its measured value and null limits."""
        pef = interpret(CASE).values["pre"]["PEF"]

        assert (pef["measured"], pef["lln"], pef["z"], pef["equation"]) == (4.0, None, None, None)

    @pytest.mark.parametrize("equations", [{"spirometry": "gli-2012"}, ["gli-2012"],
                                           "gli-2012,gli-2021"])
    def test_override_forms(self, equations):
        """Dict, list and comma-separated overrides are equivalent."""
        from pftwork.case import load_case
        from pftwork.interpret.values import resolve_equations

        eqs = resolve_equations(load_case(CASE), equations)

        assert eqs == {"spirometry": "gli-2012", "volumes": "gli-2021", "diffusion": "gli-2017"}
