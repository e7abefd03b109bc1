"""Synthetic forced manoeuvres with analytically known results (for tests and benchmarks).

The model is our own, deliberately simple, and is not a published lung model. One manoeuvre is a
sequence of phases on a volume-time curve (volumes L BTPS, time s, flow L/s):

1. quiet: ``pre_s`` seconds at zero volume;
2. hesitation (optional): a slow constant flow exhaling ``hesitation_volume_l`` over
   ``hesitation_time_s`` (raises the back-extrapolated volume);
3. rise: flow ``PEF * sin^2(pi/2 * u / rise_time_s)`` for ``0 <= u <= rise_time_s``; peak flow
   is reached at the end of the rise, where the volume-time slope is steepest;
4. descending limb, defined as flow against remaining volume ``R = vc_l - V``:
   optional collapse knee: flow falls linearly with volume from PEF to
   ``knee_flow_fraction * PEF`` over the first ``knee_at`` fraction of the volume left after
   the peak (so ``V(t)`` is exponential there), then ``F = F2 * (R / R2) ** curvature`` from the
   knee (or from the peak) on; ``curvature`` 1 gives a straight descending limb, > 1 a concave
   (obstructive-looking) limb, < 1 a convex one that empties in finite time. ``dR/dt = -c R^k``
   integrates in closed form, so ``V(t)`` is explicit everywhere;
5. optional cough: at ``cough_at_s`` after (true) time zero, flow stops for
   ``cough_duration_s`` (volume held) and resumes where it stopped;
6. expiration ends at ``expiration_time_s`` after the start of the rise (plus the cough pause):
   early termination is simply a short expiration time;
7. inspiratory limb: a half-sine flow profile over ``inspiratory_time_s`` inspiring ``FIVC``
   (default: the exhaled FVC plus ``fivc_extra_l``), optionally clipped at
   ``inspiratory_cap_fraction`` of its peak (a flattened limb) and rescaled to the same FIVC;
   then a short hold.

Truth, computed from the closed forms (not by analysing samples): time zero (tangent at peak flow
back-extrapolated to zero volume), BEV, FEV0.5, FEV0.75, FEV1, FEV6, FVC, FET, PEF, FEF25/50/75,
FIVC, PIF, FIF50, plateau (< 0.025 L in the last second).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np

from pftwork.case_model import Curve

__all__ = ["SyntheticSpec", "SyntheticManoeuvre", "synthetic_manoeuvre"]


@dataclass(frozen=True)
class SyntheticSpec:
    """Parameters of one synthetic manoeuvre (L, s, L/s, Hz); see the module docstring."""

    vc_l: float = 4.5
    pef_l_s: float = 9.0
    curvature: float = 1.0
    knee_at: float | None = None
    knee_flow_fraction: float = 0.35
    rise_time_s: float = 0.08
    hesitation_volume_l: float = 0.0
    hesitation_time_s: float = 0.0
    expiration_time_s: float = 8.0
    cough_at_s: float | None = None
    cough_duration_s: float = 0.08
    fivc_extra_l: float = 0.0
    inspiratory_time_s: float = 1.0
    inspiratory_cap_fraction: float = 1.0
    pre_s: float = 0.5
    post_s: float = 0.5
    rate_hz: float = 1000.0
    noise_l: float = 0.0
    seed: int = 0


@dataclass(frozen=True, eq=False)
class SyntheticManoeuvre:
    """A synthetic curve and its analytically known values (``truth``, keyed by trade names)."""

    curve: Curve
    truth: dict[str, Any]
    spec: SyntheticSpec


def synthetic_manoeuvre(spec: SyntheticSpec | None = None, **changes: Any) -> SyntheticManoeuvre:
    """Build one synthetic manoeuvre.

    Parameters
    ----------
    spec : SyntheticSpec, optional
        Base parameters (defaults: a healthy-looking 4.5 L blow at 1 kHz).
    **changes
        Field overrides, e.g. ``curvature=2.5, rate_hz=137``.

    Returns
    -------
    SyntheticManoeuvre
    """
    spec = spec or SyntheticSpec()
    if changes:
        spec = SyntheticSpec(**{**asdict(spec), **changes})
    model = _Model(spec)
    return SyntheticManoeuvre(curve=model.curve(), truth=model.truth(), spec=spec)


class _Model:
    """Closed-form volume of one manoeuvre."""

    def __init__(self, s: SyntheticSpec) -> None:
        self.s = s
        self.t_s = s.pre_s + s.hesitation_time_s                    # start of the rise
        self.v_h = s.hesitation_volume_l
        self.t_p = self.t_s + s.rise_time_s                           # peak flow
        self.v_p = self.v_h + s.pef_l_s * s.rise_time_s / 2.0
        r0 = s.vc_l - self.v_p
        if r0 <= 0:
            raise ValueError("vc_l must exceed the volume exhaled by peak flow")
        if s.knee_at is not None:
            self.v_k = self.v_p + s.knee_at * r0
            self.f_k = s.knee_flow_fraction * s.pef_l_s
            self.slope = (s.pef_l_s - self.f_k) / (self.v_k - self.v_p)
            self.tau_k = math.log(s.pef_l_s / self.f_k) / self.slope
        else:
            self.v_k, self.f_k, self.slope, self.tau_k = self.v_p, s.pef_l_s, 0.0, 0.0
        self.r2 = s.vc_l - self.v_k
        self.c = self.f_k / self.r2 ** s.curvature
        self.t0 = self.t_p - self.v_p / s.pef_l_s                     # true time zero
        self.t_c = None if s.cough_at_s is None else self.t0 + s.cough_at_s
        pause = s.cough_duration_s if self.t_c is not None else 0.0
        self.t_end = self.t_s + s.expiration_time_s + pause
        self.fvc = float(self.volume(np.array([self.t_end]))[0])
        self.fivc = self.fvc + s.fivc_extra_l

    # -- expiration -------------------------------------------------------------------------
    def _raw(self, t: np.ndarray) -> np.ndarray:
        """Volume without cough or end of expiration."""
        s = self.s
        v = np.zeros_like(t)
        if s.hesitation_time_s > 0:
            m = (t > s.pre_s) & (t <= self.t_s)
            v[m] = self.v_h * (t[m] - s.pre_s) / s.hesitation_time_s
        m = (t > self.t_s) & (t <= self.t_p)
        u = t[m] - self.t_s
        tr = s.rise_time_s
        v[m] = self.v_h + s.pef_l_s * (u / 2 - tr / (2 * math.pi) * np.sin(math.pi * u / tr))
        tau = t - self.t_p
        if self.tau_k > 0:
            m = (tau > 0) & (tau <= self.tau_k)
            v[m] = self.v_p + s.pef_l_s / self.slope * (1 - np.exp(-self.slope * tau[m]))
        m = tau > self.tau_k
        v[m] = s.vc_l - self._remaining(tau[m] - self.tau_k)
        return v

    def _remaining(self, tau: np.ndarray) -> np.ndarray:
        k, c, r2 = self.s.curvature, self.c, self.r2
        if abs(k - 1.0) < 1e-12:
            return r2 * np.exp(-c * tau)
        base = r2 ** (1 - k) + (k - 1) * c * tau
        return np.where(base > 0, np.maximum(base, 1e-300) ** (1 / (1 - k)), 0.0)

    def volume(self, t: np.ndarray) -> np.ndarray:
        """Exhaled volume (cough pause and end of expiration applied)."""
        t = np.minimum(t, getattr(self, "t_end", np.inf))
        if self.t_c is None:
            return self._raw(t)
        d = self.s.cough_duration_s
        warped = np.where(t < self.t_c, t, np.where(t < self.t_c + d, self.t_c, t - d))
        return self._raw(warped)

    def flow_at_volume(self, v: float) -> float:
        """Descending-limb flow (L/s) when ``v`` L has been exhaled (v beyond peak volume)."""
        s = self.s
        if v <= self.v_k and self.tau_k > 0:
            return s.pef_l_s - self.slope * (v - self.v_p)
        return self.f_k * ((s.vc_l - v) / self.r2) ** s.curvature

    # -- inspiration ------------------------------------------------------------------------
    def _insp_shape(self, x: np.ndarray) -> tuple[np.ndarray, float]:
        """Integral of min(sin(pi x), cap) from 0 to x, and its total over [0, 1]."""
        cap = min(1.0, self.s.inspiratory_cap_fraction)
        a = math.asin(cap) / math.pi
        head = (1 - math.cos(math.pi * a)) / math.pi
        total = 2 * head + cap * (1 - 2 * a)
        x = np.clip(x, 0.0, 1.0)
        g = np.where(x <= a, (1 - np.cos(math.pi * x)) / math.pi,
                     np.where(x <= 1 - a, head + cap * (x - a),
                              total - (1 - np.cos(math.pi * (1 - x))) / math.pi))
        return g, total

    def curve(self) -> Curve:
        s = self.s
        ti = s.inspiratory_time_s
        duration = self.t_end + ti + s.post_s
        t = np.arange(int(math.floor(duration * s.rate_hz)) + 1) / s.rate_hz
        v = self.volume(t)
        after = t > self.t_end
        g, total = self._insp_shape((t[after] - self.t_end) / ti)
        v[after] = self.fvc - self.fivc * g / total
        if s.noise_l > 0:
            v = v + np.random.default_rng(s.seed).normal(0.0, s.noise_l, v.size)
        return Curve(time_s=t, volume_l=v)

    def truth(self) -> dict[str, Any]:
        s = self.s
        u0 = self.t0 - self.t_s
        if u0 >= 0:
            tr = s.rise_time_s
            bev = self.v_h + s.pef_l_s * (u0 / 2 - tr / (2 * math.pi) * math.sin(math.pi * u0 / tr))
        elif s.hesitation_time_s > 0 and self.t0 > s.pre_s:
            bev = self.v_h * (self.t0 - s.pre_s) / s.hesitation_time_s
        else:
            bev = 0.0

        def fev(sec: float) -> float | None:
            when = self.t0 + sec
            return float(self.volume(np.array([when]))[0]) if when <= self.t_end else None

        fet = self.t_end - self.t0
        last = self.fvc - float(self.volume(np.array([self.t_end - 1.0]))[0])
        cap = min(1.0, s.inspiratory_cap_fraction)
        _, total = self._insp_shape(np.array([0.0]))
        pif = self.fivc * cap / (total * s.inspiratory_time_s)
        return {
            "time_zero_s": self.t0, "BEV": bev, "FET": fet, "FVC": self.fvc,
            "FEV0_5": fev(0.5), "FEV0_75": fev(0.75), "FEV1": fev(1.0), "FEV6": fev(6.0),
            "PEF": s.pef_l_s,
            "FEF25": self.flow_at_volume(0.25 * self.fvc),
            "FEF50": self.flow_at_volume(0.50 * self.fvc),
            "FEF75": self.flow_at_volume(0.75 * self.fvc),
            "FIVC": self.fivc, "PIF": pif, "FIF50": pif,
            "plateau": last < 0.025, "last_second_volume_l": last,
            "cough": s.cough_at_s is not None,
            "knee_volume_l": self.v_k if s.knee_at is not None else None,
            "knee_flow_l_s": self.f_k if s.knee_at is not None else None,
        }
