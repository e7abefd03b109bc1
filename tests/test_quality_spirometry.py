"""Spirometry acceptability, repeatability, grades and selection (pftwork.quality.spirometry).

Sources (through standards.md, whose tags say how each was checked):
SPIRO-2019 = Graham et al., AJRCCM 2019;200:e70 — §2.1 acceptability (BEV max(0.100 L, 5 % FVC),
EOFE, FIVC rule), §2.2 usable vs acceptable (FROM MEMORY), §2.3 repeatability (0.150 L above 6 y;
max(0.100 L, 10 %) at 6 y or under), §2.4 grades (adult A-D numbers VERIFIED via Hankinson 2015;
child C/D, E, U, F FROM MEMORY), §2.5 selection (largest FEV1 and FVC, best test = largest sum).
Check values: standards.md §6 #14-19. All trials are invented.
Volumes are compared in whole mL (documented in the module): 2.65 - 2.50 is exactly 0.150 L.
"""

from __future__ import annotations

import json

import pytest

from pftwork.case_model import Curve, SpiroTrial
from pftwork.errors import CaseError, CurveError
from pftwork.quality import quality_block
from pftwork.quality.spirometry import (
    assess_spirometry_set,
    grade_values,
    not_assessable,
    repeatability_tolerance_l,
)
from pftwork.quality.synthetic import synthetic_manoeuvre

GOOD = {"BEV": 0.05, "FET": 9.0, "plateau": True}


def _trial(fev1: float, fvc: float, **kw: object) -> SpiroTrial:
    """A summary-only trial that passes every criterion unless overridden."""
    fields = {**GOOD, "FIVC": fvc, **kw}
    return SpiroTrial(FEV1=fev1, FVC=fvc, **fields)


def _fev1_set(values: list[float], age: float = 40.0) -> str:
    trials = [_trial(v, 4.0 + 0.01 * i) for i, v in enumerate(values)]
    return assess_spirometry_set(trials, age).FEV1_grade


class TestGradeCheckValues:
    """standards.md §6 #14-16 (DERIVED from SPIRO-2019 §2.3-2.4)."""

    def test_14_three_acceptable(self) -> None:
        """#14: adult, FEV1 2.50/2.42/2.30 -> difference 0.08 L -> grade A."""
        q = assess_spirometry_set([_trial(2.50, 3.4), _trial(2.42, 3.41), _trial(2.30, 3.39)], 40)

        assert q.FEV1_grade == "A"
        assert q.repeatability.fev1_diff_l == pytest.approx(0.080)

    def test_15_two_acceptable(self) -> None:
        """#15: adult, 2 acceptable FEV1 2.50/2.31 -> 0.19 L -> grade C (>= 2, <= 0.200 L)."""
        assert _fev1_set([2.50, 2.31]) == "C"

    def test_16_child(self) -> None:
        """#16: age 5, FEV1 1.20/1.09 -> tolerance max(0.100, 0.12) = 0.12, diff 0.11 -> B."""
        q = assess_spirometry_set([_trial(1.20, 1.4), _trial(1.09, 1.39)], 5.0)

        assert repeatability_tolerance_l(5.0, 1.20) == pytest.approx(0.12)
        assert q.FEV1_grade == "B"
        assert q.repeatability.fev1_repeatable


class TestGradeBoundaries:
    """Every grade boundary of SPIRO-2019 §2.4 (adult numbers VERIFIED [S14])."""

    @pytest.mark.parametrize(("values", "grade"), [
        ([2.65, 2.50, 2.40], "A"),   # 0.150 exactly (2.65 - 2.50 in floating point)
        ([2.651, 2.50, 2.40], "C"),  # 0.151
        ([2.65, 2.50], "B"),         # 2 acceptable, 0.150
        ([2.70, 2.50, 2.45], "C"),   # 0.200 exactly
        ([2.701, 2.50], "D"),        # 0.201
        ([2.75, 2.50, 2.45], "D"),   # 0.250 exactly
        ([2.751, 2.50, 2.45], "E"),  # 0.251
        ([2.50], "E"),               # one acceptable
    ])
    def test_adult(self, values: list[float], grade: str) -> None:
        """Adult grades A-E at and just beyond 0.150 / 0.200 / 0.250 L."""
        assert _fev1_set(values) == grade

    @pytest.mark.parametrize(("values", "grade"), [
        ([1.00, 0.90, 0.85], "A"),   # child A/B tolerance max(0.100, 0.100) = 0.100, diff 0.100
        ([1.00, 0.899], "C"),        # 0.101 > 0.100; C: max(0.150, 0.100)
        ([1.00, 0.85], "C"),         # 0.150 exactly
        ([1.00, 0.849], "D"),        # 0.151; D: max(0.200, 0.100)
        ([1.00, 0.80], "D"),         # 0.200 exactly
        ([1.00, 0.799], "E"),        # 0.201
        ([2.50, 2.25], "B"),         # 10 % of 2.50 = 0.250 > 0.100 -> A/B tolerance 0.250
    ])
    def test_child(self, values: list[float], grade: str) -> None:
        """Age <= 6 grades with max(volume, 10 % of largest) (FROM MEMORY for C/D)."""
        assert _fev1_set(values, age=5.5) == grade

    @pytest.mark.parametrize(("age", "grade"), [(6.0, "B"), (6.01, "C")])
    def test_age_six_switch(self, age: float, grade: str) -> None:
        """FEV1 2.00/1.82 (0.18 L): at 6 y tolerance 10 % = 0.200 -> B; above 6 y 0.150 -> C."""
        assert _fev1_set([2.00, 1.82], age=age) == grade

    def test_grade_u(self) -> None:
        """Zero acceptable but one usable FEV1 and FVC -> grade U, value reported with a note."""
        bad_fivc = _trial(2.40, 3.00, FIVC=3.50)   # FIVC rule fails acceptability only
        q = assess_spirometry_set([bad_fivc], 40)

        assert (q.FEV1_grade, q.FVC_grade) == ("U", "U")
        assert q.selected["FEV1"] == 2.40
        assert any("usable but not acceptable" in n and "grade U" in n for n in q.notes)

    def test_grade_f(self) -> None:
        """No usable manoeuvre (leak, SPIRO-2019 §2.2) -> grade F, nothing selected."""
        q = assess_spirometry_set([_trial(2.40, 3.00, leak=True)], 40)

        assert (q.FEV1_grade, q.FVC_grade) == ("F", "F")
        assert "FEV1" not in q.selected

    def test_grade_values_direct(self) -> None:
        """grade_values is usable on its own (0 acceptable, 0 usable -> F)."""
        assert grade_values([], 0, 30) == "F"
        assert grade_values([], 2, 30) == "U"


class TestAcceptability:
    """SPIRO-2019 §2.1 per-manoeuvre criteria (standards.md check values #17-19)."""

    @pytest.mark.parametrize(("fvc", "fivc", "ok"), [
        (4.00, 4.15, True),    # #17: limit max(0.100, 0.200) = 0.200
        (1.50, 1.62, False),   # #18: limit max(0.100, 0.075) = 0.100; 0.120 > 0.100
        (4.00, 4.20, True),    # exactly 0.200 (4.2 - 4.0 in floating point)
        (4.00, 4.201, False),
        (1.50, 1.60, True),    # exactly 0.100
    ])
    def test_fivc_rule(self, fvc: float, fivc: float, ok: bool) -> None:
        """FIVC - FVC > max(0.100 L, 5 % FVC) makes FEV1 and FVC not acceptable (still usable)."""
        m = assess_spirometry_set([_trial(0.8 * fvc, fvc, FIVC=fivc)], 40).maneuvers[0]

        assert (m.fev1_acceptable, m.fvc_acceptable) == (ok, ok)
        assert m.fev1_usable and m.fvc_usable
        assert ok == (not any("FIVC - FVC" in r for r in m.reasons))

    @pytest.mark.parametrize(("fvc", "bev", "ok"), [
        (1.50, 0.09, True),    # #19: limit max(0.100, 0.075) = 0.100
        (1.50, 0.100, True),
        (1.50, 0.101, False),
        (3.00, 0.150, True),   # 5 % of 3.00 = 0.150
        (3.00, 0.151, False),
    ])
    def test_bev(self, fvc: float, bev: float, ok: bool) -> None:
        """BEV <= max(0.100 L, 5 % FVC); a failing BEV fails acceptability and usability."""
        m = assess_spirometry_set([_trial(0.8 * fvc, fvc, BEV=bev)], 40).maneuvers[0]

        assert (m.fev1_acceptable, m.fvc_acceptable, m.fev1_usable, m.fvc_usable) == (ok,) * 4
        if not ok:
            assert f"BEV {bev:.3f} L > {max(0.1, 0.05 * fvc):.3f} L allowed" in m.reasons

    def test_hesitation(self) -> None:
        """Hesitation > 2 s fails acceptability (FROM MEMORY) but not usability."""
        m = assess_spirometry_set([_trial(2.0, 2.5, hesitation_s=2.5)], 40).maneuvers[0]

        assert not m.fev1_acceptable and m.fev1_usable

    def test_cough(self) -> None:
        """Cough in the first second: FEV1 neither acceptable nor usable; FVC unaffected."""
        m = assess_spirometry_set([_trial(2.0, 2.5, cough=True)], 40).maneuvers[0]

        assert (m.fev1_acceptable, m.fev1_usable, m.fvc_acceptable) == (False, False, True)

    def test_glottic_closure(self) -> None:
        """Glottic closure (timing unknown, read as first second): nothing acceptable or usable."""
        m = assess_spirometry_set([_trial(2.0, 2.5, glottic_closure=True)], 40).maneuvers[0]

        assert not (m.fev1_acceptable or m.fvc_acceptable or m.fev1_usable or m.fvc_usable)

    @pytest.mark.parametrize(("fet", "ok"), [(15.0, True), (14.99, False)])
    def test_fet_15(self, fet: float, ok: bool) -> None:
        """Without plateau, FET >= 15 s meets EOFE (SPIRO-2019 EOFE 2); FEV1 stays acceptable."""
        m = assess_spirometry_set([_trial(2.0, 2.5, plateau=False, FET=fet)], 40).maneuvers[0]

        assert m.fvc_acceptable == ok
        assert m.fev1_acceptable
        assert m.fvc_usable

    @pytest.mark.parametrize(("fvc", "ok"), [(3.00, True), (2.99, False), (3.30, True)])
    def test_eofe_repeatable_fvc(self, fvc: float, ok: bool) -> None:
        """No plateau, FET < 15 s: EOFE met when FVC >= largest other FVC - 0.150 L (EOFE 3)."""
        trials = [_trial(2.4, 3.15), _trial(2.3, fvc, plateau=False, FET=4.0)]
        m = assess_spirometry_set(trials, 40).maneuvers[1]

        assert m.fvc_acceptable == ok
        assert (m.eofe is not None) == ok

    def test_eofe_set_level_reevaluation(self) -> None:
        """A later larger FVC makes an earlier short blow unacceptable (whole-set rule)."""
        short = _trial(2.3, 3.00, plateau=False, FET=4.0)
        before = assess_spirometry_set([short, _trial(2.4, 3.10)], 40).maneuvers[0]
        after = assess_spirometry_set([short, _trial(2.4, 3.10), _trial(2.5, 3.40)], 40)

        assert before.fvc_acceptable
        assert not after.maneuvers[0].fvc_acceptable

    def test_early_termination_flag(self) -> None:
        """A reported early termination means EOFE not met, even with a repeatable FVC."""
        trials = [_trial(2.4, 3.0), _trial(2.4, 3.0, early_termination=True, plateau=None)]
        m = assess_spirometry_set(trials, 40).maneuvers[1]

        assert not m.fvc_acceptable and m.fvc_usable
        assert "early termination reported" in m.reasons

    def test_unchecked_fields(self) -> None:
        """A trial with only FEV1 and FVC is judged on what is known; the rest is listed."""
        q = assess_spirometry_set([SpiroTrial(FEV1=2.0, FVC=2.5)], 40)

        assert "BEV (start of test)" in q.maneuvers[0].unchecked
        assert any("not checked" in n for n in q.notes)


class TestSelection:
    """SPIRO-2019 §2.5: largest FEV1 and FVC, possibly from different manoeuvres."""

    def test_different_maneuvers(self) -> None:
        """FEV1 from #2, FVC from #1; ratio = largest FEV1 / largest FVC; flows from best test."""
        trials = [_trial(2.40, 3.50, PEF=7.0), _trial(2.50, 3.30, PEF=8.0),
                  _trial(2.46, 3.45, PEF=7.5)]
        q = assess_spirometry_set(trials, 40)

        assert (q.selected["FEV1"], q.selected["FVC"]) == (2.50, 3.50)
        assert q.selected["FEV1/FVC"] == pytest.approx(2.50 / 3.50)
        assert (q.selected_from["FEV1"], q.selected_from["FVC"]) == (1, 0)
        assert q.selected_from["best_test"] == 2     # 2.46 + 3.45 = 5.91 is the largest sum
        assert q.selected["PEF"] == 7.5

    def test_unacceptable_larger_value_ignored(self) -> None:
        """A larger FEV1 from a coughed manoeuvre is not selected."""
        q = assess_spirometry_set([_trial(2.40, 3.0), _trial(2.90, 3.0, cough=True)], 40)

        assert q.selected["FEV1"] == 2.40

    def test_not_assessable(self) -> None:
        """No trials -> 'not assessable' for both grades, explained in notes."""
        q = assess_spirometry_set([], 40, phase="post")

        assert (q.FEV1_grade, q.FVC_grade) == ("not assessable", "not assessable")
        assert q.to_dict()["notes"] == list(not_assessable("post").notes)

    @pytest.mark.parametrize("age", [None, -1.0, 130.0])
    def test_bad_age(self, age: object) -> None:
        """Age missing or impossible -> CaseError naming subject.age_years."""
        with pytest.raises(CaseError, match="subject.age_years"):
            assess_spirometry_set([_trial(2.0, 2.5)], age)  # type: ignore[arg-type]


class TestWithCurves:
    """Curves fill missing summary fields; the lab's fields win (disagreements noted)."""

    def test_curves_only(self) -> None:
        """Three synthetic blows of 4.50/4.45/4.40 L vital capacity: grade A, values from curves."""
        ms = [synthetic_manoeuvre(vc_l=v, seed=i, noise_l=0.001, rate_hz=137)
              for i, v in enumerate((4.50, 4.45, 4.40))]
        q = assess_spirometry_set([SpiroTrial(curve=m.curve) for m in ms], 40)

        assert (q.FEV1_grade, q.FVC_grade) == ("A", "A")
        assert abs(q.selected["FVC"] - ms[0].truth["FVC"]) <= 0.010
        assert abs(q.selected["FEV1"] - ms[0].truth["FEV1"]) <= 0.010
        assert "FEF50" in q.selected and "PIF" in q.selected
        json.dumps(q.to_dict(with_curves=True))

    def test_lab_value_wins(self) -> None:
        """A lab FEV1 0.2 L off the curve is used, and the disagreement is noted."""
        m = synthetic_manoeuvre()
        lab = round(m.truth["FEV1"] + 0.2, 2)
        q = assess_spirometry_set([SpiroTrial(FEV1=lab, curve=m.curve)], 40)

        assert q.selected["FEV1"] == lab
        assert any("FEV1: lab" in n for n in q.notes)

    def test_curve_cough(self) -> None:
        """A flow interruption in the curve's first second fails FEV1 like a cough."""
        m = synthetic_manoeuvre(cough_at_s=0.3)
        man = assess_spirometry_set([SpiroTrial(curve=m.curve)], 40).maneuvers[0]

        assert not man.fev1_acceptable and not man.fev1_usable
        assert any("flow interruption" in r for r in man.reasons)

    def test_curve_hesitation(self) -> None:
        """A hesitant start (curve BEV ~0.25 L on a 4.5 L FVC) fails the BEV criterion."""
        m = synthetic_manoeuvre(hesitation_volume_l=0.25, hesitation_time_s=0.4)
        man = assess_spirometry_set([SpiroTrial(curve=m.curve)], 40).maneuvers[0]

        assert not man.fev1_acceptable
        assert any(r.startswith("BEV") and "0.225 L allowed" in r for r in man.reasons)

    def test_curve_short_blow(self) -> None:
        """A 1.5-s blow alone: no EOFE, FVC usable not acceptable -> FVC grade U."""
        q = assess_spirometry_set([SpiroTrial(curve=synthetic_manoeuvre(
            expiration_time_s=1.5).curve)], 40)

        assert (q.FEV1_grade, q.FVC_grade) == ("E", "U")

    def test_bad_curve_field(self) -> None:
        """A bad curve raises CurveError naming spirometry.<phase>.trials[i].curve."""
        bad = Curve(time_s=[0.0, 0.1], volume_l=[0.0, 1.0])
        with pytest.raises(CurveError, match=r"spirometry\.post\.trials\[1\]\.curve"):
            assess_spirometry_set([_trial(2.0, 2.5), SpiroTrial(curve=bad)], 40, phase="post")


class TestQualityBlock:
    """design.md §5 quality block."""

    def test_keys(self) -> None:
        """FEV1_grade/FVC_grade from the pre set, DLCO_grade None without diffusion, notes list."""
        pre = assess_spirometry_set([_trial(2.5, 3.2), _trial(2.42, 3.15)], 40)
        post = not_assessable("post")
        block = quality_block(pre, post)

        assert (block["FEV1_grade"], block["FVC_grade"], block["DLCO_grade"]) == ("B", "B", None)
        assert block["spirometry"]["post"]["FEV1_grade"] == "not assessable"
        assert any(n.startswith("post:") for n in block["notes"])
        json.dumps(block)
