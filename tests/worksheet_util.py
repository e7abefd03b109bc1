"""Shared helpers for the worksheet tests: an invented case and a fixed clock.

The case is the invented example of design.md §2 (our own scenario: a 61-year-old woman with
progressive dyspnoea), written out here so the tests do not depend on the bundled demo files.
"""

from __future__ import annotations

import copy
import datetime as dt
import itertools
from collections.abc import Callable
from typing import Any

EXAMPLE_CASE: dict[str, Any] = {
    "format": "pftwork-case/1",
    "subject": {"id": "clinic-A-0192", "sex": "female", "age_years": 61.4, "height_cm": 159.0,
                "weight_kg": 77.0, "ancestry": None, "name": None, "birth_date": None,
                "record_number": None},
    "test": {"date": "2026-10-14", "altitude_m": 240, "question": "progressive dyspnoea"},
    "reference": {"spirometry": "gli-global-2022", "volumes": "gli-2021",
                  "diffusion": "gli-2017"},
    "spirometry": {
        "pre": {"trials": [{"FEV1": 1.42, "FVC": 2.51, "PEF": 4.0, "BEV": 0.05, "FET": 11.2,
                            "plateau": True, "FIVC": 2.49}]},
        "post": {"FEV1": 1.66, "FVC": 2.70},
        "bronchodilator": {"agent": "salbutamol", "dose": "400 microgram", "minutes_after": 15},
    },
    "volumes": {"method": "plethysmography", "TLC": 5.6, "RV": 3.0, "FRC": 3.6,
                "trials": [{"FRC": 3.61}, {"FRC": 3.55}, {"FRC": 3.64}]},
    "diffusion": {"unit": "SI", "hemoglobin_g_dl": 12.4, "cohb_percent": None,
                  "trials": [{"DLCO": 4.9, "VA": 4.3, "IVC": 2.4, "breath_hold_s": 10.2}]},
    "airway_resistance": {"sRaw": 1.6, "unit": "kPa*s"},
    "history": [{"test": {"date": "2025-09-30"},
                 "spirometry": {"pre": {"FEV1": 1.58, "FVC": 2.62}}}],
}


def example_case() -> dict[str, Any]:
    """A fresh deep copy of :data:`EXAMPLE_CASE`."""
    return copy.deepcopy(EXAMPLE_CASE)


def ticking_clock(start: str = "2026-12-01T10:00:00") -> Callable[[], dt.datetime]:
    """A clock that advances one second per call (deterministic time stamps)."""
    base = dt.datetime.fromisoformat(start).replace(tzinfo=dt.timezone.utc)
    counter = itertools.count()
    return lambda: base + dt.timedelta(seconds=next(counter))
