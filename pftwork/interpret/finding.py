"""The :class:`Finding` record produced by every interpretation step, and JSON helpers.

A finding is plain, frozen data: what was concluded, from which values, under which rule and
thresholds, citing which published standard. ``to_dict()`` is JSON-safe (no numpy scalars,
no NaN: missing numbers are ``None``).
"""

from __future__ import annotations

import datetime as _dt
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

__all__ = ["Finding", "STEP_IDS", "Z_LLN", "Z_ULN", "json_safe", "level", "not_assessed",
           "severity", "value"]

#: The steps of the interpretation chain, in order.
STEP_IDS: tuple[str, ...] = ("validity", "airflow", "volumes", "gas_transfer", "bronchodilator",
                             "resistance", "change", "synthesis")


#: z at the lower limit of normal (5th percentile) and the upper limit (95th); INTERP-2022 §3.1.
Z_LLN = -1.645
Z_ULN = 1.645


def level(z: float | None) -> str | None:
    """``"low"`` (z < −1.645), ``"high"`` (z > +1.645), ``"normal"`` or ``None`` without z."""
    if z is None:
        return None
    if z < Z_LLN:
        return "low"
    if z > Z_ULN:
        return "high"
    return "normal"


def severity(z: float | None) -> str | None:
    """Severity band of a low z: severe z < −4, moderate −4 <= z < −2.5, mild −2.5 <= z < −1.645.

    Returns ``None`` for z >= −1.645 or missing z. The printed INTERP-2022 bands
    (−1.65 to −2.5, −2.51 to −4.0, < −4.1) leave gaps; half-open bands close them (our choice,
    standards.md §3.4).
    """
    if z is None:
        return None
    if z < -4.0:
        return "severe"
    if z < -2.5:
        return "moderate"
    if z < Z_LLN:
        return "mild"
    return None


def value(values: dict[str, Any], block: str, param: str, key: str = "z") -> Any:
    """``values[block][param][key]`` or ``None`` when any level is absent."""
    item = (values.get(block) or {}).get(param)
    return None if item is None else item.get(key)


def json_safe(obj: Any) -> Any:
    """Return ``obj`` converted to plain JSON types (NaN/inf become ``None``).

    Parameters
    ----------
    obj : Any
        Nested dicts, lists, tuples, numpy scalars/arrays, dates, floats.

    Returns
    -------
    Any
        The same structure built of dict, list, str, int, float, bool and None only.
    """
    if obj is None or isinstance(obj, (bool, str)):
        return obj
    if isinstance(obj, (np.bool_,)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        value = float(obj)
        return value if math.isfinite(value) else None
    if isinstance(obj, np.ndarray):
        return json_safe(obj.tolist())
    if isinstance(obj, Mapping):
        return {str(k): json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple, set, frozenset)):
        return [json_safe(v) for v in obj]
    if isinstance(obj, (_dt.date, _dt.datetime)):
        return obj.isoformat()
    if hasattr(obj, "to_dict"):
        return json_safe(obj.to_dict())
    return str(obj)


@dataclass(frozen=True)
class Finding:
    """The outcome of one interpretation step.

    Attributes
    ----------
    id : str
        One of :data:`STEP_IDS`.
    title : str
        Short heading of the step.
    conclusion : str
        Plain clinical sentence(s).
    status : str
        Machine label, e.g. ``"normal"``, ``"obstruction"``, ``"not_assessed"``, ``"stop"``.
    evidence : dict
        The values the step used.
    thresholds : dict
        The limits the values were compared with.
    rule : str
        The decision rule, in our own words.
    source : str
        Citation: standard and section.
    caveats : tuple of str
        Limits of the conclusion worth reading before signing.
    data : dict
        Machine-readable outputs (e.g. ``{"obstruction": True, "severity": "moderate"}``).
    """

    id: str
    title: str
    conclusion: str
    status: str
    evidence: dict[str, Any] = field(default_factory=dict)
    thresholds: dict[str, Any] = field(default_factory=dict)
    rule: str = ""
    source: str = ""
    caveats: tuple[str, ...] = ()
    data: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if self.id not in STEP_IDS:
            raise ValueError(f"Finding.id must be one of {STEP_IDS} (got {self.id!r})")

    @property
    def assessed(self) -> bool:
        """``True`` unless the step could not be assessed or was stopped."""
        return self.status not in ("not_assessed", "stopped")

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of every field."""
        return json_safe({
            "id": self.id, "title": self.title, "conclusion": self.conclusion,
            "status": self.status, "evidence": self.evidence, "thresholds": self.thresholds,
            "rule": self.rule, "source": self.source, "caveats": list(self.caveats),
            "data": self.data,
        })


def not_assessed(step_id: str, title: str, reason: str, data_keys: tuple[str, ...] = (),
                 *, status: str = "not_assessed", rule: str = "", source: str = "") -> Finding:
    """A finding for a step that lacks its data (every output in ``data_keys`` is ``None``).

    Parameters
    ----------
    step_id, title : str
        Identity of the step.
    reason : str
        Why it was not assessed (becomes the conclusion).
    data_keys : tuple of str
        Output keys to report as ``None``.
    status : str
        ``"not_assessed"`` (missing data) or ``"stopped"`` (an earlier step stopped the chain).
    """
    return Finding(id=step_id, title=title, conclusion=reason, status=status, rule=rule,
                   source=source, data=dict.fromkeys(data_keys))
