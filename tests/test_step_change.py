"""Step 7 (change over time).

Sources: INTERP-2005 Table 12 year-to-year limits FEV1 >= 15 %, FVC >= 15 %, DLCO > 10 %
(standards.md §3.6, VERIFIED [S16b]); INTERP-2022 conditional change score and FEV1Q (VERIFIED
[S17a]; vectors §6 #3-#5); the least-squares slope CI is common practice, checked here against a
hand computation with the textbook t quantile t(0.975, 2) = 4.303.
"""

from __future__ import annotations

import pytest

from pftwork.case import load_case
from pftwork.interpret import interpret
from pftwork.interpret.change import ccs, fev1_slope, fev1q, history_values


def _case(fev1_now: float, history: list[tuple[str, float]], age: float = 50.0,
          dlco: tuple[float, float] | None = None, sex: str = "female") -> dict:
    """Current FEV1 on 2026-06-01 and earlier (date, FEV1) tests; FVC fixed at 3.4 L."""
    case = {"format": "pftwork-case/1",
            "subject": {"id": "c-01", "sex": sex, "age_years": age, "height_cm": 165.0},
            "test": {"date": "2026-06-01"},
            "spirometry": {"pre": {"FEV1": fev1_now, "FVC": 3.4}},
            "history": [{"test": {"date": d}, "spirometry": {"pre": {"FEV1": f, "FVC": 3.4}}}
                        for d, f in history]}
    if dlco:
        case["diffusion"] = {"unit": "SI", "DLCO": dlco[1], "VA": 4.5}
        case["history"][-1]["diffusion"] = {"unit": "SI", "DLCO": dlco[0], "VA": 4.5}
    return case


class TestPublishedScores:
    """Tests for `ccs` and `fev1q`."""

    def test_ccs_vector(self):
        """Age 10, 1 year, z -1 -> -2: r 0.802, CCS -2.006, outside +/-1.96 (§6 #5)."""
        score, r = ccs(-1.0, -2.0, 1.0, 10.0)

        assert pytest.approx(0.802) == r
        assert pytest.approx(-2.006, abs=5e-4) == score

    @pytest.mark.parametrize(("fev1", "sex", "expected"), [(0.9, "female", 2.25),
                                                           (1.0, "male", 2.00)])
    def test_fev1q(self, fev1, sex, expected):
        """FEV1Q = FEV1 / 0.4 L (women) or 0.5 L (men) (INTERP-2022; §6 #3, #4)."""
        assert pytest.approx(expected) == fev1q(fev1, sex)


class TestSlope:
    """Tests for `fev1_slope` (least squares; common practice)."""

    def test_hand_computed(self):
        """Ages 0-3, FEV1 3.000/3.010/3.010/3.030 L: slope 9 mL/y, CI 9 +/- 4.303*sqrt(7)."""
        slope, (lo, hi) = fev1_slope([0.0, 1.0, 2.0, 3.0], [3.000, 3.010, 3.010, 3.030])

        assert pytest.approx(9.0) == slope
        assert pytest.approx(9.0 - 4.3027 * 7 ** 0.5, abs=0.01) == lo
        assert pytest.approx(9.0 + 4.3027 * 7 ** 0.5, abs=0.01) == hi

    def test_slope_in_chain(self):
        """Three tests a year apart losing 100 mL/year give a -100 mL/year slope."""
        step = interpret(_case(2.60, [("2024-06-01", 2.80), ("2025-06-01", 2.70)])).step("change")

        assert pytest.approx(-100.0, abs=1.0) == step.data["slope_ml_per_year"]
        assert step.data["n_tests"] == 3

    def test_no_slope_with_two_tests(self):
        """Two tests give a change but no slope."""
        step = interpret(_case(2.60, [("2025-06-01", 2.70)])).step("change")

        assert step.data["slope_ml_per_year"] is None


class TestDeclineBeyondAgeing:
    """The FEV1 slope against the decline of the predicted value (our own comparison, using the
    reference equation's predicted FEV1 at each test's age) and the 40 mL/year "rapid decline"
    cut (common practice, value from memory)."""

    def test_steep_regular_decline_is_flagged(self):
        """120 mL/year over four yearly tests (tight fit): beyond ageing and rapid."""
        history = [("2022-06-01", 3.00), ("2023-06-01", 2.88), ("2024-06-01", 2.76),
                   ("2025-06-01", 2.64)]
        data = interpret(load_case(_case(2.52, history))).step("change").data

        assert pytest.approx(-120.0, abs=1.0) == data["slope_ml_per_year"]
        assert data["expected_slope_ml_per_year"] < 0
        assert data["excess_decline"] is True
        assert data["rapid_decline"] is True
        assert "decline" == data["direction"]

    def test_decline_at_the_predicted_rate_is_not_flagged(self):
        """A fall equal to that of the predicted FEV1 is ageing, not excess decline."""
        from pftwork.reference import reference_values

        ages = [46.0, 47.0, 48.0, 49.0, 50.0]
        pred = reference_values("gli-global-2022", "FEV1", "female", ages, 165.0).predicted
        dates = ["2022-06-01", "2023-06-01", "2024-06-01", "2025-06-01"]
        history = [(d, round(float(p) - 0.2, 3)) for d, p in zip(dates, pred[:4], strict=True)]
        data = interpret(load_case(_case(round(float(pred[4]) - 0.2, 3), history))).step(
            "change").data

        assert data["excess_decline"] is False
        assert data["rapid_decline"] is False
        assert pytest.approx(data["expected_slope_ml_per_year"], abs=2.0) == \
            data["slope_ml_per_year"]


class TestThresholds2005:
    """INTERP-2005 Table 12 year-to-year limits."""

    @pytest.mark.parametrize(("before", "now", "significant"), [
        (2.00, 1.70, True),    # -15.0 %: >= 15 % is significant
        (2.00, 1.71, False),   # -14.5 %
        (2.00, 2.30, True),    # +15 % increase is also a change
        (2.00, 1.90, False),
    ])
    def test_fev1(self, before, now, significant):
        """FEV1 change of 15 % or more over a year is significant."""
        step = interpret(_case(now, [("2025-06-01", before)])).step("change")

        assert significant == step.data["significant"]["FEV1"]
        assert pytest.approx((now - before) / before * 100, abs=0.01) == \
            step.data["changes"]["FEV1"]["percent"]

    @pytest.mark.parametrize(("before", "now", "significant"), [
        (7.00, 6.30, False),   # -10.0 %: DLCO needs > 10 %
        (7.00, 6.29, True),    # -10.1 %
    ])
    def test_dlco(self, before, now, significant):
        """DLCO change must exceed 10 % over a year."""
        step = interpret(_case(2.5, [("2025-06-01", 2.5)], dlco=(before, now))).step("change")

        assert significant == step.data["significant"]["DLCO"]

    def test_decline_named(self):
        """A significant fall is called a decline in the summary."""
        result = interpret(_case(1.60, [("2025-06-01", 2.00)]))

        assert (result.step("change").status, result.summary["change"]) == ("decline", "decline")


class TestAgeGroups:
    """Children get the CCS, adults FEV1Q (INTERP-2022)."""

    def test_child_ccs(self):
        """A 12-year-old gets a conditional change score, no FEV1Q."""
        step = interpret(_case(2.2, [("2025-06-01", 2.4)], age=12.0)).step("change")

        assert step.data["ccs"] is not None and step.data["fev1q"] is None
        assert pytest.approx(0.642 - 0.04 * 1.0 + 0.02 * 11.0, abs=0.002) == step.data["ccs"]["r"]

    def test_adult_fev1q(self):
        """A 50-year-old woman gets FEV1Q = FEV1/0.4."""
        step = interpret(_case(1.0, [("2025-06-01", 1.1)])).step("change")

        assert pytest.approx(2.5) == step.data["fev1q"]

    def test_no_history(self):
        """Without earlier tests the step is not assessed."""
        step = interpret(_case(2.5, [])).step("change")

        assert (step.status, step.data["slope_ml_per_year"]) == ("not_assessed", None)


class TestHistoryValues:
    """Tests for `history_values` (used by the worksheet's trend plot)."""

    def test_prior_entry(self):
        """An earlier test is evaluated at its own age with the current equations."""
        case = load_case(_case(2.5, [("2024-06-01", 2.7)]))
        vals = history_values(case, case.history[0], {"spirometry": "gli-global-2022",
                                                     "volumes": "gli-2021",
                                                     "diffusion": "gli-2017"}, "female")

        assert vals["FEV1"]["measured"] == 2.7
        assert vals["FEV1"]["age_years"] == pytest.approx(48.0, abs=0.01)
        assert vals["FEV1"]["z"] is not None


class TestWording:
    """The text labels a change in z as a change, so it is not read as the current z-score
    (INTERP-2022 reports change over time as change in z / CCS; standards.md §3.6)."""

    def test_z_change_labelled(self):
        """FEV1 2.00 -> 1.70 L: the text says 'z change', never a bare 'z -0.xx'."""
        step = interpret(_case(1.70, [("2025-06-01", 2.00)])).step("change")
        dz = step.data["changes"]["FEV1"]["z_change"]

        assert f"z change {dz:+.2f}" in step.conclusion
        assert f", z {dz:+.2f}" not in step.conclusion


class TestCcsDomain:
    """INTERP-2022 CCS: r = 0.642 - 0.04*years + 0.020*age (standards.md §3.6, VERIFIED
    [S17a]); CCS divides by sqrt(1 - r^2), so r >= 1 (age ~17.9 y, interval of days) has no
    score — the step says so instead of failing."""

    def test_r_at_or_above_one_no_crash(self):
        """Age 17.97 y at the earlier test, 10 days apart: r = 1.0006 -> no CCS, no exception."""
        case = {"format": "pftwork-case/1",
                "subject": {"id": "c-r1", "sex": "male", "age_years": 18.0, "height_cm": 175.0},
                "test": {"date": "2026-06-11"},
                "spirometry": {"pre": {"FEV1": 3.9, "FVC": 4.6}},
                "history": [{"test": {"date": "2026-06-01"},
                             "spirometry": {"pre": {"FEV1": 3.95, "FVC": 4.6}}}]}
        step = interpret(case).step("change")

        assert step.data["ccs"] is None
        assert "not defined" in step.conclusion
