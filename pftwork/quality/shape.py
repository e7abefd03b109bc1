"""Shape descriptors of a flow-volume loop: what a physician reads by eye, as numbers.

All descriptors are computed from a :class:`~pftwork.quality.curves.CurveAnalysis` (its plot
arrays, at most ~400 points per limb) or, for the published upper-airway indices, from plain
numbers. Volumes L, flows L/s unless a name says otherwise. Each descriptor states its definition
and whether it is published (source named) or **our own**; the published thresholds are those of
standards.md §3.8. The upper-airway indices are screening flags only: they suggest
"consider upper-airway obstruction (confirm by imaging/endoscopy)", never a diagnosis
(INTERP-2005 Table 11).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from pftwork.quality.curves import CurveAnalysis

__all__ = [
    "Knee",
    "ShapeDescriptors",
    "UpperAirwayIndices",
    "concavity_index",
    "find_knee",
    "flat_fraction",
    "shape_descriptors",
    "upper_airway_indices",
    "EMPEY_THRESHOLD",
    "ROTMAN_FEV1_PEF",
    "ROTMAN_FEV1_FEV05",
    "ROTMAN_FIF50_L_MIN",
    "ROTMAN_FEF50_FIF50",
]

#: Empey, BMJ 1972;3:503-505: FEV1 (mL) / PEF (L/min) > 10 suggests upper-airway obstruction.
EMPEY_THRESHOLD = 10.0
#: Rotman et al., Chest 1975;68:796-799 (standards.md §3.8): FEV1/PEF >= 10 mL per L/min.
ROTMAN_FEV1_PEF = 10.0
#: Rotman 1975: FEV1/FEV0.5 >= 1.5.
ROTMAN_FEV1_FEV05 = 1.5
#: Rotman 1975: FIF50 <= 100 L/min.
ROTMAN_FIF50_L_MIN = 100.0
#: Rotman 1975: FEF50/FIF50 >= 1.
ROTMAN_FEF50_FIF50 = 1.0
#: Our own knee criteria: slope ratio, fit gain over a parabola, flow at the knee (x PEF).
KNEE_MIN_SHARPNESS = 3.0
KNEE_MAX_SSE_RATIO = 0.5
KNEE_MAX_FLOW_FRACTION = 0.7
_FLAT_LEVEL = 0.9


@dataclass(frozen=True)
class Knee:
    """Two-segment (hinge) fit of the descending limb, flow against exhaled volume.

    ``volume_l`` and ``flow_l_s`` locate the breakpoint (exhaled volume, flow); ``sharpness`` is
    the slope before the breakpoint divided by the slope after it (both usually negative; 100
    when the later segment is flat or rising); ``sse_ratio`` is the hinge fit's residual sum
    of squares over that of a parabola; ``present`` applies our own criteria (sharpness >= 3,
    sse_ratio <= 0.5, knee flow <= 0.7 PEF).
    """

    volume_l: float
    flow_l_s: float
    sharpness: float
    sse_ratio: float
    present: bool


@dataclass(frozen=True)
class UpperAirwayIndices:
    """Published upper-airway obstruction indices (``None`` when an input is missing).

    ``fev1_pef_ml_per_l_min`` = FEV1 (mL) / PEF (L/min) (Empey 1972: > 10; Rotman 1975: >= 10);
    ``fev1_fev0_5`` = FEV1/FEV0.5 (Rotman 1975: >= 1.5); ``fif50_l_min`` = FIF50 in L/min
    (Rotman 1975: <= 100); ``fef50_fif50`` = FEF50/FIF50 (Rotman 1975: >= 1; INTERP-2005 /
    INTERP-2022 Table 3 read the inverse, FIF50/FEF50: ~1 fixed, < 1 variable extrathoracic,
    > 1 variable intrathoracic). ``flags`` lists the thresholds met, each naming its source.

    ``suggestive`` is our own combination rule: Empey's index alone (> 10; healthy mean 7.3 in
    Empey 1972), or at least two of Rotman's four criteria. A single Rotman criterion is not
    enough, because FEV1/FEV0.5 near 1.5 and FEF50/FIF50 near 1 are also seen without any
    upper-airway lesion, e.g. in COPD (from memory; Rotman et al. used the criteria together).
    """

    fev1_pef_ml_per_l_min: float | None
    fev1_fev0_5: float | None
    fif50_l_min: float | None
    fef50_fif50: float | None
    flags: tuple[str, ...]
    suggestive: bool = False


@dataclass(frozen=True)
class ShapeDescriptors:
    """Shape of one flow-volume loop (see the functions that compute each field)."""

    concavity_index: float
    knee: Knee | None
    expiratory_flat_fraction: float
    inspiratory_flat_fraction: float | None
    upper_airway: UpperAirwayIndices

    def to_dict(self) -> dict[str, object]:
        """Plain dictionary (JSON-ready)."""
        return asdict(self)


def concavity_index(volume_l: np.ndarray, flow_l_s: np.ndarray, fvc_l: float) -> float:
    """How far the descending limb sags below the chord from PEF to (FVC, 0) (our own).

    Definition (our own, not a published index): with ``C(V)`` the straight line from the peak
    (V_PEF, PEF) to (FVC, 0) and ``F(V)`` the measured flow, the index is
    ``integral (C - F) dV / integral C dV`` over V_PEF..FVC. It is 0 for a straight descending
    limb, positive for a concave (scooped, obstructive-looking) limb, negative for a convex one,
    and lies in [-1, 1] for flows between 0 and PEF. For ``F = PEF * x**k`` (x = remaining
    fraction of the volume after the peak) it equals ``(k - 1) / (k + 1)``.

    Parameters
    ----------
    volume_l, flow_l_s : numpy.ndarray
        Expiratory limb, exhaled volume (L) and flow (L/s), from the start of the blow.
    fvc_l : float
        FVC (L).
    """
    i = int(np.argmax(flow_l_s))
    v = np.maximum.accumulate(volume_l[i:])
    f = flow_l_s[i:]
    pef, v0 = float(f[0]), float(v[0])
    if fvc_l - v0 <= 0 or pef <= 0:
        return 0.0
    chord = pef * (fvc_l - v) / (fvc_l - v0)
    under = 0.5 * pef * (fvc_l - v0)
    gap = chord - f
    return float(np.sum(0.5 * (gap[1:] + gap[:-1]) * np.diff(v)) / under)


def find_knee(volume_l: np.ndarray, flow_l_s: np.ndarray, fvc_l: float) -> Knee | None:
    """Abrupt flow drop ("knee") after PEF by a two-segment linear fit (our own criteria).

    The descending limb from PEF to 95 % of FVC is resampled at 120 equally spaced volumes; a
    continuous two-segment line (hinge) is fitted by least squares for every breakpoint between
    the 5th and the 115th point, and the best one is kept. A collapse knee shows as a steep first
    segment, a flat second one, and a much better fit than a smooth parabola. ``None`` when the
    limb is too short to fit (< 0.2 L after PEF).
    """
    i = int(np.argmax(flow_l_s))
    v = np.maximum.accumulate(volume_l[i:])
    f = flow_l_s[i:]
    pef = float(f[0])
    stop = 0.95 * fvc_l
    if stop - v[0] < 0.2:
        return None
    grid = np.linspace(v[0], stop, 120)
    y = np.interp(grid, v, f) / pef
    x = (grid - grid[0]) / (stop - grid[0])
    quad = np.polyfit(x, y, 2)
    sse_quad = float(np.sum((np.polyval(quad, x) - y) ** 2))
    best = (np.inf, 0, 0.0, 0.0)
    ones = np.ones_like(x)
    for b in range(5, 115):
        hinge = np.maximum(x - x[b], 0.0)
        design = np.column_stack([ones, x - x[b], hinge])
        coef, *_ = np.linalg.lstsq(design, y, rcond=None)
        sse = float(np.sum((design @ coef - y) ** 2))
        if sse < best[0]:
            best = (sse, b, float(coef[1]), float(coef[1] + coef[2]))
    sse, b, s1, s2 = best
    sharp = 100.0 if s2 >= 0 else min(100.0, s1 / s2)
    ratio = sse / sse_quad if sse_quad > 0 else 1.0
    knee_flow = float(y[b] * pef)
    present = (sharp >= KNEE_MIN_SHARPNESS and ratio <= KNEE_MAX_SSE_RATIO
               and knee_flow <= KNEE_MAX_FLOW_FRACTION * pef)
    return Knee(volume_l=float(grid[b]), flow_l_s=knee_flow, sharpness=float(sharp),
                sse_ratio=float(ratio), present=bool(present))


def flat_fraction(volume_l: np.ndarray, flow_l_s: np.ndarray) -> float:
    """Fraction of a limb's volume exhaled (or inhaled) at >= 90 % of its peak flow (our own).

    A plateau of flow over a large part of the limb is the "flattened" loop of fixed or
    variable upper-airway obstruction; a normal expiratory limb scores about 0.1, a half-sine
    inspiratory limb about 0.44. Inspiratory flows may be given negative.
    """
    f = np.abs(flow_l_s)
    dv = np.abs(np.diff(volume_l))
    total = float(np.sum(dv))
    if total <= 0:
        return 0.0
    high = f >= _FLAT_LEVEL * float(np.max(f))
    both = high[1:] & high[:-1]
    return float(np.sum(dv[both]) / total)


def upper_airway_indices(FEV1: float | None, PEF: float | None, FEV0_5: float | None = None,
                         FEF50: float | None = None,
                         FIF50: float | None = None) -> UpperAirwayIndices:
    """Published upper-airway obstruction indices from values (L, L/s; inspiratory positive).

    Examples
    --------
    >>> round(upper_airway_indices(2.0, 3.0).fev1_pef_ml_per_l_min, 1)  # 2000 mL / 180 L/min
    11.1
    """
    empey = FEV1 * 1000.0 / (PEF * 60.0) if FEV1 is not None and PEF else None
    ratio05 = FEV1 / FEV0_5 if FEV1 is not None and FEV0_5 else None
    fif50 = FIF50 * 60.0 if FIF50 is not None else None
    fef_fif = FEF50 / FIF50 if FEF50 is not None and FIF50 else None
    flags: list[str] = []
    if empey is not None and round(empey, 3) > EMPEY_THRESHOLD:
        flags.append(f"FEV1/PEF {empey:.1f} mL/(L/min) > 10 (Empey 1972)")
    if empey is not None and round(empey, 3) >= ROTMAN_FEV1_PEF:
        flags.append(f"FEV1/PEF {empey:.1f} mL/(L/min) >= 10 (Rotman 1975)")
    if ratio05 is not None and round(ratio05, 3) >= ROTMAN_FEV1_FEV05:
        flags.append(f"FEV1/FEV0.5 {ratio05:.2f} >= 1.5 (Rotman 1975)")
    if fif50 is not None and round(fif50, 3) <= ROTMAN_FIF50_L_MIN:
        flags.append(f"FIF50 {fif50:.0f} L/min <= 100 (Rotman 1975)")
    if fef_fif is not None and round(fef_fif, 3) >= ROTMAN_FEF50_FIF50:
        flags.append(f"FEF50/FIF50 {fef_fif:.2f} >= 1 (Rotman 1975)")
    rotman = sum("(Rotman 1975)" in f for f in flags)
    suggestive = any("(Empey 1972)" in f for f in flags) or rotman >= 2
    return UpperAirwayIndices(empey, ratio05, fif50, fef_fif, tuple(flags), suggestive)


def shape_descriptors(analysis: CurveAnalysis) -> ShapeDescriptors:
    """All shape descriptors of one analysed manoeuvre."""
    a = analysis
    insp = (flat_fraction(a.insp_volume_l, a.insp_flow_l_s)
            if a.insp_volume_l.size > 2 else None)
    return ShapeDescriptors(
        concavity_index=concavity_index(a.exp_volume_l, a.exp_flow_l_s, a.FVC),
        knee=find_knee(a.exp_volume_l, a.exp_flow_l_s, a.FVC),
        expiratory_flat_fraction=flat_fraction(a.exp_volume_l, a.exp_flow_l_s),
        inspiratory_flat_fraction=insp,
        upper_airway=upper_airway_indices(a.FEV1, a.PEF, a.FEV0_5, a.FEF50, a.FIF50),
    )
