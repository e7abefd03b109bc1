"""Step 4 (gas transfer): DLCO/KCO/VA limits, reading table, Hb/COHb/altitude adjustments.

Sources: INTERP-2022 DLCO interpretation (standards.md §3.7, VERIFIED [S17d]); Hb adjustment in
Cotes form (DLCO-2005/2017; constants FROM MEMORY; check vectors standards.md §4.4, DERIVED);
COHb and PIO2 adjustments (ATS laboratory manual, §4.5, VERIFIED [S27]; COHb example [S32]);
SI/traditional factor 2.987 (§4.6); VA/TLC < 0.8 (Hughes & Pride, Breathe [S31]).
"""

from __future__ import annotations

import pytest

from pftwork.case import load_case
from pftwork.interpret import interpret
from pftwork.interpret.finding import Finding
from pftwork.interpret.gas_transfer import (
    KPA_TO_MMHG,
    SI_TO_TRADITIONAL,
    altitude_factor,
    barometric_kpa_at,
    cohb_factor,
    gas_transfer,
    hb_factor,
    inspired_po2_mmhg,
)
from pftwork.interpret.values import value_at_z

SEX, AGE, HEIGHT = "female", 55.0, 163.0
CASE = load_case({"format": "pftwork-case/1",
                  "subject": {"id": "g-00", "sex": SEX, "age_years": AGE, "height_cm": HEIGHT},
                  "diffusion": {"unit": "SI", "DLCO": 5.0, "VA": 4.0,
                                "hemoglobin_g_dl": 13.4}})
OK = Finding("validity", "t", "ok", "acceptable", data={"stop": False, "diffusion_usable": True})


def at(param: str, z: float, unit: str = "SI") -> float:
    """Measured value at z (GLI 2017) for the test subject."""
    return value_at_z("gli-2017", param, SEX, AGE, HEIGHT, z, unit=unit)


def dl_case(dlco_z: float, va_z: float = 0.0, unit: str = "SI", **diffusion) -> dict:
    """Case with DLCO at ``dlco_z`` and VA at ``va_z``."""
    return {"format": "pftwork-case/1",
            "subject": {"id": "g-01", "sex": SEX, "age_years": AGE, "height_cm": HEIGHT},
            "diffusion": {"unit": unit, "DLCO": round(at("DLCO", dlco_z, unit), 4),
                          "VA": round(at("VA", va_z), 4), **diffusion}}


def _vals(dlco: float, va: float, kco: float, tlc: float | None = None) -> dict:
    """A hand-made values block with z-scores only (pure step input)."""
    out = {"pre": {}, "post": {}, "volumes": {}, "diffusion": {
        "DLCO": {"measured": 5.0, "z": dlco, "unit": "mmol/min/kPa"},
        "VA": {"measured": 4.0, "z": va, "unit": "L"},
        "KCO": {"measured": 1.25, "z": kco, "unit": "mmol/min/kPa/L"}}}
    if tlc is not None:
        out["volumes"]["TLC"] = {"measured": tlc, "z": 0.0}
    return out


class TestHbFactor:
    """Tests for `hb_factor` (standards.md §4.4 vectors, DERIVED; constants from memory)."""

    @pytest.mark.parametrize(("hb", "sex", "age", "expected"), [
        (10.0, "male", 40, 0.8408), (10.0, "female", 40, 0.8772),
        (8.0, "male", 40, 0.7464), (17.0, "male", 40, 1.0617),
        (14.6, "male", 40, 1.0000),   # standard Hb, men (Marrades 1997 [S29])
        (13.4, "female", 40, 1.0000),  # standard Hb, women
        (13.4, "male", 12, 1.0000),   # boys under 15 use the female/child constant
    ])
    def test_vectors(self, hb, sex, age, expected):
        """Factor 1.7·Hb/(c + Hb) matches the derived check values."""
        assert pytest.approx(expected, abs=5e-5) == float(hb_factor(hb, sex, age))

    @pytest.mark.parametrize(("sex", "expected"), [("male", 23.79), ("female", 22.80)])
    def test_measured_equivalent(self, sex, expected):
        """Measured 20.0 mL/min/mmHg at Hb 10 adjusts to 23.79 (male) / 22.80 (female)."""
        assert pytest.approx(expected, abs=0.005) == 20.0 / float(hb_factor(10.0, sex, 40))


class TestCohbAndAltitude:
    """COHb and altitude adjustments (standards.md §4.5)."""

    def test_cohb_example(self):
        """COHb 10 %, measured 21.4 -> 23.54 mL/min/mmHg (ATS manual example [S32])."""
        assert pytest.approx(23.54, abs=0.005) == 21.4 / float(cohb_factor(10.0))

    @pytest.mark.parametrize(("pb_mmhg", "pio2", "factor"), [(630.0, 122.43, 0.9145),
                                                             (760.0, 149.73, 0.9992)])
    def test_pio2_vectors(self, pb_mmhg, pio2, factor):
        """PIO2 = 0.21(PB - 47) and factor 1 + 0.0031(PIO2 - 150) (ATS manual [S27])."""
        pb_kpa = pb_mmhg / KPA_TO_MMHG

        assert pytest.approx(pio2, abs=0.005) == float(inspired_po2_mmhg(pb_kpa))
        assert pytest.approx(factor, abs=5e-5) == float(altitude_factor(pb_kpa))

    @pytest.mark.parametrize(("altitude", "kpa"), [(0.0, 101.325), (1000.0, 89.876),
                                                   (1500.0, 84.556), (3000.0, 70.121)])
    def test_standard_atmosphere(self, altitude, kpa):
        """Pressure matches ICAO standard-atmosphere table values (from memory) within 0.02 kPa."""
        assert pytest.approx(kpa, abs=0.02) == float(barometric_kpa_at(altitude))

    def test_unit_factor(self):
        """8.0 mmol/min/kPa = 23.90 mL/min/mmHg (standards.md §4.6)."""
        assert pytest.approx(23.90, abs=0.005) == 8.0 * SI_TO_TRADITIONAL


class TestClassification:
    """DLCO, KCO and VA against the 5th/95th percentiles (INTERP-2022)."""

    @pytest.mark.parametrize(("dlco_z", "expected"), [(-1.60, "normal"), (-1.70, "low"),
                                                      (1.60, "normal"), (1.70, "high")])
    def test_dlco_limits(self, dlco_z, expected):
        """DLCO z below -1.645 is low, above +1.645 high."""
        step = interpret(dl_case(dlco_z)).step("gas_transfer")

        assert expected == step.data["dlco"]
        assert pytest.approx(dlco_z, abs=0.01) == step.data["dlco_z"]

    @pytest.mark.parametrize(("dlco_z", "expected"), [(-2.0, "mild"), (-3.0, "moderate"),
                                                      (-4.5, "severe"), (-1.0, None)])
    def test_severity_on_dlco(self, dlco_z, expected):
        """Gas-transfer impairment is graded on DLCO z (same bands as FEV1)."""
        assert expected == interpret(dl_case(dlco_z)).step("gas_transfer").data["dlco_severity"]

    def test_traditional_unit_reported_as_given(self):
        """A traditional-unit case is reported in mL/min/mmHg with the value as entered."""
        case = dl_case(-2.0, unit="traditional")
        result = interpret(case)
        dlco = result.values["diffusion"]["DLCO"]

        assert dlco["unit"] == "mL/min/mmHg"
        assert pytest.approx(case["diffusion"]["DLCO"], rel=1e-9) == dlco["measured"]
        assert pytest.approx(-2.0, abs=0.01) == dlco["z"]

    def test_hb_adjustment_changes_call(self):
        """Low Hb lowers the predicted DLCO: z -1.7 unadjusted becomes normal at Hb 10 g/dL."""
        step = interpret(dl_case(-1.70, hemoglobin_g_dl=10.0)).step("gas_transfer")

        assert (step.data["adjusted"], step.data["dlco"]) == (True, "normal")
        assert step.evidence["DLCO_z_unadjusted"] < -1.645

    def test_missing_hb_caveat(self):
        """A low DLCO without Hb carries the caveat that anaemia is not excluded."""
        step = interpret(dl_case(-2.5)).step("gas_transfer")

        assert any("anaemia" in c for c in step.caveats)


class TestReadingTable:
    """The VA/KCO reading of a low or high DLCO (INTERP-2022; standards.md §3.7)."""

    @pytest.mark.parametrize(("dlco", "va", "kco", "reading"), [
        (-2.5, 0.0, -2.5, "vascular"),     # normal VA, low KCO
        (-2.5, -2.5, -2.0, "units_lost"),  # low VA, low KCO
        (-2.5, -2.5, 0.0, "units_lost"),   # low VA, normal KCO
        (-2.5, -3.0, 2.0, "low_volume"),   # low VA, high KCO
        (2.0, 0.0, 2.0, "high"),           # raised DLCO
        (-1.0, -2.5, 2.0, "low_volume"),   # DLCO in range, low VA, high KCO (our extension)
        (0.0, 0.0, 0.0, None),             # normal: no reading
    ])
    def test_reading(self, dlco, va, kco, reading):
        """Each combination maps to its row of the table."""
        step = gas_transfer(CASE, _vals(dlco, va, kco), {}, OK)

        assert reading == step.data["reading"]

    @pytest.mark.parametrize(("tlc", "expected"), [(4.9, False), (5.0, False), (5.2, True)])
    def test_va_tlc(self, tlc, expected):
        """VA/TLC below 0.8 (strict) flags maldistribution of ventilation (VA 4.0 L)."""
        step = gas_transfer(CASE, _vals(-2.0, -2.0, 0.0, tlc=tlc), {}, OK)

        assert expected == step.data["maldistribution"]

    def test_grade_f_not_interpreted(self):
        """DLCO grade F is not reported (DLCO-2017), so the step is not assessed."""
        bad = Finding("validity", "t", "x", "low_quality",
                      data={"stop": False, "diffusion_usable": False})
        step = gas_transfer(CASE, _vals(-3.0, 0.0, -3.0), {}, bad)

        assert (step.status, step.data["dlco"]) == ("not_assessed", None)


class TestQualityGate:
    """Grade F trials are not interpreted (DLCO-2017 reporting by grade)."""

    def test_low_inspired_volume(self):
        """Inspired volume 40 % of the largest VC grades F: no DLCO conclusion."""
        case = {"format": "pftwork-case/1",
                "subject": {"id": "g-02", "sex": SEX, "age_years": AGE, "height_cm": HEIGHT},
                "spirometry": {"pre": {"FEV1": 2.6, "FVC": 3.4}},
                "diffusion": {"unit": "SI", "trials": [
                    {"DLCO": 6.0, "VA": 4.0, "IVC": 1.36, "breath_hold_s": 10.0,
                     "sample_time_s": 3.0, "inspiration_time_s": 2.0}] * 2}}
        result = interpret(case)

        assert result.quality["DLCO_grade"] == "F"
        assert (result.step("gas_transfer").status, result.summary["dlco"]) == ("not_assessed", None)


class TestAnaemiaWording:
    """INTERP-2022 lists anaemia among causes of a low DLCO with normal VA and low KCO
    (standards.md §3.7, VERIFIED [S17d]); once the predicted value is Hb-adjusted (DLCO-2017,
    Cotes form) anaemia no longer explains a DLCO that stays low, so it is not offered."""

    def test_hb_adjusted_low_dlco_does_not_suggest_anaemia(self):
        """DLCO z -3, VA normal, Hb 12.0 g/dL (female factor 0.954, Cotes form, standards.md §4.4)."""
        data = dl_case(-3.0, hemoglobin_g_dl=12.0)
        data["diffusion"]["KCO"] = round(data["diffusion"]["DLCO"] / data["diffusion"]["VA"], 4)
        step = interpret(data).step("gas_transfer")

        assert (step.data["reading"], step.data["adjusted"]) == ("vascular", True)
        assert "or anaemia" not in step.conclusion
        assert "Hb is allowed for" in step.conclusion

    def test_without_hb_anaemia_still_listed(self):
        """Without Hb the table's anaemia stays in the reading (and in the caveat)."""
        step = interpret(dl_case(-3.0)).step("gas_transfer")

        assert step.data["reading"] == "vascular"
        assert "anaemia" in step.conclusion
