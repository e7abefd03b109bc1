"""Step 6 (airway resistance): described against the lab's own limits, never over-read.

There is no GLI equation for sRaw/Raw (INTERP-2022 uses resistance only as support); the
case format lets a lab supply its own limits (design.md §2 ``lab_reference``).
"""

from __future__ import annotations

import pytest

from pftwork.interpret import interpret

SUBJECT = {"id": "r-01", "sex": "male", "age_years": 40, "height_cm": 175}


def _case(sraw=None, lab=None, raw=None) -> dict:
    case = {"format": "pftwork-case/1", "subject": SUBJECT,
            "spirometry": {"pre": {"FEV1": 3.5, "FVC": 4.5}}}
    if sraw is not None or raw is not None:
        case["airway_resistance"] = {k: v for k, v in (("sRaw", sraw), ("Raw", raw))
                                     if v is not None} | {"unit": "kPa*s"}
    if lab:
        case["lab_reference"] = lab
    return case


class TestResistance:
    """Tests for the resistance step."""

    @pytest.mark.parametrize(("sraw", "elevated"), [(1.6, True), (1.21, True), (1.2, False),
                                                    (0.8, False)])
    def test_against_lab_uln(self, sraw, elevated):
        """sRaw above the lab's ULN (1.2 kPa*s) is elevated; at the ULN it is not (strict >)."""
        step = interpret(_case(sraw, {"sRaw": {"predicted": 0.9, "uln": 1.2}})).step("resistance")

        assert elevated == step.data["elevated"]
        assert "laboratory" in step.conclusion and step.data["reference"] == "lab"

    def test_without_reference_no_judgement(self):
        """Without lab limits the value is reported and the lack of a range is said."""
        step = interpret(_case(1.6)).step("resistance")

        assert (step.data["elevated"], step.status) == (None, "no_reference")
        assert "no reference range" in step.conclusion

    def test_not_measured(self):
        """No resistance block: not assessed."""
        step = interpret(_case()).step("resistance")

        assert (step.status, step.data["sraw"]) == ("not_assessed", None)

    def test_never_sets_pattern(self):
        """A high sRaw alone does not create an obstructive pattern."""
        result = interpret(_case(3.0, {"sRaw": {"uln": 1.2}}))

        assert (result.summary["pattern"], result.summary["resistance_elevated"]) == ("normal", True)


class TestCaseUnit:
    """sRaw given in cmH2O*s is compared with lab limits in that same unit (design.md §2:
    the lab's limits are in the parameter's own unit; 1 kPa = 10.197 cmH2O, SI definition of
    the cmH2O, 98.0665 Pa)."""

    def test_cmh2o_against_cmh2o_limits(self):
        """29.6 cmH2O*s (= 2.90 kPa*s) against a lab ULN of 12.2 cmH2O*s is elevated."""
        case = _case(lab={"sRaw": {"predicted": 9.2, "uln": 12.2}})
        case["airway_resistance"] = {"sRaw": 29.6, "Raw": 3.0, "unit": "cmH2O*s"}
        result = interpret(case)
        item = result.values["resistance"]["sRaw"]

        assert (item["measured"], item["unit"]) == (pytest.approx(29.6), "cmH2O*s")
        assert result.values["resistance"]["Raw"]["unit"] == "cmH2O*s/L"
        assert result.values["resistance"]["Raw"]["measured"] == pytest.approx(3.0)
        assert result.step("resistance").data["elevated"] is True
        assert item["percent_predicted"] == pytest.approx(100 * 29.6 / 9.2)
