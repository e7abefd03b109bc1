"""Equation sensitivity: GLI Global 2022 vs GLI-2012, and both sexes for ``sex: "both"``.

GLI Global 2022 has wider limits than GLI-2012 "other" (standards.md §1.4: race-neutral, normal
range somewhat wider, VERIFIED-2nd [S7b]); a value between the two LLNs must therefore classify
differently under the two sets, and the block must say so.
"""

from __future__ import annotations

from pftwork.interpret import interpret
from pftwork.interpret.sensitivity import variants
from pftwork.reference import reference_values

SEX, AGE, HEIGHT = "male", 45.0, 178.0
BASE = {"spirometry": "gli-global-2022", "volumes": "gli-2021", "diffusion": "gli-2017"}


def _lln(set_id: str, param: str, sex: str = SEX) -> float:
    return float(reference_values(set_id, param, sex, AGE, HEIGHT, ancestry="other").lln)


def _case(fev1: float, fvc: float, sex: str = SEX) -> dict:
    return {"format": "pftwork-case/1",
            "subject": {"id": "se-01", "sex": sex, "age_years": AGE, "height_cm": HEIGHT},
            "spirometry": {"pre": {"FEV1": round(fev1, 4), "FVC": round(fvc, 4)}}}


class TestVariants:
    """Tests for `variants`."""

    def test_single_sex(self):
        """One sex: the chosen set first, then the other spirometry set."""
        labels = [v[0] for v in variants(BASE, "male")]

        assert labels == ["gli-global-2022 / male", "gli-2012 / male"]

    def test_both_sexes(self):
        """``both`` doubles the variants."""
        assert len(variants(BASE, "both")) == 4


class TestSensitivity:
    """Tests for the sensitivity block of `interpret`."""

    def test_change_detected_between_llns(self):
        """FEV1 between the two sets' LLNs (ratio normal) flips PRISm vs normal."""
        lo, hi = sorted([_lln("gli-global-2022", "FEV1"), _lln("gli-2012", "FEV1")])
        fev1 = (lo + hi) / 2
        fvc = fev1 / 0.80
        sens = interpret(_case(fev1, fvc)).sensitivity
        keys = {c["key"] for c in sens["changes"]}

        assert hi - lo > 0.02  # the sets differ enough for a mid-point test
        assert False is sens["stable"]
        assert "pattern" in keys
        assert {"PRISm", "normal"} == set(next(c for c in sens["changes"]
                                              if c["key"] == "pattern")["by_variant"].values())

    def test_stable_far_from_limits(self):
        """A clearly normal test is stable across sets."""
        pred_fvc = float(reference_values("gli-global-2022", "FVC", SEX, AGE, HEIGHT).predicted)
        sens = interpret(_case(pred_fvc * 0.8, pred_fvc)).sensitivity

        assert (sens["stable"], sens["changes"]) == (True, [])
        assert "No conclusion changes" in sens["note"]

    def test_sex_both_reports_sexes(self):
        """``sex: both`` runs male and female equations and names the dependent keys."""
        fvc_m = _lln("gli-global-2022", "FVC", "male")
        fvc_f = _lln("gli-global-2022", "FVC", "female")
        fvc = (fvc_m + fvc_f) / 2  # below the male LLN, above the female one
        result = interpret(_case(fvc * 0.8, fvc, sex="both"))
        sexes = {v["sex"] for v in result.sensitivity["variants"]}

        assert {"male", "female"} == sexes
        assert "pattern" in {c["key"] for c in result.sensitivity["changes"]}
        assert result.summary["pattern"] is None
        assert "pattern" in result.step("synthesis").data["sex_dependent"]
        assert result.step("synthesis").status == "sex_dependent"

    def test_equations_recorded(self):
        """Each variant records the equations it used."""
        rows = interpret(_case(3.5, 4.5)).sensitivity["variants"]

        assert {"gli-global-2022", "gli-2012"} == {r["equations"]["spirometry"] for r in rows}
