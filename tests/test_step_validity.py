"""Step 1 (validity): quality grades gate the interpretation chain.

Grade meanings follow the ATS/ERS 2019 spirometry standard (SPIRO-2019) grading table
(standards.md §2.4): A-C usable as such, D/E/U reported with caution, F not usable.
"""

from __future__ import annotations

import pytest

from pftwork.case import load_case
from pftwork.interpret import STEP_IDS, run_steps
from pftwork.interpret.validity import validity
from pftwork.interpret.values import DEFAULT_EQUATIONS

SUBJECT = {"id": "v-01", "sex": "female", "age_years": 50.0, "height_cm": 165.0}


def _case(**blocks):
    return load_case({"format": "pftwork-case/1", "subject": SUBJECT, **blocks})


def _values(measured: bool = True) -> dict:
    item = {"measured": 2.5 if measured else None, "z": -0.2}
    return {"pre": {"FEV1": item}, "post": {}, "volumes": {}, "diffusion": {}}


class TestValidity:
    """Tests for `validity`."""

    @pytest.mark.parametrize(("fev1", "fvc", "status", "stop"), [
        ("A", "A", "acceptable", False),   # SPIRO-2019: A-C interpretable
        ("B", "C", "acceptable", False),
        ("D", "A", "low_quality", False),  # SPIRO-2019: D reported with caution
        ("A", "E", "low_quality", False),
        ("U", "U", "low_quality", False),  # usable but not acceptable
        ("F", "A", "low_quality", False),  # one parameter unusable, the other interpretable
        ("F", "F", "stop", True),          # nothing usable: chain stops
        (None, None, "not_graded", False),  # reported values only
    ])
    def test_grades(self, fev1, fvc, status, stop):
        """Each grade combination gives the documented status and stop flag."""
        f = validity(_case(spirometry={"pre": {"FEV1": 2.5, "FVC": 3.2}}), _values(),
                     {"FEV1_grade": fev1, "FVC_grade": fvc, "DLCO_grade": None, "notes": []})

        assert (status, stop) == (f.status, f.data["stop"])

    def test_no_measured_values_stops(self):
        """A session without a single measured value is not interpreted."""
        f = validity(_case(spirometry={"pre": {"FEV1": 2.5, "FVC": 3.2}}), _values(False),
                     {"FEV1_grade": None, "FVC_grade": None, "notes": []})

        assert f.status == "stop"

    def test_low_grade_flag_in_text(self):
        """A low grade is named in the conclusion, not hidden."""
        f = validity(_case(spirometry={"pre": {"FEV1": 2.5, "FVC": 3.2}}), _values(),
                     {"FEV1_grade": "D", "FVC_grade": "B", "notes": []})

        assert "caution" in f.conclusion and f.data["low_quality"] is True

    def test_dlco_grade_f_marks_diffusion_unusable(self):
        """DLCO grade F (DLCO-2017: not reported) makes gas transfer unusable, not the chain."""
        f = validity(_case(spirometry={"pre": {"FEV1": 2.5, "FVC": 3.2}}), _values(),
                     {"FEV1_grade": "A", "FVC_grade": "A", "DLCO_grade": "F", "notes": []})

        assert (f.data["diffusion_usable"], f.data["stop"]) == (False, False)


class TestChainStops:
    """A stop at validity propagates to every later step."""

    def test_all_later_steps_stopped(self):
        """With FEV1 and FVC both grade F every later step says it was not interpreted."""
        case = _case(spirometry={"pre": {"FEV1": 1.2, "FVC": 3.2}},
                     volumes={"TLC": 4.0, "RV": 1.5})
        values = {"pre": {"FEV1/FVC": {"measured": 0.375, "z": -5.0}}, "post": {},
                  "volumes": {"TLC": {"measured": 4.0, "z": -2.0}}, "diffusion": {}}
        steps = run_steps(case, values, {"FEV1_grade": "F", "FVC_grade": "F", "notes": []},
                          dict(DEFAULT_EQUATIONS), "female")

        assert list(STEP_IDS) == list(steps)
        assert {"stopped"} == {steps[k].status for k in STEP_IDS[1:-1]}
        assert steps["synthesis"].data["pattern"] is None
        assert steps["airflow"].data["obstruction"] is None

    def test_unusable_trials_stop_interpret(self):
        """Trials flagged with a leak (not usable, SPIRO-2019) grade F and stop the chain."""
        from pftwork.interpret import interpret

        trials = [{"FEV1": 2.4, "FVC": 3.1, "leak": True, "BEV": 0.05, "FET": 8, "plateau": True}
                  for _ in range(3)]
        result = interpret(_case(spirometry={"pre": {"trials": trials}}))

        assert (result.quality["FEV1_grade"], result.quality["FVC_grade"]) == ("F", "F")
        assert result.step("validity").status == "stop"
        assert result.summary["pattern"] is None


class TestExtrapolation:
    """Values outside an equation's published age range are flagged (GLI 2017 TLCO: 5-85 y)."""

    def test_flagged(self):
        """An 88-year-old's DLCO is computed but named as extrapolated."""
        from pftwork.interpret import interpret

        case = {"format": "pftwork-case/1",
                "subject": {"id": "v-02", "sex": "male", "age_years": 88, "height_cm": 170},
                "diffusion": {"unit": "SI", "DLCO": 6.0, "VA": 5.0}}
        result = interpret(case)

        assert "diffusion.DLCO" in result.step("validity").data["extrapolated"]
        assert "extrapolated" in result.step("validity").conclusion
        assert result.summary["extrapolated"] is True


def test_resistance_only_is_a_measured_value():
    """A case with only plethysmographic sRaw is not 'no usable measured value': the
    resistance step reports it (INTERP-2022: resistance may support the assessment;
    design.md §2: every block but subject is optional)."""
    from pftwork.interpret import interpret

    result = interpret({"format": "pftwork-case/1",
                        "subject": {"id": "v-r", "sex": "male", "age_years": 40,
                                    "height_cm": 175},
                        "airway_resistance": {"sRaw": 0.9, "unit": "kPa*s"}})

    assert result.step("validity").data["stop"] is False
    assert "sRaw 0.90" in result.step("resistance").conclusion
    assert result.summary["pattern"] is None
