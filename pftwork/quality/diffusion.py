"""Single-breath DLCO manoeuvre grades, repeatability and reported values (DLCO-2017).

Units: SI internally (DLCO mmol/min/kPa, KCO mmol/min/kPa/L, VA and IVC L, times s).

Per-manoeuvre grade (standards.md §4.3, VERIFIED-2nd [S40]; D row low confidence):

===== ====================================================== ============ ==============
grade inspired volume IVC / largest VC                          breath-hold  sample time
===== ====================================================== ============ ==============
A     >= 0.90, or >= 0.85 with VA within max(0.200 L, 5 %)     8-12 s       <= 4 s
      of the largest VA
B     >= 0.85                                                  8-12 s       <= 4 s
C     >= 0.80                                                  8-12 s       <= 5 s
D     >= 0.80                                                  < 8 or > 12  <= 5 s
F     none of the above
===== ====================================================== ============ ==============

Our readings, documented: the "largest VA" is that of the other manoeuvres that are grade A
without the VA rule (IVC/VC >= 0.90, breath-hold and sample time in range), so a test cannot
qualify on its own VA; ratios are rounded to 0.001 and times to 0.01 s
before comparison; a criterion whose data are absent is not checked (treated as met, listed in
``unchecked``); with none of IVC, breath-hold and sample time known a manoeuvre is not gradable.
An inspiration time >= 4 s is noted (DLCO-2005 "VI in < 4 s", VERIFIED [S25]) without changing
the grade.

Repeatability: two grade-A tests within 0.67 mmol/min/kPa (2 mL/min/mmHg; DLCO-2017, FROM
MEMORY / VERIFIED-2nd), compared after rounding to 0.001. Reported value (DLCO, VA, KCO, IVC,
breath-hold): mean of the grade-A tests that are within the limit of another grade-A test when
any two are (acceptable and repeatable, DLCO-2017 reporting table [S26]), else of all grade-A
tests; one grade-A test alone; otherwise the mean of the
best-graded (B-D) tests with a caution; nothing from grade F (standards.md §4.3). Session grade:
the grade of the tests reported.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import combinations
from typing import Any

from pftwork.case_model import DiffusionTrial
from pftwork.errors import CaseError

__all__ = [
    "DLCO_REPEATABILITY_SI",
    "DiffusionManeuver",
    "DiffusionQuality",
    "assess_diffusion",
]

#: DLCO-2017 repeatability: 0.67 mmol/min/kPa (= 2 mL/min/mmHg / 2.987).
DLCO_REPEATABILITY_SI = 0.67
_GRADES = ("A", "B", "C", "D", "F")
_REPORTED = ("DLCO", "VA", "KCO", "IVC", "breath_hold_s")


@dataclass(frozen=True)
class DiffusionManeuver:
    """Grade of one single-breath manoeuvre (``grade`` None when not gradable)."""

    index: int
    grade: str | None
    vi_vc: float | None
    reasons: tuple[str, ...]
    unchecked: tuple[str, ...]
    values: dict[str, float]


@dataclass(frozen=True, eq=False)
class DiffusionQuality:
    """Session quality of DLCO: grade, reported means, per-manoeuvre grades, repeatability."""

    grade: str | None
    reported: dict[str, float]
    maneuvers: tuple[DiffusionManeuver, ...]
    repeatable: bool | None
    notes: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready dictionary."""
        return {"grade": self.grade, "reported": dict(self.reported),
                "repeatable": self.repeatable, "notes": list(self.notes),
                "maneuvers": [m.__dict__ | {"reasons": list(m.reasons),
                                            "unchecked": list(m.unchecked)}
                              for m in self.maneuvers]}


def assess_diffusion(trials: tuple[DiffusionTrial, ...] | list[DiffusionTrial],
                     largest_vc_l: float | None = None) -> DiffusionQuality:
    """Grade DLCO manoeuvres and choose the reported values.

    Parameters
    ----------
    trials : sequence of DiffusionTrial
        Manoeuvres in SI units.
    largest_vc_l : float, optional
        Largest vital capacity of the session (L), for the IVC criterion. Without it the IVC
        criterion is not checked.

    Raises
    ------
    CaseError
        ``largest_vc_l`` not positive, or a trial without DLCO.
    """
    if largest_vc_l is not None and not largest_vc_l > 0:
        raise CaseError("diffusion.largest_vc_l", largest_vc_l, "a vital capacity > 0 L")
    for i, tr in enumerate(trials):
        if tr.DLCO is None:
            raise CaseError(f"diffusion.trials[{i}].DLCO", None, "a DLCO value (mmol/min/kPa)")
    if not trials:
        return DiffusionQuality(None, {}, (), None, ("DLCO: no trials; quality not assessable",))
    ratios = [_ratio(tr, largest_vc_l) for tr in trials]
    graded = tuple(_grade(i, tr, ratios, trials) for i, tr in enumerate(trials))
    return _summarise(graded, largest_vc_l)


def _ratio(tr: DiffusionTrial, vc: float | None) -> float | None:
    return None if tr.IVC is None or vc is None else round(tr.IVC / vc, 3)


def _plain_a(tr: DiffusionTrial, ratio: float | None) -> bool:
    """Grade A without the VA rule: IVC/VC >= 0.90, breath-hold 8-12 s, sample <= 4 s."""
    bh = None if tr.breath_hold_s is None else round(tr.breath_hold_s, 2)
    st = None if tr.sample_time_s is None else round(tr.sample_time_s, 2)
    return (ratio is not None and ratio >= 0.9 and (bh is None or 8.0 <= bh <= 12.0)
            and (st is None or st <= 4.0))


def _va_close(i: int, ratios: list[float | None], trials: Any) -> bool:
    """VA within max(0.200 L, 5 %) of the largest VA of the other plainly grade-A tests."""
    va = trials[i].VA
    others = [tr.VA for j, tr in enumerate(trials)
              if j != i and tr.VA is not None and _plain_a(tr, ratios[j])]
    if va is None or not others:
        return False
    top = max(others)
    return round(top - va, 3) <= max(0.200, round(0.05 * top, 3))


def _grade(i: int, tr: DiffusionTrial, ratios: list[float | None], trials: Any) -> DiffusionManeuver:
    r = ratios[i]
    reasons: list[str] = []
    unchecked: list[str] = []
    if r is None:
        unchecked.append("IVC / largest VC")
        vi90 = vi85 = vi80 = True
    else:
        vi85, vi80 = r >= 0.85, r >= 0.80
        vi90 = r >= 0.90 or (vi85 and _va_close(i, ratios, trials))
        if not vi90:
            reasons.append(f"IVC {100 * r:.1f} % of largest VC (< 90 %)")
    bh = None if tr.breath_hold_s is None else round(tr.breath_hold_s, 2)
    if bh is None:
        unchecked.append("breath-hold time")
    elif not 8.0 <= bh <= 12.0:
        reasons.append(f"breath-hold {bh:.1f} s outside 8-12 s")
    st = None if tr.sample_time_s is None else round(tr.sample_time_s, 2)
    if st is None:
        unchecked.append("sample collection time")
    elif st > 4.0:
        reasons.append(f"sample collection {st:.1f} s > 4 s")
    if tr.inspiration_time_s is not None and round(tr.inspiration_time_s, 2) >= 4.0:
        reasons.append(f"inspiration {tr.inspiration_time_s:.1f} s (not < 4 s)")
    bh_ok = bh is None or 8.0 <= bh <= 12.0
    s4, s5 = st is None or st <= 4.0, st is None or st <= 5.0
    if len(unchecked) == 3:
        grade = None
    elif vi90 and bh_ok and s4:
        grade = "A"
    elif vi85 and bh_ok and s4:
        grade = "B"
    elif vi80 and bh_ok and s5:
        grade = "C"
    elif vi80 and s5:
        grade = "D"
    else:
        grade = "F"
    values = {k: float(getattr(tr, k)) for k in ("DLCO", "VA", "KCO", "IVC", "breath_hold_s")
              if getattr(tr, k) is not None}
    if "KCO" not in values and "VA" in values and values["VA"] > 0:
        values["KCO"] = values["DLCO"] / values["VA"]
    return DiffusionManeuver(i, grade, r, tuple(reasons), tuple(unchecked), values)


def _summarise(ms: tuple[DiffusionManeuver, ...], vc: float | None) -> DiffusionQuality:
    notes: list[str] = []
    if vc is None:
        notes.append("DLCO: largest VC not given; inspired-volume criterion not checked")
    gradable = [m for m in ms if m.grade is not None]
    if not gradable:
        notes.append("DLCO: no manoeuvre has IVC, breath-hold or sample time; "
                     "quality not assessable; reported value = mean of all tests")
        return DiffusionQuality(None, _mean(ms), ms, None, tuple(notes))
    a_tests = [m for m in ms if m.grade == "A"]
    repeatable: bool | None = None
    if len(a_tests) >= 2:
        repeatable = any(_within(x, y) for x, y in combinations(a_tests, 2))
        if not repeatable:
            notes.append("DLCO: no two grade-A tests within 0.67 mmol/min/kPa "
                         "(2 mL/min/mmHg); not repeatable")
    else:
        notes.append(f"DLCO: {len(a_tests)} grade-A test(s); repeatability needs two")
    best = min((m.grade for m in gradable), key=_GRADES.index)
    if best == "F":
        notes.append("DLCO: all manoeuvres grade F; no value reported")
        return DiffusionQuality("F", {}, ms, repeatable, tuple(notes))
    used = [m for m in gradable if m.grade == best]
    if best == "A" and repeatable:  # mean of the acceptable tests that are repeatable [S26]
        paired = [m for m in a_tests if any(_within(m, o) for o in a_tests if o is not m)]
        left = [m.index + 1 for m in a_tests if m not in paired]
        if left:
            notes.append("DLCO: grade-A test(s) #" + ", #".join(map(str, left)) + " not within "
                         "0.67 mmol/min/kPa of another grade-A test; left out of the mean")
        used = paired
    if best != "A":
        notes.append(f"DLCO: no grade-A manoeuvre; reported value is the mean of the grade-{best} "
                     "tests — interpret with caution")
    unchecked = sorted({u for m in ms for u in m.unchecked})
    if unchecked:
        notes.append(f"DLCO: not checked for lack of data: {', '.join(unchecked)}")
    return DiffusionQuality(best, _mean(used), ms, repeatable, tuple(notes))


def _within(x: DiffusionManeuver, y: DiffusionManeuver) -> bool:
    """Two tests' DLCO within the repeatability limit (compared after rounding to 0.001)."""
    return round(abs(x.values["DLCO"] - y.values["DLCO"]), 3) <= DLCO_REPEATABILITY_SI


def _mean(ms: Any) -> dict[str, float]:
    out: dict[str, float] = {}
    for key in _REPORTED:
        vals = [m.values[key] for m in ms if key in m.values]
        if vals:
            out[key] = sum(vals) / len(vals)
    return out
