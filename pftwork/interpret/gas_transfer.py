"""Haemoglobin, carboxyhaemoglobin and altitude adjustments of gas transfer (pure arithmetic).

Naming: ``*_factor`` functions return a dimensionless multiplier; ``hb_factor`` and
``cohb_factor`` multiply the **predicted** DLCO/KCO, ``altitude_factor`` multiplies the
**measured** value (adjusting it to sea-level inspired PO2).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

__all__ = [
    "KPA_TO_MMHG",
    "SI_TO_TRADITIONAL",
    "altitude_factor",
    "barometric_kpa_at",
    "cohb_factor",
    "hb_factor",
    "inspired_po2_mmhg",
]

#: 1 mmol/min/kPa = 2.987 mL/min/mmHg (DLCO-2017 / standards.md §4.6, VERIFIED-2nd).
SI_TO_TRADITIONAL = 2.987
#: 1 kPa in mmHg (101.325 kPa = 760 mmHg).
KPA_TO_MMHG = 760.0 / 101.325


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
    h = np.asarray(altitude_m, dtype=float)
    return 101.325 * (1.0 - 2.25577e-5 * h) ** 5.25588


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
