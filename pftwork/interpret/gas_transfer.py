"""Step 4 — gas transfer (DLCO, KCO, VA) and its Hb, COHb and altitude adjustments.

Adjustment naming: ``*_factor`` functions return a dimensionless multiplier; ``hb_factor`` and
``cohb_factor`` multiply the **predicted** DLCO/KCO, ``altitude_factor`` multiplies the
**measured** value (adjusting it to sea-level inspired PO2).
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from pftwork.case_model import Case
from pftwork.interpret.finding import Z_LLN, Z_ULN, Finding, level, not_assessed, severity, value
from pftwork.units import DLCO_SI_TO_TRADITIONAL, KPA_PER_MMHG, barometric_pressure_kpa

__all__ = [
    "KPA_TO_MMHG",
    "SI_TO_TRADITIONAL",
    "VA_TLC_LIMIT",
    "altitude_factor",
    "barometric_kpa_at",
    "cohb_factor",
    "gas_transfer",
    "hb_factor",
    "inspired_po2_mmhg",
]

#: 1 mmol/min/kPa = 2.987 mL/min/mmHg (DLCO-2017 / standards.md §4.6, VERIFIED-2nd).
SI_TO_TRADITIONAL = DLCO_SI_TO_TRADITIONAL
#: 1 kPa in mmHg (101.325 kPa = 760 mmHg).
KPA_TO_MMHG = 1.0 / KPA_PER_MMHG


def hb_factor(hb_g_dl: ArrayLike, sex: str, age_years: ArrayLike) -> np.ndarray:
    """Multiplier of predicted DLCO for haemoglobin (Cotes form).

    Parameters
    ----------
    hb_g_dl : array_like
        Haemoglobin in g/dL.
    sex : str
        ``"male"`` or ``"female"``.
    age_years : array_like
        Age in years; males from 15 y use the adult male constant.

    Returns
    -------
    numpy.ndarray
        ``1.7·Hb / (c + Hb)`` with c = 10.22 (males >= 15 y) or 9.38 (females, children).

    Notes
    -----
    DLCO-2005/DLCO-2017 Hb adjustment, standards.md §4.4. Constants FROM MEMORY; they give a
    factor of exactly 1 at the standard Hb of 14.6 g/dL (men) and 13.4 g/dL (women).
    """
    hb = np.asarray(hb_g_dl, dtype=float)
    adult_male = (sex == "male") & (np.asarray(age_years, dtype=float) >= 15.0)
    constant = np.where(adult_male, 10.22, 9.38)
    return 1.7 * hb / (constant + hb)


def cohb_factor(cohb_percent: ArrayLike) -> np.ndarray:
    """Multiplier of predicted DLCO for carboxyhaemoglobin: ``1 / (1 + COHb/100)``.

    Notes
    -----
    Inverse of the measured-value form ``DLCOadj = DLCO·(1 + %COHb/100)`` of the ATS
    laboratory manual (standards.md §4.5, VERIFIED [S27]).
    """
    return 1.0 / (1.0 + np.asarray(cohb_percent, dtype=float) / 100.0)


def barometric_kpa_at(altitude_m: ArrayLike) -> np.ndarray:
    """Barometric pressure (kPa) of the International Standard Atmosphere at ``altitude_m``.

    ``P = 101.325 · (1 − 2.25577e-5·h)^5.25588`` (troposphere, h in m).
    """
    return np.asarray(barometric_pressure_kpa(np.asarray(altitude_m, dtype=float)))


def inspired_po2_mmhg(barometric_kpa: ArrayLike) -> np.ndarray:
    """Inspired PO2 (mmHg): ``0.21·(PB − 47)`` with PB in mmHg (standards.md §4.5, VERIFIED [S27])."""
    pb = np.asarray(barometric_kpa, dtype=float) * KPA_TO_MMHG
    return 0.21 * (pb - 47.0)


def altitude_factor(barometric_kpa: ArrayLike) -> np.ndarray:
    """Multiplier of measured DLCO to sea-level PIO2: ``1 + 0.0031·(PIO2 − 150)``.

    Notes
    -----
    ATS laboratory manual / DLCO-2017 (standards.md §4.5, VERIFIED [S27]).
    """
    return 1.0 + 0.0031 * (inspired_po2_mmhg(barometric_kpa) - 150.0)


TITLE = "Gas transfer"
SOURCE = ("INTERP-2022 DLCO interpretation (low/normal/high on the 5th/95th percentiles; reading "
          "of VA and KCO); GLI 2017 TLCO reference values (Stanojevic et al., ERJ 2017, erratum "
          "2020); DLCO-2017 Hb adjustment (Cotes form) and PIO2 adjustment; Hughes & Pride, "
          "Breathe review (VA/TLC < 0.8; grade on DLCO, not KCO)")
RULE = ("DLCO, KCO and VA are each called low (z < -1.645), normal or high (z > +1.645); when Hb, "
        "COHb or altitude are known, DLCO and KCO are judged against predicted values adjusted "
        "for them (measured values are left as measured). A low DLCO is read through the "
        "combination of VA and KCO; its severity follows the DLCO z bands (mild, moderate, "
        "severe at -1.645, -2.5, -4). VA/TLC < 0.8 points to maldistribution of ventilation.")
#: VA/TLC below this suggests maldistribution of ventilation (standards.md §3.7, VERIFIED [S31]).
VA_TLC_LIMIT = 0.8
_KEYS = ("dlco", "kco", "va", "dlco_severity", "va_tlc", "maldistribution", "adjusted",
         "reading", "dlco_z", "kco_z", "va_z")
_READINGS = {
    "high": "A raised DLCO suggests increased pulmonary blood volume (e.g. left-to-right shunt, "
            "asthma, obesity), polycythaemia or alveolar haemorrhage.",
    "vascular": "Low DLCO with normal VA and low KCO: consider a pulmonary vascular disorder "
                "(pulmonary hypertension, thromboembolism, vasculitis), emphysema with preserved "
                "lung volume, or anaemia.",
    "units_lost": "Low DLCO with low VA and a low or normal KCO: loss of alveolar-capillary "
                  "units, as in interstitial lung disease or emphysema with loss of lung volume.",
    "low_volume": "Low VA with a high KCO: a low-volume state — local loss of lung "
                  "(e.g. resection) or incomplete expansion (submaximal inspiration, chest-wall "
                  "or neuromuscular restriction).",
    "unclassified": "Low DLCO with a VA/KCO combination outside the usual reading table.",
}


def _reading(dlco: str | None, va: str | None, kco: str | None) -> str | None:
    """Row of the INTERP-2022 reading table; a low VA with a high KCO is read as a low-volume
    state even when DLCO stays within limits (our own extension of the table)."""
    if dlco == "high":
        return "high"
    if va == "low" and kco == "high":
        return "low_volume"
    if dlco != "low" or va is None or kco is None:
        return None
    if va == "normal" and kco == "low":
        return "vascular"
    if va == "low" and kco in ("low", "normal"):
        return "units_lost"
    if va == "low" and kco == "high":
        return "low_volume"
    return "unclassified"


def _z_used(values: dict[str, Any], param: str) -> tuple[float | None, bool]:
    item = (values.get("diffusion") or {}).get(param) or {}
    adjusted = item.get("adjusted")
    if adjusted and adjusted.get("z") is not None:
        return adjusted["z"], True
    return item.get("z"), False


def gas_transfer(case: Case, values: dict[str, Any], quality: dict[str, Any],
                 validity: Finding) -> Finding:
    """Interpret single-breath gas transfer (values in the case's own unit).

    Parameters
    ----------
    case : Case
        The case (Hb and COHb read for caveats).
    values : dict
        The values block (``diffusion`` entries, ``adjusted`` sub-blocks, ``volumes.TLC``).
    quality : dict
        Quality block (unused beyond validity).
    validity : Finding
        Step 1.
    """
    if validity.data.get("stop"):
        return not_assessed("gas_transfer", TITLE, "Not interpreted: the session failed the "
                            "validity step.", _KEYS, status="stopped", rule=RULE, source=SOURCE)
    if validity.data.get("diffusion_usable") is False:
        return not_assessed("gas_transfer", TITLE, "Gas transfer not interpreted: grade F (not "
                            "reportable).", _KEYS, rule=RULE, source=SOURCE)
    dlco_z, adjusted = _z_used(values, "DLCO")
    kco_z, _ = _z_used(values, "KCO")
    va_z = value(values, "diffusion", "VA")
    if dlco_z is None:
        return not_assessed("gas_transfer", TITLE, "Gas transfer not assessed: no DLCO with a "
                            "reference value.", _KEYS, rule=RULE, source=SOURCE)
    data: dict[str, Any] = {"dlco": level(dlco_z), "kco": level(kco_z), "va": level(va_z),
                            "dlco_z": dlco_z, "kco_z": kco_z, "va_z": va_z,
                            "dlco_severity": severity(dlco_z), "adjusted": adjusted}
    data["reading"] = _reading(data["dlco"], data["va"], data["kco"])
    unit = value(values, "diffusion", "DLCO", "unit")
    dlco = value(values, "diffusion", "DLCO", "measured")
    tag = _adjust_tag(values) if adjusted else ""
    parts = [f"DLCO {dlco:.2f} {unit} is {data['dlco']}{tag} (z {dlco_z:.2f})"
             + (f", {data['dlco_severity']} reduction." if data["dlco_severity"] else ".")]
    for name, lvl, z in (("KCO", data["kco"], kco_z), ("VA", data["va"], va_z)):
        if lvl is not None:
            parts.append(f"{name} {lvl} (z {z:.2f}).")
    if data["reading"]:
        reading = _READINGS[data["reading"]]
        if (data["reading"] == "vascular" and adjusted and case.diffusion is not None
                and case.diffusion.hemoglobin_g_dl is not None):  # Hb already allowed for
            reading = reading.replace(", or anaemia.", " (Hb is allowed for in the predicted "
                                      "value, so anaemia does not explain it).")
        parts.append(reading)
    va = value(values, "diffusion", "VA", "measured")
    tlc = value(values, "volumes", "TLC", "measured")
    data["va_tlc"] = va / tlc if va and tlc else None
    data["maldistribution"] = None if data["va_tlc"] is None else data["va_tlc"] < VA_TLC_LIMIT
    if data["maldistribution"]:
        parts.append(f"VA/TLC {data['va_tlc']:.2f} < 0.8: maldistribution of ventilation"
                     + ("; KCO may be falsely normal." if data["kco"] == "normal" else "."))
    caveats = _caveats(case, data)
    evidence = {"DLCO": dlco, "KCO": value(values, "diffusion", "KCO", "measured"), "VA": va,
                "TLC": tlc, "unit": unit, "DLCO_z": dlco_z, "KCO_z": kco_z, "VA_z": va_z,
                "DLCO_z_unadjusted": value(values, "diffusion", "DLCO"),
                "adjustment": ((values.get("diffusion") or {}).get("DLCO") or {})
                .get("adjusted", {}).get("factors")}
    thresholds = {"z_lln": Z_LLN, "z_uln": Z_ULN, "va_tlc": VA_TLC_LIMIT,
                  "severity_z": {"mild": [-2.5, Z_LLN], "moderate": [-4.0, -2.5],
                                 "severe": [None, -4.0]}}
    return Finding("gas_transfer", TITLE, " ".join(parts), f"dlco_{data['dlco']}", evidence,
                   thresholds, RULE, SOURCE, tuple(caveats), data)


def _adjust_tag(values: dict[str, Any]) -> str:
    """Names the adjustments applied to the predicted value, e.g. ' (predicted adjusted for Hb 12.4 g/dL)'."""
    item = (values.get("diffusion") or {}).get("DLCO") or {}
    f = (item.get("adjusted") or {}).get("factors") or {}
    what = []
    if f.get("hemoglobin_g_dl") is not None:
        what.append(f"Hb {f['hemoglobin_g_dl']:g} g/dL")
    if f.get("cohb_percent") is not None:
        what.append(f"COHb {f['cohb_percent']:g} %")
    if f.get("barometric_kpa") is not None:
        what.append(f"barometric pressure {f['barometric_kpa']:.1f} kPa")
    return f" (predicted adjusted for {', '.join(what)})" if what else ""


def _caveats(case: Case, data: dict[str, Any]) -> list[str]:
    diff = case.diffusion
    out = []
    if data["dlco"] == "low" and (diff is None or diff.hemoglobin_g_dl is None):
        out.append("Haemoglobin not given: anaemia has not been excluded as a cause of the low DLCO.")
    if data["dlco"] == "low" and (diff is None or diff.cohb_percent is None):
        out.append("COHb not given: recent smoking or CO exposure lowers DLCO.")
    if data["kco"] == "high":
        out.append("Before reading a high KCO, confirm the inspired volume was at least 85 % of "
                   "the largest VC.")
    if data["kco"] == "normal" and data["va"] == "low":
        out.append("A normal KCO with a low VA does not exclude parenchymal or vascular disease.")
    out.append("Hb, COHb and altitude constants: Hb (Cotes form) from memory; COHb and PIO2 "
               "from the ATS laboratory manual.")
    return out
