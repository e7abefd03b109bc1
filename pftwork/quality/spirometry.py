"""Spirometry acceptability, usability, repeatability, grades and value selection (SPIRO-2019).

One pre- or post-bronchodilator set is assessed at a time (SPIRO-2019 analyses them
separately). Each manoeuvre may carry the lab's summary (``BEV``, ``FET``, ``plateau``,
``FIVC`` …), a raw curve, or both: values computed from the curve fill summary fields that are
missing; summary fields given by the lab win, and a disagreement beyond
:data:`DISAGREEMENT_TOLERANCE` (our own tolerances) is noted.

Comparisons are made in whole millilitres: every volume, and every tolerance computed from a
volume (e.g. 5 % of FVC), is rounded to 0.001 L before it is compared, so that e.g.
2.65 - 2.50 (= 0.15000000000000036 in binary floating point) counts as exactly 0.150 L.

Criteria (standards.md §2; tags there):

* start of test, FEV1 and FVC: BEV <= max(0.100 L, 5 % of FVC) (SPIRO-2019, VERIFIED-2nd);
  hesitation time <= 2 s when given (FROM MEMORY);
* FIVC rule, FEV1 and FVC acceptability: FIVC - FVC <= max(0.100 L, 5 % FVC) (VERIFIED-2nd);
* no cough in the first second: FEV1 acceptability and usability; FVC unaffected (SPIRO-2019
  Table 7 as we recall it, FROM MEMORY — standards.md §2.2 lists the structure as FROM MEMORY);
* glottic closure: the case's flag has no timing, so it is read as "in the first second" (worst
  case): FEV1 and FVC fail acceptability and usability (our reading);
* a flow interruption found on the curve (cough or closure signature, our own detector) fails
  FEV1 acceptability and usability and FVC acceptability (FVC stays usable);
* leak: fails acceptability and usability of both (standards.md §2.2, FROM MEMORY);
* end of forced expiration, FVC acceptability only: plateau (< 0.025 L in the last 1 s), or
  FET >= 15 s, or the FVC within the repeatability tolerance of, or greater than, the largest FVC
  of the other manoeuvres of the set whose FVC is usable (whole set, so a later larger FVC can
  change an earlier manoeuvre's status — standards.md §2.1 engine note). A reported early
  termination means EOFE is not met.
* a criterion whose data are absent is not checked (listed in ``unchecked``) and does not fail.

Grades (standards.md §2.4; adult A-D numbers VERIFIED [S14], child thresholds and E/U/F FROM
MEMORY), FEV1 and FVC separately, on the two largest acceptable values:
A >= 3 acceptable within 0.150 L; B 2 acceptable within 0.150 L; C >= 2 within 0.200 L;
D >= 2 within 0.250 L; E >= 2 beyond 0.250 L or exactly 1 acceptable; U none acceptable but
>= 1 usable; F none usable. At age <= 6 y the tolerances are max(0.100/0.150/0.200 L, 10 % of
the largest value).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from pftwork.case_model import SpiroTrial
from pftwork.errors import CaseError
from pftwork.quality.curves import FET_LONG_S, PLATEAU_VOLUME_L, CurveAnalysis, analyse_curve

__all__ = [
    "DISAGREEMENT_TOLERANCE",
    "FLOW_PARAMETERS",
    "ManeuverQuality",
    "Repeatability",
    "SpirometryQuality",
    "assess_spirometry_set",
    "grade_values",
    "not_assessable",
    "repeatability_tolerance_l",
]

#: Our own tolerances for "lab summary and curve disagree" notes (L, s or L/s).
DISAGREEMENT_TOLERANCE = {
    "FEV1": 0.050, "FVC": 0.050, "FEV0_5": 0.050, "FEV0_75": 0.050, "FEV6": 0.050,
    "FIVC": 0.050, "BEV": 0.025, "FET": 0.5, "PEF": 0.5, "FEF25_75": 0.3, "FEF75": 0.3,
}
#: Values taken from the best test (largest FEV1 + FVC) rather than the largest of the set.
FLOW_PARAMETERS = ("PEF", "FEV0_5", "FEV0_75", "FEV6", "FEF25", "FEF50", "FEF75", "FEF25_75",
                   "FIVC", "PIF", "FIF50")
_SUMMARY = ("FEV1", "FVC", "PEF", "FEV0_5", "FEV0_75", "FEV6", "FEF25_75", "FEF75", "BEV", "FET",
            "FIVC")
_CURVE_ONLY = ("FEF25", "FEF50", "PIF", "FIF50")
#: Grade tolerances in mL: (age > 6 y, age <= 6 y before the 10 % rule) for A/B, C, D.
_GRADE_TOLERANCE_ML = {"A": (150, 100), "C": (200, 150), "D": (250, 200)}
_HESITATION_MAX_S = 2.0
NOT_ASSESSABLE = "not assessable"


def _mL(litres: float) -> int:
    """Litres rounded to whole millilitres (comparison precision 0.001 L)."""
    return int(round(litres * 1000.0))


def repeatability_tolerance_l(age_years: float, largest_l: float, level: str = "A") -> float:
    """Repeatability tolerance (L) between the two largest values (SPIRO-2019 §2.3-2.4).

    ``level`` "A" (also B and the EOFE rule): 0.150 L above 6 y, max(0.100 L, 10 % of the
    largest) at 6 y or under; "C": 0.200 L / max(0.150 L, 10 %); "D": 0.250 L / max(0.200 L, 10 %).
    """
    return _tolerance_ml(age_years, _mL(largest_l), level) / 1000.0


def _tolerance_ml(age_years: float, largest_ml: int, level: str) -> int:
    adult, child = _GRADE_TOLERANCE_ML[level]
    if age_years > 6:
        return adult
    return max(child, int(round(0.10 * largest_ml)))


def grade_values(acceptable: list[float], n_usable: int, age_years: float) -> str:
    """Grade A-F or U for one parameter of a set (see the module docstring).

    Parameters
    ----------
    acceptable : list of float
        The acceptable values (L) of FEV1 (or FVC) in the set.
    n_usable : int
        Number of manoeuvres whose value is usable (acceptable ones included).
    age_years : float
        Age, for the 6-year switch.
    """
    if not acceptable:
        return "U" if n_usable > 0 else "F"
    if len(acceptable) == 1:
        return "E"
    top = sorted((_mL(x) for x in acceptable), reverse=True)
    diff = top[0] - top[1]
    if diff <= _tolerance_ml(age_years, top[0], "A"):
        return "A" if len(acceptable) >= 3 else "B"
    if diff <= _tolerance_ml(age_years, top[0], "C"):
        return "C"
    if diff <= _tolerance_ml(age_years, top[0], "D"):
        return "D"
    return "E"


@dataclass(frozen=True, eq=False)
class ManeuverQuality:
    """Acceptability and usability of one manoeuvre, with the reasons.

    ``values`` are the effective values (lab summary first, then curve); ``reasons`` say why
    something failed; ``unchecked`` names criteria that could not be checked; ``eofe`` names the
    end-of-forced-expiration criterion met (``None`` when none was); ``curve`` is the raw-curve
    analysis, if a curve was given.
    """

    index: int
    label: str | None
    fev1_acceptable: bool
    fvc_acceptable: bool
    fev1_usable: bool
    fvc_usable: bool
    reasons: tuple[str, ...]
    unchecked: tuple[str, ...]
    values: dict[str, float]
    eofe: str | None
    disagreements: tuple[str, ...] = ()
    curve: CurveAnalysis | None = field(default=None, repr=False)

    def to_dict(self, with_curve: bool = False) -> dict[str, Any]:
        """Plain dictionary; the curve analysis only when ``with_curve``."""
        out: dict[str, Any] = {
            "index": self.index, "label": self.label,
            "fev1_acceptable": self.fev1_acceptable, "fvc_acceptable": self.fvc_acceptable,
            "fev1_usable": self.fev1_usable, "fvc_usable": self.fvc_usable,
            "reasons": list(self.reasons), "unchecked": list(self.unchecked),
            "values": dict(self.values), "eofe": self.eofe,
            "disagreements": list(self.disagreements),
        }
        if with_curve and self.curve is not None:
            out["curve"] = self.curve.to_dict()
        return out


@dataclass(frozen=True)
class Repeatability:
    """Differences between the two largest acceptable values and the A-level tolerance (L)."""

    fev1_diff_l: float | None
    fvc_diff_l: float | None
    fev1_tolerance_l: float | None
    fvc_tolerance_l: float | None
    fev1_repeatable: bool | None
    fvc_repeatable: bool | None
    n_acceptable_fev1: int
    n_acceptable_fvc: int


@dataclass(frozen=True, eq=False)
class SpirometryQuality:
    """Quality of one spirometry set (pre or post), graded per SPIRO-2019."""

    phase: str
    age_years: float | None
    maneuvers: tuple[ManeuverQuality, ...]
    FEV1_grade: str
    FVC_grade: str
    selected: dict[str, float]
    selected_from: dict[str, int]
    repeatability: Repeatability | None
    notes: tuple[str, ...]

    def to_dict(self, with_curves: bool = False) -> dict[str, Any]:
        """Plain JSON-ready dictionary."""
        rep = self.repeatability
        return {
            "phase": self.phase, "age_years": self.age_years,
            "FEV1_grade": self.FEV1_grade, "FVC_grade": self.FVC_grade,
            "selected": dict(self.selected), "selected_from": dict(self.selected_from),
            "repeatability": None if rep is None else dict(rep.__dict__),
            "maneuvers": [m.to_dict(with_curves) for m in self.maneuvers],
            "notes": list(self.notes),
        }


def not_assessable(phase: str = "pre", age_years: float | None = None,
                   reason: str = "no trials given (reported values only)") -> SpirometryQuality:
    """A set whose quality cannot be graded (both grades ``"not assessable"``)."""
    return SpirometryQuality(phase=phase, age_years=age_years, maneuvers=(),
                             FEV1_grade=NOT_ASSESSABLE, FVC_grade=NOT_ASSESSABLE, selected={},
                             selected_from={}, repeatability=None,
                             notes=(f"{phase}: quality not assessable: {reason}",))


def assess_spirometry_set(trials: tuple[SpiroTrial, ...] | list[SpiroTrial], age_years: float,
                          phase: str = "pre") -> SpirometryQuality:
    """Assess one spirometry set (pre- or post-bronchodilator).

    Parameters
    ----------
    trials : sequence of SpiroTrial
        The manoeuvres of the set, in the order performed.
    age_years : float
        Age in years (tolerances switch at 6 y).
    phase : str
        ``"pre"`` or ``"post"``; used in field paths and notes.

    Returns
    -------
    SpirometryQuality
        With no trials, :func:`not_assessable`.

    Raises
    ------
    CaseError
        Age missing or out of range.
    CurveError
        A raw curve that cannot be analysed (field ``spirometry.<phase>.trials[i].curve``).
    """
    if age_years is None or not 0 < float(age_years) < 120:
        raise CaseError("subject.age_years", age_years, "an age in years between 0 and 120")
    if not trials:
        return not_assessable(phase, age_years)
    prepared = [_prepare(i, tr, phase) for i, tr in enumerate(trials)]
    largest_other = _largest_usable_fvc(prepared)
    maneuvers = tuple(_judge(p, largest_other[p.index], age_years) for p in prepared)
    return _summarise(maneuvers, age_years, phase)


@dataclass
class _Prepared:
    index: int
    trial: SpiroTrial
    values: dict[str, float]
    plateau: bool | None
    interruption: bool
    curve: CurveAnalysis | None
    disagreements: list[str]
    start_reasons: list[str]
    unchecked: list[str]
    fvc_usable: bool


def _prepare(i: int, trial: SpiroTrial, phase: str) -> _Prepared:
    """Merge summary and curve, and apply the criteria that do not depend on the set."""
    curve = None
    if trial.curve is not None:
        curve = analyse_curve(trial.curve, field=f"spirometry.{phase}.trials[{i}].curve")
    values: dict[str, float] = {}
    disagreements: list[str] = []
    for name in _SUMMARY:
        lab = trial.value(name)
        computed = getattr(curve, name) if curve is not None else None
        if lab is not None:
            values[name] = float(lab)
            tol = DISAGREEMENT_TOLERANCE[name]
            if computed is not None and abs(lab - computed) > tol:
                disagreements.append(f"{name}: lab {lab:.3f}, curve {computed:.3f} "
                                     f"(differ by more than {tol:g}); lab value used")
        elif computed is not None:
            values[name] = float(computed)
    if curve is not None:
        for name in _CURVE_ONLY:
            computed = getattr(curve, name)
            if computed is not None:
                values[name] = float(computed)
    plateau = trial.plateau
    if curve is not None:
        if plateau is None:
            plateau = curve.plateau
        elif plateau != curve.plateau:
            disagreements.append(f"plateau: lab {plateau}, curve {curve.plateau}; lab value used")
    interruption = bool(curve is not None and curve.flow_interruption)
    if interruption and trial.cough is False and trial.glottic_closure is False:
        disagreements.append("curve shows a flow interruption in the first second but the lab "
                             "reports no cough or glottic closure; lab value used")
        interruption = False
    p = _Prepared(i, trial, values, plateau, interruption, curve, disagreements, [], [], False)
    _start_criteria(p)
    fvc = values.get("FVC")
    p.fvc_usable = (fvc is not None and not _bev_fails(p) and not trial.glottic_closure
                    and not trial.leak)
    return p


def _allowed_ml(fvc: float | None) -> int:
    """max(0.100 L, 5 % of FVC) in mL (0.100 L when FVC is unknown)."""
    return 100 if fvc is None else max(100, int(round(0.05 * _mL(fvc))))


def _bev_fails(p: _Prepared) -> bool:
    bev = p.values.get("BEV")
    return bev is not None and _mL(bev) > _allowed_ml(p.values.get("FVC"))


def _start_criteria(p: _Prepared) -> None:
    """BEV and hesitation time (SPIRO-2019 start-of-test criteria)."""
    bev, fvc = p.values.get("BEV"), p.values.get("FVC")
    if bev is None:
        p.unchecked.append("BEV (start of test)")
    elif _bev_fails(p):
        p.start_reasons.append(f"BEV {bev:.3f} L > {_allowed_ml(fvc) / 1000:.3f} L allowed")
    hes = p.trial.hesitation_s
    if hes is not None and hes > _HESITATION_MAX_S:
        p.start_reasons.append(f"hesitation {hes:.2f} s > 2 s allowed")


def _largest_usable_fvc(prepared: list[_Prepared]) -> dict[int, float | None]:
    """For each manoeuvre, the largest usable FVC among the other manoeuvres of the set."""
    out: dict[int, float | None] = {}
    for p in prepared:
        others = [q.values["FVC"] for q in prepared if q.index != p.index and q.fvc_usable]
        out[p.index] = max(others) if others else None
    return out


def _eofe(p: _Prepared, largest_other: float | None, age: float) -> tuple[str | None, bool]:
    """The EOFE criterion met (or None) and whether EOFE could be checked at all."""
    if p.trial.early_termination:
        return None, True
    fet = p.values.get("FET")
    if p.plateau:
        return f"plateau (< {PLATEAU_VOLUME_L:.3f} L in the last 1 s)", True
    if fet is not None and fet >= FET_LONG_S:
        return "FET >= 15 s", True
    fvc = p.values.get("FVC")
    if fvc is not None and largest_other is not None:
        tol = _tolerance_ml(age, _mL(max(fvc, largest_other)), "A")
        if _mL(fvc) >= _mL(largest_other) - tol:
            return "FVC repeatable with the largest FVC of the set", True
    checked = p.plateau is not None or fet is not None or largest_other is not None
    return None, checked


def _judge(p: _Prepared, largest_other: float | None, age: float) -> ManeuverQuality:
    """Apply every criterion and decide acceptability and usability."""
    t, v = p.trial, p.values
    reasons = list(p.start_reasons)
    unchecked = list(p.unchecked)
    fvc, fivc = v.get("FVC"), v.get("FIVC")
    fivc_fail = False
    if fivc is not None and fvc is not None:
        if _mL(fivc) - _mL(fvc) > _allowed_ml(fvc):
            fivc_fail = True
            reasons.append(f"FIVC - FVC {(_mL(fivc) - _mL(fvc)) / 1000:.3f} L > "
                           f"{_allowed_ml(fvc) / 1000:.3f} L allowed (not from full inspiration)")
    else:
        unchecked.append("FIVC rule")
    if t.cough:
        reasons.append("cough in the first second")
    if t.glottic_closure:
        reasons.append("glottic closure")
    if p.interruption:
        when = p.curve.interruption_time_s if p.curve is not None else None
        at = f" at {when:.2f} s" if when is not None else ""
        reasons.append(f"flow interruption in the first second{at} (cough or glottic closure)")
    if t.leak:
        reasons.append("leak")
    eofe, checked = _eofe(p, largest_other, age)
    if eofe is None and checked:
        reasons.append("early termination reported" if t.early_termination
                       else "end of forced expiration not reached (no plateau, FET < 15 s, "
                            "FVC not repeatable)")
    elif not checked:
        unchecked.append("end of forced expiration")
    start_ok = not p.start_reasons
    first_second_ok = not (t.cough or t.glottic_closure or p.interruption)
    common = not (t.leak or t.glottic_closure)
    has1, hasv = v.get("FEV1") is not None, fvc is not None
    fev1_acc = has1 and start_ok and first_second_ok and common and not fivc_fail
    fev1_use = has1 and not _bev_fails(p) and first_second_ok and common
    fvc_acc = (hasv and start_ok and common and not p.interruption and not fivc_fail
               and (eofe is not None or not checked))
    return ManeuverQuality(
        index=p.index, label=t.label, fev1_acceptable=bool(fev1_acc),
        fvc_acceptable=bool(fvc_acc), fev1_usable=bool(fev1_use), fvc_usable=bool(p.fvc_usable),
        reasons=tuple(reasons), unchecked=tuple(unchecked), values=v, eofe=eofe,
        disagreements=tuple(p.disagreements), curve=p.curve)


def _summarise(ms: tuple[ManeuverQuality, ...], age: float, phase: str) -> SpirometryQuality:
    """Grades, repeatability and selection of reported values for the set."""
    notes: list[str] = []
    grades: dict[str, str] = {}
    diffs: dict[str, float | None] = {}
    tols: dict[str, float | None] = {}
    counts: dict[str, int] = {}
    selected: dict[str, float] = {}
    source: dict[str, int] = {}
    for name in ("FEV1", "FVC"):
        acc_flag, use_flag = f"{name.lower()}_acceptable", f"{name.lower()}_usable"
        acc = [(m.values[name], m.index) for m in ms if getattr(m, acc_flag)]
        use = [(m.values[name], m.index) for m in ms if getattr(m, use_flag)]
        grades[name] = grade_values([x for x, _ in acc], len(use), age)
        counts[name] = len(acc)
        if len(acc) >= 2:
            top = sorted((_mL(x) for x, _ in acc), reverse=True)
            diffs[name] = (top[0] - top[1]) / 1000.0
            tols[name] = _tolerance_ml(age, top[0], "A") / 1000.0
        else:
            diffs[name] = tols[name] = None
        pool = acc or use
        if pool:
            value, idx = max(pool, key=lambda item: (_mL(item[0]), -item[1]))
            selected[name], source[name] = value, idx
            if not acc:
                notes.append(f"{phase}: {name} {value:.2f} L is from a usable but not acceptable "
                             f"manoeuvre (#{idx + 1}); grade U — interpret with caution")
        if len(acc) < 3:
            notes.append(f"{phase}: {len(acc)} acceptable {name} value(s); SPIRO-2019 aims for 3")
    if "FEV1" in selected and "FVC" in selected and selected["FVC"] > 0:
        selected["FEV1/FVC"] = selected["FEV1"] / selected["FVC"]
    best = _best_test(ms)
    if best is not None:
        for name in FLOW_PARAMETERS:
            if name in best.values:
                selected[name], source[name] = best.values[name], best.index
        source["best_test"] = best.index
        if not (best.fev1_acceptable and best.fvc_acceptable):
            notes.append(f"{phase}: no manoeuvre has both FEV1 and FVC acceptable; flows are "
                         f"from usable manoeuvre #{best.index + 1}")
    for m in ms:
        notes.extend(f"{phase} #{m.index + 1}: {d}" for d in m.disagreements)
    unchecked = sorted({u for m in ms for u in m.unchecked})
    if unchecked:
        notes.append(f"{phase}: not checked for lack of data: {', '.join(unchecked)}")
    rep = Repeatability(
        fev1_diff_l=diffs["FEV1"], fvc_diff_l=diffs["FVC"], fev1_tolerance_l=tols["FEV1"],
        fvc_tolerance_l=tols["FVC"],
        fev1_repeatable=None if diffs["FEV1"] is None else _mL(diffs["FEV1"]) <= _mL(tols["FEV1"]),
        fvc_repeatable=None if diffs["FVC"] is None else _mL(diffs["FVC"]) <= _mL(tols["FVC"]),
        n_acceptable_fev1=counts["FEV1"], n_acceptable_fvc=counts["FVC"])
    return SpirometryQuality(phase=phase, age_years=age, maneuvers=ms,
                             FEV1_grade=grades["FEV1"], FVC_grade=grades["FVC"],
                             selected=selected, selected_from=source, repeatability=rep,
                             notes=tuple(notes))


def _best_test(ms: tuple[ManeuverQuality, ...]) -> ManeuverQuality | None:
    """Largest FEV1 + FVC among fully acceptable manoeuvres, else among usable ones."""
    for ok in (lambda m: m.fev1_acceptable and m.fvc_acceptable,
               lambda m: m.fev1_usable and m.fvc_usable):
        pool = [m for m in ms if ok(m)]
        if pool:
            return max(pool, key=lambda m: m.values["FEV1"] + m.values["FVC"])
    return None
