"""Unit conversions used on entry and for reporting (pure functions, no state).

Sources: 1 mmol/min/kPa = 2.987 mL/min/mmHg (standards.md §4.6, VERIFIED-2nd via
ERS/ATS DLCO literature); 1 kPa = 7.50062 mmHg = 10.1972 cmH2O (SI definitions);
1 inch = 2.54 cm (international yard, 1959).
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "DLCO_SI_TO_TRADITIONAL",
    "KPA_PER_MMHG",
    "CMH2O_PER_KPA",
    "diffusion_from_si",
    "diffusion_to_si",
    "inches_to_cm",
    "barometric_pressure_kpa",
]

#: mL/min/mmHg per mmol/min/kPa (also per litre for KCO).
DLCO_SI_TO_TRADITIONAL = 2.987
#: kPa per mmHg (101.325 kPa = 760 mmHg).
KPA_PER_MMHG = 101.325 / 760.0
#: cmH2O per kPa (1 cmH2O = 98.0665 Pa).
CMH2O_PER_KPA = 1000.0 / 98.0665


def diffusion_to_si(value: float, unit: str) -> float:
    """Convert a DLCO (or KCO) value given in ``unit`` ("SI" or "traditional") to SI."""
    return value if unit == "SI" else value / DLCO_SI_TO_TRADITIONAL


def diffusion_from_si(value, unit: str):
    """Convert a DLCO (or KCO) value (scalar or array) held in SI to ``unit``."""
    return value if unit == "SI" else np.multiply(value, DLCO_SI_TO_TRADITIONAL)


def inches_to_cm(value: float) -> float:
    """Convert a height in inches to centimetres."""
    return value * 2.54


def barometric_pressure_kpa(altitude_m: float) -> float:
    """Barometric pressure (kPa) at ``altitude_m`` from the ICAO standard atmosphere.

    ``P = 101.325 * (1 - 2.25577e-5 * h) ** 5.25588`` (ICAO 1993 standard atmosphere, troposphere).
    Used only when the lab did not record the barometric pressure itself.
    """
    return 101.325 * (1.0 - 2.25577e-5 * altitude_m) ** 5.25588
