"""Analysis of a raw forced manoeuvre (volume-time samples) into the spirometric quantities.

Functions here are pure: a :class:`~pftwork.case_model.Curve` in, a frozen
:class:`CurveAnalysis` out. Units: litres (BTPS), seconds, L/s. Volume is smoothed with a
Savitzky-Golay filter (polynomial order 2, window ~0.05 s, at least 5 samples); flow is the
time derivative of volume from a Savitzky-Golay filter of order 4 (window ~0.08 s, at least 7
samples, which keeps the sharp peak of flow within a few per cent), and is positive on the expiratory limb and negative on the inspiratory limb.

Definitions (SPIRO-2019 unless marked *our own*):

* time zero: back-extrapolation of the tangent to the volume-time curve at peak flow
  (SPIRO-2019; ATS/ERS 2005 Table 6); BEV is the volume exhaled before time zero.
* end of expiration: the turn to the inspiratory limb: from the maximum of the volume after a
  further 0.2 s moving average, the first fall of 0.010 L below it marks inspiration, and the
  last sample before that with non-negative flow is the end (so noise on a long plateau does not
  move it); without an inspiratory limb, the maximum itself;
  FET is its time after time zero.
* plateau: volume change in the last 1 s of expiration < 0.025 L (SPIRO-2019 EOFE 1).
* FEVt is the volume at time zero + t, BEV included (the curve is not shifted).
* FEFx is the flow when x % of the FVC has been exhaled; FEF25-75 is 0.5 FVC divided by the
  time between 25 % and 75 % of FVC exhaled.
* FIVC is the largest fall of volume after the end of expiration; PIF the largest inspiratory
  flow; FIF50 the inspiratory flow when half of the FIVC has been inspired.
* *our own*: a flow interruption in the first second (cough or glottic-closure signature) is a
  rebound of flow by more than 25 % of PEF after a dip, between PEF and time zero + 1 s (a
  closure that never reopens looks like an abrupt end instead: small lungs may empty within a
  second, so low flow alone is not flagged); an abrupt end is a mean flow above 0.20 L/s over
  the last 0.1 s of expiration.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.signal import savgol_coeffs

from pftwork.case_model import Curve
from pftwork.errors import CurveError

__all__ = [
    "CurveAnalysis",
    "analyse_curve",
    "PLATEAU_VOLUME_L",
    "FET_LONG_S",
    "MIN_RATE_HZ",
]

#: SPIRO-2019 EOFE criterion 1: less than this volume change in the last 1 s (L).
PLATEAU_VOLUME_L = 0.025
#: SPIRO-2019 EOFE criterion 2: forced expiratory time of at least this (s).
FET_LONG_S = 15.0
#: Lowest accepted sampling rate (Hz); a 1 % allowance absorbs rounding of time stamps.
MIN_RATE_HZ = 100.0
#: Our own artefact thresholds, as fractions of PEF or in L/s.
INTERRUPTION_REBOUND_FRACTION = 0.25
ABRUPT_END_FLOW_L_S = 0.20
#: Longest plotted array (points).
PLOT_POINTS = 400
_SMOOTH_WINDOW_S = 0.05
_FLOW_WINDOW_S = 0.08
_END_WINDOW_S = 0.2
_MAX_VOLUME_L = 15.0


@dataclass(frozen=True, eq=False)
class CurveAnalysis:
    """Everything computed from one raw forced manoeuvre.

    Volumes in L, flows in L/s (inspiratory flows PIF and FIF50 given as positive numbers),
    times in s. ``None`` marks a quantity the curve does not reach (e.g. FEV6 with FET < 6 s,
    FIVC without an inspiratory limb). Plot arrays: ``exp_volume_l``/``exp_flow_l_s`` (expiratory
    flow-volume limb, from the start of the blow), ``insp_volume_l``/``insp_flow_l_s`` (the
    inspiratory limb in the same exhaled-volume coordinate, flow negative), ``vt_time_s``/
    ``vt_volume_l`` (volume-time aligned so that time zero is 0 s); each at most ~400 points.
    """

    rate_hz: float
    n_samples: int
    time_zero_s: float
    BEV: float
    FET: float
    end_of_expiration_s: float
    plateau: bool
    last_second_volume_l: float
    PEF: float
    time_to_pef_s: float
    FEV0_5: float | None
    FEV0_75: float | None
    FEV1: float | None
    FEV6: float | None
    FVC: float
    FEF25: float | None
    FEF50: float | None
    FEF75: float | None
    FEF25_75: float | None
    FIVC: float | None
    PIF: float | None
    FIF50: float | None
    flow_interruption: bool
    interruption_time_s: float | None
    abrupt_end: bool
    end_flow_l_s: float
    exp_volume_l: np.ndarray = field(repr=False)
    exp_flow_l_s: np.ndarray = field(repr=False)
    insp_volume_l: np.ndarray = field(repr=False)
    insp_flow_l_s: np.ndarray = field(repr=False)
    vt_time_s: np.ndarray = field(repr=False)
    vt_volume_l: np.ndarray = field(repr=False)

    @property
    def fivc_excess_l(self) -> float | None:
        """FIVC - FVC (L), ``None`` without an inspiratory limb."""
        return None if self.FIVC is None else self.FIVC - self.FVC

    @property
    def bev_limit_l(self) -> float:
        """Largest acceptable BEV, max(0.100 L, 5 % of FVC) (SPIRO-2019)."""
        return max(0.100, 0.05 * self.FVC)

    @property
    def hesitant_start(self) -> bool:
        """BEV above :attr:`bev_limit_l` (compared in whole mL): a hesitant or slow start."""
        return _mL(self.BEV) > _mL(self.bev_limit_l)

    @property
    def fivc_excess_too_large(self) -> bool | None:
        """FIVC - FVC > max(0.100 L, 5 % FVC) (SPIRO-2019 FIVC rule; whole mL); None without
        an inspiratory limb."""
        excess = self.fivc_excess_l
        return None if excess is None else _mL(excess) > _mL(self.bev_limit_l)

    @property
    def early_termination(self) -> bool:
        """Neither a plateau nor FET >= 15 s (SPIRO-2019 EOFE criteria 1 and 2 both unmet)."""
        return not self.plateau and self.FET < FET_LONG_S

    def summary(self) -> dict[str, float | None]:
        """The scalar spirometric values keyed by the trade's names."""
        names = ("FEV1", "FVC", "PEF", "FEV0_5", "FEV0_75", "FEV6", "FEF25", "FEF50", "FEF75",
                 "FEF25_75", "FIVC", "PIF", "FIF50", "BEV", "FET")
        return {name: getattr(self, name) for name in names}

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready dictionary (scalars plus plot arrays as lists, rounded)."""
        out: dict[str, Any] = {}
        for name in self.__dataclass_fields__:
            value = getattr(self, name)
            if isinstance(value, np.ndarray):
                out[name] = [round(float(x), 4) for x in value]
            elif isinstance(value, (bool, np.bool_)):
                out[name] = bool(value)
            elif isinstance(value, (float, np.floating)):
                out[name] = round(float(value), 4)
            else:
                out[name] = value
        out["early_termination"] = self.early_termination
        out["hesitant_start"] = self.hesitant_start
        out["fivc_excess_too_large"] = self.fivc_excess_too_large
        return out


def analyse_curve(curve: Curve, field: str = "spirometry.pre.trials[0].curve") -> CurveAnalysis:
    """Analyse one raw forced manoeuvre (results of recent curves are reused: see Notes).

    Parameters
    ----------
    curve : Curve
        Time (s, strictly increasing, >= 100 Hz, >= 0.5 s and >= 50 samples) and cumulative
        exhaled volume (L BTPS).
    field : str
        Dotted path of the curve in the case, used in error messages.

    Returns
    -------
    CurveAnalysis

    Raises
    ------
    CurveError
        When the samples cannot be a forced manoeuvre in litres (see :func:`_validated`).

    Notes
    -----
    The analysis is a pure function of the samples, so the last results are kept keyed by a
    digest of the samples and ``field``: a worksheet that re-interprets the case after every edit
    does not re-analyse unchanged curves. :class:`CurveAnalysis` is frozen, so sharing is safe.
    """
    key = (hashlib.blake2b(np.ascontiguousarray(curve.time_s, dtype=np.float64).tobytes()
                           + np.ascontiguousarray(curve.volume_l, dtype=np.float64).tobytes(),
                           digest_size=16).digest(), field)
    hit = _RECENT.get(key)
    if hit is None:
        hit = _analyse(curve, field)
        _RECENT[key] = hit
        while len(_RECENT) > _RECENT_SIZE:
            _RECENT.pop(next(iter(_RECENT)))
    return hit


_RECENT: dict[tuple[bytes, str], CurveAnalysis] = {}
_RECENT_SIZE = 64


def _analyse(curve: Curve, field: str) -> CurveAnalysis:
    t, v, rate = _validated(curve, field)
    window = max(5, int(round(_SMOOTH_WINDOW_S * rate)) | 1)
    vs = _smooth(v, window, 0, 1.0, 2)
    flow = _smooth(v, max(7, int(round(_FLOW_WINDOW_S * rate)) | 1), 1, 1.0 / rate, 4)
    i_end = _end_of_expiration(vs, flow, rate)
    i_pef = int(np.argmax(flow[: i_end + 1]))
    pef = float(flow[i_pef])
    if pef <= 0.0 or i_end == 0:
        raise CurveError(field, "no expiration", "a volume-time curve rising from the start",
                         "volumes must be cumulative exhaled volume (negative FVC?)")
    i_base = int(np.argmin(vs[: i_pef + 1]))
    base = float(vs[i_base])
    vol = vs - base
    fvc = float(vol[i_end])
    if fvc <= 0.05:
        raise CurveError(field, round(fvc, 4), "an FVC above 0.05 L", "no forced expiration found")
    t0 = float(t[i_pef] - vol[i_pef] / pef)
    bev = max(0.0, float(np.interp(t0, t, vol)))
    t_end = float(t[i_end])
    last = fvc - float(np.interp(t_end - 1.0, t, vol))

    def fev(seconds: float) -> float | None:
        when = t0 + seconds
        return float(np.interp(when, t, vol)) if when <= t_end + 1e-9 else None

    fef = {pct: _flow_at_volume(vol, flow, i_base, i_end, pct / 100.0 * fvc)
           for pct in (25, 50, 75)}
    t25 = _time_at_volume(vol, t, i_base, i_end, 0.25 * fvc)
    t75 = _time_at_volume(vol, t, i_base, i_end, 0.75 * fvc)
    fef25_75 = 0.5 * fvc / (t75 - t25) if t75 > t25 else None
    fivc, pif, fif50, i_insp_end = _inspiratory(vol, flow, i_end)
    interrupted, when = _interruption(flow, t, i_pef, t0, t_end, pef)
    n_end = max(1, int(round(0.1 * rate)))
    end_flow = float(np.mean(flow[max(i_base, i_end - n_end): i_end + 1]))
    exp_idx = _pick(vol / fvc, flow / pef, i_base, i_end, i_pef)
    insp_idx = _pick(vol / fvc, flow / pef, i_end, i_insp_end)
    vt_idx = _pick(t / (t[-1] - t[0]), vol / fvc, 0, len(t) - 1)
    return CurveAnalysis(
        rate_hz=rate, n_samples=len(t), time_zero_s=t0, BEV=bev, FET=t_end - t0,
        end_of_expiration_s=t_end, plateau=bool(_mL(last) < _mL(PLATEAU_VOLUME_L)),
        last_second_volume_l=last, PEF=pef, time_to_pef_s=float(t[i_pef] - t0),
        FEV0_5=fev(0.5), FEV0_75=fev(0.75), FEV1=fev(1.0), FEV6=fev(6.0), FVC=fvc,
        FEF25=fef[25], FEF50=fef[50], FEF75=fef[75], FEF25_75=fef25_75,
        FIVC=fivc, PIF=pif, FIF50=fif50, flow_interruption=interrupted,
        interruption_time_s=when, abrupt_end=bool(end_flow > ABRUPT_END_FLOW_L_S),
        end_flow_l_s=end_flow,
        exp_volume_l=vol[exp_idx], exp_flow_l_s=flow[exp_idx],
        insp_volume_l=vol[insp_idx] if fivc is not None else np.empty(0),
        insp_flow_l_s=flow[insp_idx] if fivc is not None else np.empty(0),
        vt_time_s=t[vt_idx] - t0, vt_volume_l=vol[vt_idx],
    )


def _mL(litres: float) -> int:
    """Litres rounded to whole millilitres (the documented 0.001 L comparison precision)."""
    return int(round(litres * 1000.0))


def _validated(curve: Curve, field: str) -> tuple[np.ndarray, np.ndarray, float]:
    """Check the raw samples and return (time, volume, rate) on a uniform grid."""
    try:
        t = np.asarray(curve.time_s, dtype=float).ravel()
        v = np.asarray(curve.volume_l, dtype=float).ravel()
    except (TypeError, ValueError) as exc:
        raise CurveError(field, "non-numeric samples", "numbers (s and L)") from exc
    if t.shape != v.shape:
        raise CurveError(f"{field}.volume_l", f"{v.size} samples",
                         f"as many samples as time_s ({t.size})")
    if t.size < 50:
        raise CurveError(f"{field}.time_s", f"{t.size} samples", "at least 50 samples")
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(v))):
        bad = "time_s" if not np.all(np.isfinite(t)) else "volume_l"
        raise CurveError(f"{field}.{bad}", "NaN or infinite sample", "finite numbers")
    dt = np.diff(t)
    if np.any(dt <= 0):
        i = int(np.argmax(dt <= 0)) + 1
        raise CurveError(f"{field}.time_s[{i}]", float(t[i]), "strictly increasing time (s)")
    duration = float(t[-1] - t[0])
    if duration < 0.5:
        raise CurveError(f"{field}.time_s", duration, "a recording of at least 0.5 s")
    step = float(np.median(dt))
    rate = 1.0 / step
    if rate < 0.99 * MIN_RATE_HZ:
        raise CurveError(f"{field}.time_s", f"{rate:.1f} Hz", "a sampling rate of at least 100 Hz")
    if float(np.max(v)) > _MAX_VOLUME_L:
        raise CurveError(f"{field}.volume_l", float(np.max(v)), "litres (<= 15 L)",
                         "values look like millilitres")
    if float(np.max(v) - v[0]) <= 0.0:
        raise CurveError(f"{field}.volume_l", float(np.max(v) - v[0]),
                         "a positive FVC (volume rising from the start)",
                         "negative FVC: is the sign of volume inverted?")
    if np.ptp(dt) > 0.05 * step:
        grid = t[0] + step * np.arange(int(np.floor(duration / step)) + 1)
        v = np.interp(grid, t, v)
        t = grid
    return t, v, rate


_FILTERS: dict[tuple[int, int, int], tuple[np.ndarray, np.ndarray, np.ndarray]] = {}


def _filter(window: int, deriv: int, order: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Savitzky-Golay kernel plus the matrices that evaluate least-squares polynomial fits to
    the first and last ``window`` samples at the ``window // 2`` edge samples (cached)."""
    key = (window, deriv, order)
    if key not in _FILTERS:
        half = window // 2
        x = np.arange(window, dtype=float)
        vander = np.vander(x, order + 1)
        fit = np.linalg.pinv(vander)                       # polynomial coefficients from samples
        if deriv:  # d/dx of each Vandermonde column x**p
            at = np.column_stack([p * x ** (p - 1) if p else np.zeros(window)
                                  for p in range(order, -1, -1)])
        else:
            at = vander
        evaluate = at @ fit                                 # fitted value (or slope) at each x
        _FILTERS[key] = (savgol_coeffs(window, order, deriv=deriv, use="conv"),
                         evaluate[:half], evaluate[window - half:])
    return _FILTERS[key]


def _smooth(v: np.ndarray, window: int, deriv: int, step: float, order: int) -> np.ndarray:
    """Savitzky-Golay value or first derivative; edges by least-squares polynomial fits."""
    kernel, head, tail = _filter(window, deriv, order)
    out = np.convolve(v, kernel, mode="same")
    half = window // 2
    out[:half] = head @ v[:window]
    out[len(v) - half:] = tail @ v[len(v) - window:]
    return out / step**deriv


def _end_of_expiration(vs: np.ndarray, flow: np.ndarray, rate: float) -> int:
    """Index of the end of expiration (see the module docstring)."""
    box = max(1, int(round(_END_WINDOW_S * rate)))
    if len(vs) > 2 * box:
        csum = np.concatenate(([0.0], np.cumsum(vs)))
        start = int(np.argmax(csum[box:] - csum[:-box]))     # best window vs[start:start+box]
        i_pk = start + int(np.argmax(vs[start: start + box]))
    else:
        i_pk = int(np.argmax(vs))
    below = vs[i_pk:] < vs[i_pk] - 0.010
    if not below.any():
        return i_pk
    j = i_pk + int(np.argmax(below))
    ok = np.nonzero(flow[i_pk:j] >= 0.0)[0]
    return i_pk + int(ok[-1]) if ok.size else i_pk


def _crossing(vol: np.ndarray, lo: int, hi: int, target: float) -> int:
    """First index in [lo, hi] where vol reaches target (hi if never)."""
    seg = vol[lo: hi + 1] >= target
    return lo + int(np.argmax(seg)) if seg.any() else hi


def _flow_at_volume(vol: np.ndarray, flow: np.ndarray, lo: int, hi: int,
                    target: float) -> float | None:
    i = _crossing(vol, lo, hi, target)
    if i <= lo:
        return None
    frac = (target - vol[i - 1]) / (vol[i] - vol[i - 1]) if vol[i] != vol[i - 1] else 0.0
    return float(flow[i - 1] + frac * (flow[i] - flow[i - 1]))


def _time_at_volume(vol: np.ndarray, t: np.ndarray, lo: int, hi: int, target: float) -> float:
    i = _crossing(vol, lo, hi, target)
    if i <= lo:
        return float(t[lo])
    frac = (target - vol[i - 1]) / (vol[i] - vol[i - 1]) if vol[i] != vol[i - 1] else 0.0
    return float(t[i - 1] + frac * (t[i] - t[i - 1]))


def _inspiratory(vol: np.ndarray, flow: np.ndarray,
                 i_end: int) -> tuple[float | None, float | None, float | None, int]:
    """FIVC, PIF, FIF50 (positive) and the index where inspiration ends."""
    if i_end >= len(vol) - 2:
        return None, None, None, i_end
    i_min = i_end + int(np.argmin(vol[i_end:]))
    fivc = float(vol[i_end] - vol[i_min])
    if fivc < 0.1:
        return None, None, None, i_end
    seg = flow[i_end: i_min + 1]
    pif = float(-np.min(seg))
    mid = vol[i_end] - 0.5 * fivc
    j = i_end + int(np.argmax(vol[i_end: i_min + 1] <= mid))
    fif50 = float(-flow[j])
    return fivc, pif, fif50, i_min


def _interruption(flow: np.ndarray, t: np.ndarray, i_pef: int, t0: float, t_end: float,
                  pef: float) -> tuple[bool, float | None]:
    """Our own cough/glottic-closure signature in the first second after time zero."""
    stop = min(t0 + 1.0, t_end)
    j = int(np.searchsorted(t, stop))
    seg = flow[i_pef: j]
    if seg.size < 3:
        return False, None
    future_max = np.maximum.accumulate(seg[::-1])[::-1]
    rebound = future_max - seg
    k = int(np.argmax(rebound))
    if rebound[k] > INTERRUPTION_REBOUND_FRACTION * pef:
        return True, float(t[i_pef + k] - t0)
    return False, None


def _pick(x: np.ndarray, y: np.ndarray, lo: int, hi: int, keep: int | None = None) -> np.ndarray:
    """At most ~PLOT_POINTS indices in [lo, hi], evenly spaced along the arc length of the
    (x, y) curve (both scaled to ~1), so fast parts such as the peak keep their detail.
    """
    n = hi - lo + 1
    if n <= PLOT_POINTS:
        return np.arange(lo, hi + 1)
    step = np.hypot(np.diff(x[lo: hi + 1]), np.diff(y[lo: hi + 1]))
    arc = np.concatenate(([0.0], np.cumsum(step)))
    idx = lo + np.searchsorted(arc, np.linspace(0.0, arc[-1], PLOT_POINTS - 2))
    extra = [lo, hi] + ([keep] if keep is not None else [])
    out = np.sort(np.concatenate((np.minimum(idx, hi), extra)))
    return out[np.concatenate(([True], out[1:] != out[:-1]))]
