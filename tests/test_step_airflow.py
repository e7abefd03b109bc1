"""Step 2 (airflow): obstruction on FEV1/FVC z, severity on FEV1 z, GOLD label, UAO flags.

Sources: ERS/ATS 2022 interpretive standard (INTERP-2022) Table 8 and z-score severity bands
(standards.md §3.2, §3.4); GOLD spirometric grades (§3.9); Empey, BMJ 1972 (§3.8).
Measured values are built from the reference engine at a chosen z (value_at_z).
"""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from pftwork.case import load_case
from pftwork.interpret import interpret
from pftwork.interpret.airflow import gold_grade
from pftwork.interpret.finding import severity
from pftwork.interpret.values import value_at_z

SEX, AGE, HEIGHT = "female", 50.0, 165.0
SPIRO = "gli-global-2022"


def at(param: str, z: float) -> float:
    """Measured value at z for the test subject (GLI Global 2022)."""
    return value_at_z(SPIRO, param, SEX, AGE, HEIGHT, z)


def spiro_case(ratio_z: float, fev1_z: float, **extra) -> dict:
    """FEV1 at ``fev1_z`` and FVC chosen so that FEV1/FVC sits at ``ratio_z``."""
    fev1 = round(at("FEV1", fev1_z), 4)
    fvc = round(fev1 / at("FEV1/FVC", ratio_z), 4)
    return {"format": "pftwork-case/1",
            "subject": {"id": "a-01", "sex": SEX, "age_years": AGE, "height_cm": HEIGHT},
            "spirometry": {"pre": {"FEV1": fev1, "FVC": fvc}, **extra.pop("spiro", {})}, **extra}


class TestSeverityBands:
    """Tests for `severity` (INTERP-2022 bands, half-open: standards.md §3.4 and §6 #20)."""

    @pytest.mark.parametrize(("z", "expected"), [
        (-1.0, None), (-1.645, None),            # z >= -1.645 is within normal limits
        (-1.6451, "mild"), (-2.5, "mild"),       # mild: -2.5 <= z < -1.645
        (-2.5001, "moderate"), (-4.0, "moderate"),  # moderate: -4 <= z < -2.5
        (-4.0001, "severe"), (-6.0, "severe"),   # severe: z < -4
        (None, None),
    ])
    def test_bands(self, z, expected):
        """Each z falls in its documented half-open band."""
        assert expected == severity(z)


class TestObstruction:
    """Tests for the airflow step through `interpret`."""

    @pytest.mark.parametrize(("ratio_z", "obstruction"), [
        (-1.55, False), (-1.60, False),   # INTERP-2022: FEV1/FVC >= LLN is not obstruction
        (-1.70, True), (-3.0, True),      # INTERP-2022 Table 8: FEV1/FVC < 5th percentile
        (0.5, False),
    ])
    def test_ratio_threshold(self, ratio_z, obstruction):
        """Obstruction is called exactly when FEV1/FVC z is below -1.645."""
        step = interpret(spiro_case(ratio_z, -1.0)).step("airflow")

        assert obstruction == step.data["obstruction"]
        assert pytest.approx(ratio_z, abs=0.01) == step.data["ratio_z"]

    @pytest.mark.parametrize(("fev1_z", "expected"), [
        (-2.0, "mild"), (-2.45, "mild"), (-2.55, "moderate"), (-3.95, "moderate"),
        (-4.05, "severe"), (-5.0, "severe"),
        (-1.0, "mild"),  # obstruction with FEV1 in range: lowest band (our own convention)
    ])
    def test_severity_from_fev1_z(self, fev1_z, expected):
        """Severity of obstruction follows the FEV1 z band (INTERP-2022)."""
        step = interpret(spiro_case(-3.0, fev1_z)).step("airflow")

        assert expected == step.data["severity"]
        assert step.status == "obstruction"

    def test_no_severity_without_obstruction(self):
        """A low FEV1 with a preserved ratio gets no obstruction severity."""
        step = interpret(spiro_case(-0.5, -3.0)).step("airflow")

        assert (step.data["obstruction"], step.data["severity"],
               step.data["fev1_low"]) == (False, None, True)

    def test_source_names_interp_2022(self):
        """The finding cites the 2022 ERS/ATS standard."""
        assert "INTERP-2022" in interpret(spiro_case(-3.0, -2.0)).step("airflow").source

    def test_not_assessed_without_spirometry(self):
        """Without spirometry the step is not assessed and outputs are null, not guessed."""
        case = {"format": "pftwork-case/1",
                "subject": {"id": "a-02", "sex": SEX, "age_years": AGE, "height_cm": HEIGHT},
                "volumes": {"TLC": 5.0}}
        step = interpret(case).step("airflow")

        assert (step.status, step.data["obstruction"],
               step.data["severity"]) == ("not_assessed", None, None)

    def test_pure_obstruction_keeps_tlc_normal(self):
        """Common practice check: obstruction with a normal TLC is pure obstruction."""
        case = spiro_case(-3.0, -2.8, volumes={"TLC": round(value_at_z(
            "gli-2021", "TLC", SEX, AGE, HEIGHT, 0.3), 3)})
        result = interpret(case)

        assert (result.summary["pattern"], result.summary["restriction"]) == ("obstruction", False)


class TestGold:
    """Tests for `gold_grade` (GOLD: post-BD FEV1/FVC < 0.70; FEV1 80/50/30 % predicted)."""

    @pytest.mark.parametrize(("ratio", "pct", "expected"), [
        (0.60, 85.0, 1), (0.69, 80.0, 1),          # GOLD 1: >= 80
        (0.69, 79.9, 2), (0.55, 50.0, 2),          # GOLD 2: 50 <= FEV1 < 80
        (0.55, 49.9, 3), (0.45, 30.0, 3),          # GOLD 3: 30 <= FEV1 < 50
        (0.40, 29.9, 4),                           # GOLD 4: < 30
        (0.70, 40.0, None), (0.75, 40.0, None),    # ratio not below 0.70: no grade
        (None, 40.0, None), (0.60, None, None),
    ])
    def test_grades(self, ratio, pct, expected):
        """Grade boundaries are inclusive at the lower cut as GOLD prints them."""
        assert expected == gold_grade(ratio, pct)

    def test_only_when_copd_context(self):
        """The GOLD label is given only when the case says the question is COPD."""
        post = {"spiro": {"post": {"FEV1": 1.2, "FVC": 2.4}}}
        with_copd = spiro_case(-3.0, -3.0, test={"copd": True}, **post)
        without = spiro_case(-3.0, -3.0, **{"spiro": {"post": {"FEV1": 1.2, "FVC": 2.4}}})

        assert interpret(with_copd).step("airflow").data["gold_grade"] in (1, 2, 3, 4)
        assert interpret(without).step("airflow").data["gold_grade"] is None


class TestUpperAirway:
    """Upper-airway screening flags from values (Empey, BMJ 1972: FEV1 mL / PEF L/min > 10)."""

    def test_empey_flag(self):
        """FEV1 2000 mL with PEF 180 L/min gives 11.1 > 10: consider, never diagnose (§6 #22)."""
        case = spiro_case(-0.5, -1.0)
        case["spirometry"]["pre"].update(FEV1=2.0, FVC=2.6, PEF=3.0)
        step = interpret(case).step("airflow")

        assert True is step.data["upper_airway_flag"]
        assert pytest.approx(11.11, abs=0.01) == step.evidence["upper_airway"]["fev1_pef_ml_per_l_min"]
        assert "Consider upper-airway" in step.conclusion and "diagnos" not in step.conclusion

    def test_no_flag_with_normal_pef(self):
        """FEV1 2000 mL with PEF 360 L/min gives 5.6: no flag."""
        case = spiro_case(-0.5, -1.0)
        case["spirometry"]["pre"].update(FEV1=2.0, FVC=2.6, PEF=6.0)

        assert False is interpret(case).step("airflow").data["upper_airway_flag"]

    def test_unknown_without_pef(self):
        """Without PEF or curves the flag is null (not computed)."""
        assert interpret(spiro_case(-0.5, -1.0)).step("airflow").data["upper_airway_flag"] is None

    def test_load_case_roundtrip(self):
        """The builder produces a case the loader accepts (FEV1 <= FVC)."""
        case = load_case(spiro_case(-3.0, -4.5))

        assert case.spirometry.pre.reported["FEV1"] <= case.spirometry.pre.reported["FVC"]


class TestUpperAirwayFromCurves:
    """Indices from the best manoeuvre's raw curve (curves built by pftwork.quality.synthetic)."""

    @staticmethod
    def _trials(vc: float, pef: float) -> list[dict]:
        from pftwork.quality.synthetic import synthetic_manoeuvre

        out = []
        for i in range(3):
            m = synthetic_manoeuvre(vc_l=vc + 0.02 * i, pef_l_s=pef, seed=i)
            out.append({"curve": {"time_s": m.curve.time_s.tolist(),
                                  "volume_l": m.curve.volume_l.tolist()}})
        return out

    def test_blunted_peak_flagged(self):
        """A 3.5 L blow with PEF 2.5 L/s gives FEV1/PEF > 10 mL/(L/min) (Empey 1972)."""
        case = {"format": "pftwork-case/1",
                "subject": {"id": "a-03", "sex": "male", "age_years": 50, "height_cm": 175},
                "spirometry": {"pre": {"trials": self._trials(3.5, 2.5)}}}
        step = interpret(case).step("airflow")

        assert step.evidence["upper_airway"]["from"] == "curve"
        assert step.evidence["upper_airway"]["fev1_pef_ml_per_l_min"] > 10.0
        assert step.data["upper_airway_flag"] is True

    def test_normal_peak_not_flagged(self):
        """A 4.5 L blow with PEF 9 L/s stays below every threshold."""
        case = {"format": "pftwork-case/1",
                "subject": {"id": "a-04", "sex": "male", "age_years": 50, "height_cm": 175},
                "spirometry": {"pre": {"trials": self._trials(4.5, 9.0)}}}
        step = interpret(case).step("airflow")

        assert step.data["upper_airway_flag"] is False
        assert step.evidence["upper_airway"]["fev1_pef_ml_per_l_min"] < 10.0


class TestSeverityProperties:
    """Severity never improves as z falls (INTERP-2022 bands are ordered)."""

    @given(st.floats(-12, 3), st.floats(-12, 3))
    def test_monotone(self, z1, z2):
        """A lower z never gets a milder band."""
        order = [None, "mild", "moderate", "severe"]
        lo, hi = sorted([z1, z2])

        assert order.index(severity(lo)) >= order.index(severity(hi))
