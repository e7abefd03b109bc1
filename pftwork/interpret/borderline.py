"""Borderline awareness: how likely is each LLN/ULN decision to flip on a repeat measurement?

For a decision taken by comparing a measured value ``m`` with a limit ``c``, a repeat
measurement is modelled as normal around ``m`` with the within-session standard deviation
``sd``; the probability it lands on the other side of ``c`` is ``Φ(−|m − c| / sd)``. This model
is our own. ``sd`` comes from the session's own trials when at least three are given, otherwise
from a documented default:

* FEV1, FVC — SPIRO-2019 repeatability tolerance 0.150 L read as a repeatability coefficient
  (2.77 × within-subject SD): sd = 0.150 / 2.77 = 0.054 L (our own reading of the standard);
* FEV1/FVC — propagated from the FEV1 and FVC sd assuming independence (our own; conservative);
* TLC, RV — LV-2005 FRC repeatability of 5 % read the same way: CV = 5 % / 2.77 = 1.8 %
  (our own); RV/TLC propagated;
* DLCO, KCO — measured within-session repeatability about 10 % (ERS DLCO standard's table of
  variability, standards.md §4.2 [S42]): CV = 10 % / 2.77 = 3.6 %; VA 3 % (our own).
* BDR — the change's sd is √2 × the FEV1 (or FVC) sd, expressed in % of predicted.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
from scipy.stats import norm

__all__ = ["BORDERLINE_P", "DEFAULT_SD", "borderline", "flip_probability"]

#: A decision is listed as borderline when its flip probability reaches this (our own choice).
BORDERLINE_P = 0.10
#: Default within-session sd: ("abs", litres) or ("cv", fraction of the measured value).
DEFAULT_SD: dict[str, tuple[str, float, str]] = {
    "FEV1": ("abs", 0.150 / 2.77, "default: SPIRO-2019 0.150 L tolerance / 2.77 (our own reading)"),
    "FVC": ("abs", 0.150 / 2.77, "default: SPIRO-2019 0.150 L tolerance / 2.77 (our own reading)"),
    "TLC": ("cv", 0.05 / 2.77, "default: LV-2005 FRC 5 % repeatability / 2.77 (our own reading)"),
    "RV": ("cv", 0.05 / 2.77, "default: LV-2005 FRC 5 % repeatability / 2.77 (our own reading)"),
    "DLCO": ("cv", 0.10 / 2.77, "default: DLCO within-session repeatability ~10 % / 2.77 [S42]"),
    "KCO": ("cv", 0.10 / 2.77, "default: DLCO within-session repeatability ~10 % / 2.77 [S42]"),
    "VA": ("cv", 0.03, "default: 3 % (our own)"),
}
_DECISIONS = (("obstruction", "pre", "FEV1/FVC", ("lln",)),
              ("fev1_low", "pre", "FEV1", ("lln",)),
              ("fvc_low", "pre", "FVC", ("lln",)),
              ("tlc", "volumes", "TLC", ("lln", "uln")),
              ("air_trapping", "volumes", "RV/TLC", ("uln",)),
              ("dlco", "diffusion", "DLCO", ("lln", "uln")),
              ("kco", "diffusion", "KCO", ("lln", "uln")),
              ("va", "diffusion", "VA", ("lln",)))


def flip_probability(measured: float, limit: float, sd: float) -> float:
    """Probability that a repeat measurement falls on the other side of ``limit``.

    >>> round(flip_probability(1.0, 1.0, 0.1), 3)
    0.5
    """
    if sd <= 0:
        return 0.0 if measured != limit else 0.5
    return float(norm.cdf(-abs(measured - limit) / sd))


def _trial_sd(trials: Sequence[Any], name: str) -> float | None:
    vals = [getattr(t, name, None) for t in trials]
    vals = [float(v) for v in vals if isinstance(v, (int, float)) and math.isfinite(v)]
    return float(np.std(vals, ddof=1)) if len(vals) >= 3 else None


def _sd(param: str, measured: float, case: Any) -> tuple[float, str]:
    """Within-session sd for ``param`` at ``measured`` and where it came from."""
    spiro = case.spirometry
    if param in ("FEV1", "FVC") and spiro and spiro.pre and spiro.pre.trials:
        sd = _trial_sd(spiro.pre.trials, param)
        if sd:
            return sd, f"session trials (sd of {param} over the pre-bronchodilator trials)"
    if param in ("DLCO", "VA", "KCO") and case.diffusion and case.diffusion.trials:
        sd = _trial_sd(case.diffusion.trials, param)
        if sd:  # trials are in SI; rescale to the unit of ``measured`` (mean-preserving)
            scale = measured / float(np.mean([getattr(t, param) for t in case.diffusion.trials
                                              if getattr(t, param) is not None]))
            return sd * scale, f"session trials (sd of {param} over the trials)"
    if param in ("TLC", "RV") and case.volumes and case.volumes.trials:
        sd = _trial_sd(case.volumes.trials, "FRC")
        if sd:
            return sd, "session trials (sd of FRC, which carries TLC and RV error; our own)"
    kind, amount, source = DEFAULT_SD[param]
    return (amount * measured if kind == "cv" else amount), source


def _ratio_sd(values: dict[str, Any], block: str, num: str, den: str, case: Any
              ) -> tuple[float, str] | None:
    a = ((values.get(block) or {}).get(num) or {}).get("measured")
    b = ((values.get(block) or {}).get(den) or {}).get("measured")
    if not a or not b:
        return None
    sa, _ = _sd(num, a, case)
    sb, _ = _sd(den, b, case)
    return (a / b) * math.hypot(sa / a, sb / b), f"propagated from {num} and {den} sd (our own)"


def borderline(case: Any, values: dict[str, Any], findings: dict[str, Any] | None = None
               ) -> list[dict[str, Any]]:
    """Every LLN/ULN decision with its flip probability, closest limit first per decision.

    Parameters
    ----------
    case : Case
        Supplies the session's trials.
    values : dict
        The values block (limits, adjusted limits for DLCO/KCO when present).
    findings : dict, optional
        Step findings (the bronchodilator step adds the BDR decision).

    Returns
    -------
    list of dict
        ``decision, parameter, block, measured, limit, limit_name, z, sd, sd_source, p_flip,
        borderline`` (``p_flip >= BORDERLINE_P``).
    """
    out: list[dict[str, Any]] = []
    for decision, block, param, limits in _DECISIONS:
        item = (values.get(block) or {}).get(param)
        if not item or item.get("measured") is None:
            continue
        src = item.get("adjusted") or item
        m = item["measured"]
        cands = [(name, src.get(name)) for name in limits if src.get(name) is not None]
        if not cands:
            continue
        name, limit = min(cands, key=lambda c: abs(m - c[1]))
        if "/" in param:
            num, den = param.split("/")
            sd_info = _ratio_sd(values, block, num, den, case)
            if sd_info is None:
                continue
            sd, sd_source = sd_info
        else:
            sd, sd_source = _sd(param, m, case)
        p = flip_probability(m, limit, sd)
        out.append({"decision": decision, "parameter": param, "block": block, "measured": m,
                    "limit": limit, "limit_name": name, "z": src.get("z"), "sd": sd,
                    "sd_source": sd_source, "p_flip": p, "borderline": p >= BORDERLINE_P})
    out += _bdr_decisions(case, values)
    return out


def _bdr_decisions(case: Any, values: dict[str, Any]) -> list[dict[str, Any]]:
    out = []
    for param in ("FEV1", "FVC"):
        pre = (values.get("pre") or {}).get(param) or {}
        post = (values.get("post") or {}).get(param) or {}
        if pre.get("measured") is None or post.get("measured") is None or not pre.get("predicted"):
            continue
        sd_l, src = _sd(param, pre["measured"], case)
        change = (post["measured"] - pre["measured"]) * 100.0 / pre["predicted"]
        sd = math.sqrt(2.0) * sd_l * 100.0 / pre["predicted"]
        p = flip_probability(change, 10.0, sd)
        out.append({"decision": "bdr", "parameter": f"{param} change % predicted",
                    "block": "post", "measured": change, "limit": 10.0,
                    "limit_name": "INTERP-2022 > 10 %", "z": None, "sd": sd,
                    "sd_source": f"sqrt(2) x {param} sd ({src})", "p_flip": p,
                    "borderline": p >= BORDERLINE_P})
    return out
