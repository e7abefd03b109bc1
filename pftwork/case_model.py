"""Typed, validated case data (``format: "pftwork-case/1"``).

All quantities are held in one internal unit system, whatever the case file used:

* volumes in litres BTPS, flows in L/s, time in s, height in cm, age in decimal years;
* diffusion in **SI**: DLCO in mmol/min/kPa, KCO in mmol/min/kPa/L, VA in L BTPS
  (``Diffusion.unit`` remembers the case's own unit for reporting);
* haemoglobin in g/dL, altitude in m, barometric pressure in kPa.

Objects are frozen dataclasses built by :func:`pftwork.case.load_case`; nothing here does I/O.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field
from typing import Any

import numpy as np

__all__ = [
    "AirwayResistance",
    "Bronchodilator",
    "Case",
    "Curve",
    "Diffusion",
    "DiffusionTrial",
    "HistoryEntry",
    "SpirometrySet",
    "Spirometry",
    "SpiroTrial",
    "Subject",
    "TestInfo",
    "Volumes",
    "VolumeTrial",
    "SPIRO_PARAMETERS",
    "VOLUME_PARAMETERS",
    "parameter_label",
    "DIFFUSION_PARAMETERS",
]

#: Spirometric parameters a case may carry (trade spelling, as in the case file).
SPIRO_PARAMETERS = ("FEV1", "FVC", "PEF", "FEF25_75", "FEF75", "FEV0_75", "FEV6", "FEV0_5",
                    "FEF25", "FEF50", "FIVC", "PIF", "FIF50", "VC")
_LABELS = (("FEF25_75", "FEF25–75"), ("FEV0_75", "FEV0.75"), ("FEV0_5", "FEV0.5"))


def parameter_label(name: str) -> str:
    """The trade's printed spelling of a parameter key (``FEF25_75`` → ``FEF25–75``)."""
    for key, label in _LABELS:
        name = name.replace(key, label)
    return name


#: Static lung volume parameters.
VOLUME_PARAMETERS = ("TLC", "RV", "FRC", "ERV", "IC", "VC")
#: Single-breath diffusion parameters (held in SI internally).
DIFFUSION_PARAMETERS = ("DLCO", "VA", "KCO")


@dataclass(frozen=True)
class Subject:
    """The person tested. ``sex`` is sex at birth as the equations need: male, female or both."""

    id: str
    sex: str
    age_years: float
    height_cm: float
    weight_kg: float | None = None
    ancestry: str | None = None
    name: str | None = None
    birth_date: str | None = None
    record_number: str | None = None


@dataclass(frozen=True)
class TestInfo:
    """When and where the test was done, and why."""

    date: _dt.date | None = None
    altitude_m: float | None = None
    barometric_kpa: float | None = None
    question: str | None = None
    copd: bool | None = None
    operator_comments: str | None = None


@dataclass(frozen=True)
class Curve:
    """A raw forced manoeuvre: cumulative exhaled volume (L BTPS) against time (s).

    The expiratory limb rises from the start of the blow to FVC; an inspiratory limb recorded
    after it shows as the volume falling again. Samples are strictly increasing in time.
    """

    time_s: np.ndarray
    volume_l: np.ndarray

    def __eq__(self, other: object) -> bool:
        return (isinstance(other, Curve) and np.array_equal(self.time_s, other.time_s)
                and np.array_equal(self.volume_l, other.volume_l))

    __hash__ = None  # type: ignore[assignment]


@dataclass(frozen=True)
class SpiroTrial:
    """One forced manoeuvre as summarised by the lab (any field may be absent) and/or its curve."""

    FEV1: float | None = None
    FVC: float | None = None
    PEF: float | None = None
    FEV0_5: float | None = None
    FEV0_75: float | None = None
    FEV6: float | None = None
    FEF25_75: float | None = None
    FEF75: float | None = None
    BEV: float | None = None
    FET: float | None = None
    plateau: bool | None = None
    FIVC: float | None = None
    hesitation_s: float | None = None
    cough: bool | None = None
    glottic_closure: bool | None = None
    leak: bool | None = None
    early_termination: bool | None = None
    curve: Curve | None = None
    label: str | None = None

    def value(self, name: str) -> float | None:
        """The summary value ``name`` (``None`` when not given)."""
        return getattr(self, name, None)


@dataclass(frozen=True)
class SpirometrySet:
    """A pre- or post-bronchodilator set: the lab's reported values and/or its trials."""

    reported: dict[str, float] = field(default_factory=dict)
    trials: tuple[SpiroTrial, ...] = ()


@dataclass(frozen=True)
class Bronchodilator:
    agent: str | None = None
    dose: str | None = None
    minutes_after: float | None = None


@dataclass(frozen=True)
class Spirometry:
    pre: SpirometrySet | None = None
    post: SpirometrySet | None = None
    bronchodilator: Bronchodilator | None = None


@dataclass(frozen=True)
class VolumeTrial:
    """One plethysmographic (or dilution) manoeuvre; any subset of FRC, ERV, IC, VC in L."""

    FRC: float | None = None
    ERV: float | None = None
    IC: float | None = None
    VC: float | None = None


@dataclass(frozen=True)
class Volumes:
    method: str | None = None
    reported: dict[str, float] = field(default_factory=dict)
    trials: tuple[VolumeTrial, ...] = ()


@dataclass(frozen=True)
class DiffusionTrial:
    """One single-breath manoeuvre, SI units (DLCO mmol/min/kPa, VA L, IVC L)."""

    DLCO: float | None = None
    VA: float | None = None
    KCO: float | None = None
    IVC: float | None = None
    breath_hold_s: float | None = None
    inspiration_time_s: float | None = None
    sample_time_s: float | None = None


@dataclass(frozen=True)
class Diffusion:
    """Single-breath gas transfer; values in SI internally, ``unit`` is the case's own unit."""

    unit: str = "SI"
    reported: dict[str, float] = field(default_factory=dict)
    trials: tuple[DiffusionTrial, ...] = ()
    hemoglobin_g_dl: float | None = None
    cohb_percent: float | None = None


@dataclass(frozen=True)
class AirwayResistance:
    """Plethysmographic airway resistance; ``sRaw`` in kPa*s, ``Raw`` in kPa*s/L."""

    sRaw: float | None = None
    Raw: float | None = None
    unit: str = "kPa*s"


@dataclass(frozen=True)
class HistoryEntry:
    """An earlier test of the same subject (age derived from the date difference when absent)."""

    date: _dt.date | None
    age_years: float | None
    height_cm: float | None
    spirometry: Spirometry | None = None
    volumes: Volumes | None = None
    diffusion: Diffusion | None = None


@dataclass(frozen=True)
class Case:
    """A validated test. ``raw`` is the case dictionary as given (for embedding and re-loading)."""

    subject: Subject
    test: TestInfo = field(default_factory=TestInfo)
    reference: dict[str, str] = field(default_factory=dict)
    spirometry: Spirometry | None = None
    volumes: Volumes | None = None
    diffusion: Diffusion | None = None
    airway_resistance: AirwayResistance | None = None
    lab_reference: dict[str, dict[str, float]] = field(default_factory=dict)
    history: tuple[HistoryEntry, ...] = ()
    warnings: tuple[str, ...] = ()
    raw: dict[str, Any] = field(default_factory=dict, compare=False, repr=False)
