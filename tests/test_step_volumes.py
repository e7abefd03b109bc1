"""Step 3 (lung volumes): restriction, mixed, hyperinflation, air trapping, PRISm, complex.

Sources: INTERP-2022 Table 8 (restriction = TLC < 5th percentile; mixed = FEV1/FVC and TLC
< 5th percentile; a low FVC does not prove restriction) — standards.md §3.2; hyperinflation
TLC > ULN and air trapping RV/TLC > ULN (INTERP-2022, from memory); Clay et al., Chest 2017
complex restriction (§3.3, VERIFIED). Values are built at chosen z with the GLI engines.
"""

from __future__ import annotations

import pytest

from pftwork.interpret import interpret
from pftwork.interpret.values import value_at_z
from pftwork.interpret.volumes import complex_class

SEX, AGE, HEIGHT = "male", 45.0, 178.0


def at(set_id: str, param: str, z: float) -> float:
    """Measured value at z for the test subject."""
    return value_at_z(set_id, param, SEX, AGE, HEIGHT, z)


def case(ratio_z: float, fvc_z: float, tlc_z: float | None, rvtlc_z: float | None = None) -> dict:
    """Spirometry with FVC at ``fvc_z`` and FEV1/FVC at ``ratio_z``; TLC and RV/TLC optional."""
    fvc = round(at("gli-global-2022", "FVC", fvc_z), 4)
    fev1 = round(fvc * at("gli-global-2022", "FEV1/FVC", ratio_z), 4)
    out = {"format": "pftwork-case/1",
           "subject": {"id": "vol-01", "sex": SEX, "age_years": AGE, "height_cm": HEIGHT},
           "spirometry": {"pre": {"FEV1": fev1, "FVC": fvc}}}
    if tlc_z is not None:
        tlc = round(at("gli-2021", "TLC", tlc_z), 4)
        out["volumes"] = {"TLC": tlc}
        if rvtlc_z is not None:
            out["volumes"]["RV"] = round(out["volumes"]["TLC"] * at("gli-2021", "RV/TLC", rvtlc_z), 4)
    return out


class TestRestriction:
    """Restriction needs a measured TLC below the LLN (INTERP-2022 Table 8)."""

    @pytest.mark.parametrize(("tlc_z", "restriction", "pattern"), [
        (-1.55, False, "non-specific"),  # FVC low, ratio normal, TLC normal: non-specific
        (-1.60, False, "non-specific"),
        (-1.70, True, "restriction"),    # TLC < LLN: restriction
        (-3.00, True, "restriction"),
    ])
    def test_tlc_threshold(self, tlc_z, restriction, pattern):
        """TLC z just above / below -1.645 decides restriction with a low FVC."""
        result = interpret(case(0.0, -2.2, tlc_z))

        assert (restriction, pattern) == (result.summary["restriction"], result.summary["pattern"])

    def test_low_fvc_alone_never_restriction(self):
        """INTERP-2022: a reduced FVC without TLC does not prove restriction (PRISm instead)."""
        result = interpret(case(0.0, -3.0, None))

        assert (result.summary["restriction"], result.summary["pattern"],
               result.summary["prism"]) == (None, "PRISm", True)

    @pytest.mark.parametrize(("ratio_z", "tlc_z", "pattern"), [
        (-2.0, -2.0, "mixed"),        # INTERP-2022: FEV1/FVC and TLC both < LLN
        (-2.0, -1.5, "obstruction"),  # TLC normal: pure obstruction
        (-1.5, -2.0, "restriction"),  # ratio normal, TLC low
    ])
    def test_mixed(self, ratio_z, tlc_z, pattern):
        """Common practice check: a mixed defect lowers the ratio and TLC together."""
        result = interpret(case(ratio_z, -2.5, tlc_z))

        assert pattern == result.summary["pattern"]
        assert (pattern == "mixed") == result.step("volumes").data["mixed"]

    def test_restriction_lowers_tlc_and_vc_with_normal_ratio(self):
        """Common practice check: restriction = low TLC and VC, normal FEV1/FVC."""
        result = interpret(case(0.3, -2.6, -2.6))

        assert (result.summary["pattern"], result.summary["obstruction"]) == ("restriction", False)
        assert result.step("volumes").data["restriction_severity"] == "moderate"


class TestHyperinflationAndTrapping:
    """Hyperinflation TLC > ULN; air trapping RV/TLC > ULN, reported separately."""

    @pytest.mark.parametrize(("tlc_z", "expected"), [(1.60, False), (1.70, True), (2.5, True)])
    def test_hyperinflation(self, tlc_z, expected):
        """TLC z above +1.645 is hyperinflation."""
        assert expected == interpret(case(-2.5, 0.5, tlc_z)).summary["hyperinflation"]

    @pytest.mark.parametrize(("rvtlc_z", "expected"), [(1.55, False), (1.60, False),
                                                       (1.70, True), (3.0, True)])
    def test_air_trapping(self, rvtlc_z, expected):
        """RV/TLC z above +1.645 is air trapping."""
        result = interpret(case(-2.5, 0.0, 0.0, rvtlc_z))

        assert expected == result.summary["air_trapping"]
        assert pytest.approx(rvtlc_z, abs=0.02) == result.step("volumes").data["rv_tlc_z"]

    def test_hyperinflation_raises_rv_tlc(self):
        """Common practice check: hyperinflated obstruction shows high TLC and high RV/TLC."""
        result = interpret(case(-3.0, 0.5, 2.0, 2.5))

        s = result.summary
        assert (s["hyperinflation"], s["air_trapping"], s["pattern"]) == (True, True, "obstruction")

    def test_absent_without_volumes(self):
        """No TLC: hyperinflation and air trapping are null, not false."""
        result = interpret(case(-2.5, 0.0, None))

        assert (result.summary["hyperinflation"], result.summary["air_trapping"]) == (None, None)


class TestComplexRestriction:
    """Tests for `complex_class` (Clay et al., Chest 2017; standards.md §3.3)."""

    @pytest.mark.parametrize(("tlc_pct", "fvc_pct", "expected"), [
        (72.0, 60.0, 1),      # standards.md §6 #21: difference 12 -> class 1
        (70.0, 60.0, 0),      # exactly 10: simple (strict > 10)
        (70.0, 59.99, 1),
        (75.0, 60.0, 1),      # (10, 15] -> 1
        (75.01, 60.0, 2),     # (15, 20] -> 2
        (80.0, 60.0, 2),
        (85.0, 60.0, 3),      # (20, 25] -> 3
        (85.1, 60.0, 4),      # > 25 -> 4
        (60.0, 70.0, 0),      # FVC relatively preserved: simple
        (None, 60.0, None),
    ])
    def test_classes(self, tlc_pct, fvc_pct, expected):
        """Classes follow TLC%pred - FVC%pred in 5-point steps above 10."""
        assert expected == complex_class(tlc_pct, fvc_pct)

    def test_in_chain(self):
        """A restriction with FVC far lower than TLC is labelled complex."""
        result = interpret(case(0.0, -4.5, -1.8))

        assert True is result.summary["complex_restriction"]
        assert result.summary["complex_class"] >= 1


class TestMixedAndTrappingReadings:
    """Readings that must not over-call (sources named per test)."""

    def test_complex_class_not_applied_to_mixed(self):
        """Clay et al., Chest 2017 (standards.md §3.3, VERIFIED [S22]) classify simple and
        complex restriction among restrictions and count the mixed pattern separately; a mixed
        defect gets no complex-restriction label."""
        result = interpret(case(-2.5, -3.5, -1.8))
        vol = result.step("volumes")

        assert result.summary["pattern"] == "mixed"
        assert (vol.data["complex_restriction"], vol.data["complex_class"]) == (None, None)
        assert "Complex restriction" not in result.step("synthesis").conclusion

    def test_complex_class_still_applied_to_pure_restriction(self):
        """Same FVC/TLC with a normal ratio: complex restriction (Clay 2017)."""
        result = interpret(case(0.0, -3.5, -1.8))

        assert result.summary["complex_restriction"] is True

    def test_high_ratio_from_low_tlc_not_called_air_trapping(self):
        """RV/TLC > ULN (INTERP-2022, from memory) with a low TLC and RV within limits: the
        ratio is raised by the small TLC; the text does not assert air trapping (common
        practice: air trapping needs a raised RV, RV > ULN supportive, standards.md §3.2)."""
        data = case(0.0, -3.5, -2.0)
        tlc = data["volumes"]["TLC"]
        data["volumes"]["RV"] = round(tlc * at("gli-2021", "RV/TLC", 2.5), 4)
        result = interpret(data)
        vol = result.step("volumes")

        assert result.summary["air_trapping"] is True          # published threshold kept
        assert vol.data["rv_high"] is False and vol.data["trapping_uncertain"] is True
        assert "Air trapping:" not in vol.conclusion
        assert "Air trapping." not in result.step("synthesis").conclusion
        assert "not established" in result.step("synthesis").conclusion

    def test_obstructive_trapping_still_called(self):
        """Hyperinflated obstruction with high RV/TLC keeps the air-trapping sentence."""
        result = interpret(case(-3.0, 0.5, 2.0, 2.5))

        assert "Air trapping" in result.step("volumes").conclusion
