"""Static lung volume repeatability and derived TLC/RV (LV-2005, via standards.md §5).

Units: litres BTPS.

* FRC repeatability, plethysmography: at least 3 FRC values with
  ``(highest - lowest) / mean <= 0.05`` (LV-2005; "±5 %" VERIFIED-2nd [S33], exact formula
  FROM MEMORY). Gas-dilution methods (method names containing "dilution", "helium" or
  "washout"): two values within 10 % by the same formula (FROM MEMORY, the He-dilution rule).
  The spread is rounded to 0.0001 before comparison.
* Reported FRC: mean of the trials' FRC values.
* Derived volumes (definitions FRC = ERV + RV, TLC = VC + RV = FRC + IC, VERIFIED-2nd
  [S33, S45]): method A (preferred, LV-2005 FROM MEMORY) when ERV and VC are available:
  ``RV = mean FRC - mean ERV``, ``TLC = RV + largest VC``; otherwise method B when IC and VC are
  available: ``TLC = mean FRC + mean IC``, ``RV = TLC - largest VC``; otherwise method B without
  VC gives TLC only. ``derivation`` names the method used. RV/TLC is given as a fraction.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from pftwork.case_model import Volumes

__all__ = ["VolumeQuality", "assess_plethysmography", "FRC_SPREAD_PLETH", "FRC_SPREAD_DILUTION"]

#: LV-2005 FRCpleth repeatability: (max - min) / mean <= 5 %.
FRC_SPREAD_PLETH = 0.05
#: Gas dilution (FROM MEMORY): within 10 %.
FRC_SPREAD_DILUTION = 0.10
_DILUTION_WORDS = ("dilution", "helium", "washout")


@dataclass(frozen=True)
class VolumeQuality:
    """FRC repeatability and the volumes derived from the trials."""

    repeatable: bool | None
    spread: float | None
    derived: dict[str, float]
    derivation: str | None
    notes: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready dictionary."""
        return {"repeatable": self.repeatable, "spread": self.spread,
                "derived": dict(self.derived), "derivation": self.derivation,
                "notes": list(self.notes)}


def assess_plethysmography(volumes: Volumes, largest_vc_l: float | None = None) -> VolumeQuality:
    """FRC repeatability and derived TLC/RV from the trials of a lung-volume test.

    Parameters
    ----------
    volumes : Volumes
        The lung-volume block (method and trials).
    largest_vc_l : float, optional
        A larger VC measured elsewhere in the session (e.g. FVC, L); the largest of this and the
        trials' VC values is used.
    """
    method = (volumes.method or "plethysmography").lower()
    dilution = any(word in method for word in _DILUTION_WORDS)
    limit, need = (FRC_SPREAD_DILUTION, 2) if dilution else (FRC_SPREAD_PLETH, 3)
    frc = [t.FRC for t in volumes.trials if t.FRC is not None]
    notes: list[str] = []
    if not frc:
        notes.append("lung volumes: no FRC trials; repeatability not assessable")
        return VolumeQuality(None, None, {}, None, tuple(notes))
    mean_frc = sum(frc) / len(frc)
    spread = round((max(frc) - min(frc)) / mean_frc, 4) if len(frc) >= 2 else None
    repeatable: bool | None = None
    if len(frc) < need:
        notes.append(f"lung volumes: {len(frc)} FRC value(s); repeatability needs {need}")
    else:
        repeatable = spread is not None and spread <= limit
        if not repeatable:
            notes.append(f"lung volumes: FRC spread {100 * spread:.1f} % > "
                         f"{100 * limit:.0f} % ((max - min) / mean)")
    derived, how = _derive(volumes, mean_frc, largest_vc_l)
    if how is not None:
        notes.append(f"lung volumes derived by {how}")
    return VolumeQuality(repeatable, spread, derived, how, tuple(notes))


def _mean(values: list[float]) -> float | None:
    return sum(values) / len(values) if values else None


def _derive(volumes: Volumes, frc: float,
            extra_vc: float | None) -> tuple[dict[str, float], str | None]:
    trials = volumes.trials
    erv = _mean([t.ERV for t in trials if t.ERV is not None])
    ic = _mean([t.IC for t in trials if t.IC is not None])
    vcs = [t.VC for t in trials if t.VC is not None] + ([extra_vc] if extra_vc else [])
    vc = max(vcs) if vcs else None
    out: dict[str, float] = {"FRC": frc}
    how: str | None = None
    if erv is not None and vc is not None:
        rv = frc - erv
        out.update(ERV=erv, RV=rv, VC=vc, TLC=rv + vc)
        how = "method A: RV = mean FRC - mean ERV; TLC = RV + largest VC"
    elif ic is not None:
        out.update(IC=ic, TLC=frc + ic)
        how = "method B: TLC = mean FRC + mean IC"
        if vc is not None:
            out.update(VC=vc, RV=out["TLC"] - vc)
            how += "; RV = TLC - largest VC"
    if "RV" in out and out.get("TLC", 0) > 0:
        out["RV/TLC"] = out["RV"] / out["TLC"]
    return out, how
