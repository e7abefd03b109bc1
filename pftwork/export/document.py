"""The export record: what an auditable notebook embeds, and its comparison with a recomputation.

An export record (``format: "pftwork-export-record/1"``) is a plain JSON dictionary built from a
worksheet record::

    format          "pftwork-export-record/1"
    case            the case dictionary (de-identified when asked)
    equations       equation set per domain, as used
    tables          {set id: SHA-256 of its coefficient table}
    interpretation  the interpretation document (design.md §5)
    export          pftwork_version, worksheet_format, created_utc, exported_utc,
                    deidentified, deidentification (what was done) or null, cautions
    steps           [{id, engine, decision, notes, history, chain}]
    signoff, reviewer, updated_utc, events, marked_identifiers
    chain           algorithm, genesis, seal, head (see :mod:`pftwork.export.chain`)

:func:`recomputation_differences` re-runs ``interpret(load_case(case))`` and lists, field by
field, where the recorded engine output differs. No file I/O here.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from pftwork._version import __version__

from .chain import seal_record

__all__ = [
    "RECORD_FORMAT",
    "Difference",
    "build_export_record",
    "fresh_interpretation",
    "recomputation_differences",
    "worksheet_dict",
    "worksheet_from_export",
]

RECORD_FORMAT = "pftwork-export-record/1"
#: Relative tolerance when comparing recorded and recomputed numbers (floating-point noise only).
REL_TOL = 1e-9
_ABS_TOL = 1e-12


@dataclass(frozen=True)
class Difference:
    """One recorded value that differs from its recomputation."""

    step: str
    field: str
    recorded: Any
    recomputed: Any

    def __str__(self) -> str:
        return (f"{self.step}: {self.field}: recorded {_short(self.recorded)}, "
                f"recomputed {_short(self.recomputed)}")


def _short(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 120 else text[:117] + "..."


def worksheet_dict(record: Any) -> dict[str, Any]:
    """``record`` as a ``pftwork-worksheet/1`` dictionary (accepts the object or its dict)."""
    if hasattr(record, "to_dict"):
        return record.to_dict()
    if isinstance(record, Mapping):
        return copy.deepcopy(dict(record))
    raise TypeError(f"expected a WorksheetRecord or its dictionary, got {type(record).__name__}")


def worksheet_from_export(export: Mapping[str, Any]) -> dict[str, Any]:
    """The worksheet dictionary (``pftwork-worksheet/1``) that an export record was built from."""
    meta = export.get("export") or {}
    return {
        "format": meta.get("worksheet_format") or "pftwork-worksheet/1",
        "created_utc": meta.get("created_utc"),
        "updated_utc": export.get("updated_utc"),
        "case_raw": copy.deepcopy(export.get("case") or {}),
        "interpretation": copy.deepcopy(export.get("interpretation") or {}),
        "steps": [{k: copy.deepcopy(v) for k, v in s.items() if k != "chain"}
                  for s in export.get("steps") or [] if isinstance(s, Mapping)],
        "signoff": copy.deepcopy(export.get("signoff")),
        "marked_identifiers": list(export.get("marked_identifiers") or []),
        "events": copy.deepcopy(export.get("events") or []),
    }


def fresh_interpretation(case: Mapping[str, Any], equations: Any = None) -> dict[str, Any]:
    """The interpretation document recomputed from a case dictionary by this pftwork."""
    from pftwork.case import load_case
    from pftwork.interpret import interpret

    return interpret(load_case(case), equations=equations).to_dict()


def _reviewer(ws: Mapping[str, Any]) -> str | None:
    if ws.get("signoff"):
        return ws["signoff"].get("reviewer")
    names = [s.get("decision", {}).get("reviewer") for s in ws.get("steps") or []]
    names = [n for n in names if n]
    return names[-1] if names else None


def _tables(equations: Mapping[str, str]) -> dict[str, str | None]:
    from pftwork.reference import get_equation_set

    out: dict[str, str | None] = {}
    for set_id in sorted(set(equations.values())):
        try:
            out[set_id] = get_equation_set(set_id).table_sha256
        except Exception:  # an unknown set is reported by verification, not here
            out[set_id] = None
    return out


def _cautions(interpretation: Mapping[str, Any]) -> list[str]:
    from pftwork.interpret.cautions import CAUTIONS

    extra = [c for c in interpretation.get("cautions") or [] if c not in CAUTIONS]
    return [*CAUTIONS, *extra]


def build_export_record(record: Any, *, deidentify: bool = False, key: bytes | None = None,
                        exported_utc: str | None = None) -> dict[str, Any]:
    """The sealed export record of a worksheet (finished or partial).

    Parameters
    ----------
    record : WorksheetRecord or dict
        The worksheet (``to_dict()`` form accepted).
    deidentify : bool
        Remove identifiers (see :mod:`pftwork.export.deidentify`); the interpretation is then
        recomputed from the de-identified case.
    key : bytes, optional
        Pseudonym key for de-identification (random when omitted).
    exported_utc : str, optional
        Export time stamp (ISO-8601 UTC); defaults to now.
    """
    from pftwork.worksheet.record import WorksheetRecord, utc_stamp

    ws = worksheet_dict(record)
    info = None
    if deidentify:
        from .deidentify import deidentify_record

        ws, info = deidentify_record(ws, key=key)
        _recompute_engine(ws, info)
    interpretation = ws.get("interpretation") or {}
    equations = dict(interpretation.get("equations") or {})
    out: dict[str, Any] = {
        "format": RECORD_FORMAT,
        "case": ws.get("case_raw") or {},
        "equations": equations,
        "tables": _tables(equations),
        "interpretation": interpretation,
        "export": {
            "pftwork_version": __version__,
            "worksheet_format": ws.get("format") or WorksheetRecord.FORMAT,
            "created_utc": ws.get("created_utc"),
            "exported_utc": exported_utc or utc_stamp(),
            "deidentified": bool(deidentify),
            "deidentification": info,
            "cautions": _cautions(interpretation),
        },
        "steps": [{"id": s.get("id"), "engine": s.get("engine") or {},
                   "decision": s.get("decision") or {}, "notes": s.get("notes") or [],
                   "history": s.get("history") or []} for s in ws.get("steps") or []],
        "signoff": ws.get("signoff"),
        "reviewer": _reviewer(ws),
        "updated_utc": ws.get("updated_utc"),
        "events": ws.get("events") or [],
        "marked_identifiers": ws.get("marked_identifiers") or [],
    }
    if deidentify:
        out["export"]["exported_utc"] = None  # the export time would reveal the test date
    return seal_record(copy.deepcopy(out))


def _recompute_engine(ws: dict[str, Any], info: dict[str, Any]) -> None:
    """Replace interpretation and engine findings by their recomputation on the new case."""
    equations = (ws.get("interpretation") or {}).get("equations")
    fresh = fresh_interpretation(ws["case_raw"], equations)
    by_id = {f["id"]: f for f in fresh.get("steps") or []}
    changed = []
    for step in ws.get("steps") or []:
        new = by_id.get(step.get("id"))
        if new is None:
            continue
        old = step.get("engine") or {}
        if (old.get("conclusion"), old.get("status")) != (new.get("conclusion"), new.get("status")):
            changed.append(step.get("id"))
        step["engine"] = new
    ws["interpretation"] = fresh
    info["engine_recomputed"] = True
    info["steps_worded_differently"] = changed


# -- comparison with a recomputation ------------------------------------------------------------
def _numbers_equal(a: float, b: float) -> bool:
    return math.isclose(a, b, rel_tol=REL_TOL, abs_tol=_ABS_TOL)


def _diff(recorded: Any, fresh: Any, path: str, out: list[tuple[str, Any, Any]]) -> None:
    if isinstance(recorded, Mapping) and isinstance(fresh, Mapping):
        for key in sorted(set(recorded) | set(fresh), key=str):
            sub = f"{path}.{key}" if path else str(key)
            if key not in fresh:
                out.append((sub, recorded[key], "(absent)"))
            elif key not in recorded:
                out.append((sub, "(absent)", fresh[key]))
            else:
                _diff(recorded[key], fresh[key], sub, out)
        return
    if isinstance(recorded, list) and isinstance(fresh, list):
        if len(recorded) != len(fresh):
            out.append((f"{path}[len]", len(recorded), len(fresh)))
        for i, (a, b) in enumerate(zip(recorded, fresh, strict=False)):
            _diff(a, b, f"{path}[{i}]", out)
        return
    numeric = (int, float)
    if (isinstance(recorded, numeric) and isinstance(fresh, numeric)
            and not isinstance(recorded, bool) and not isinstance(fresh, bool)):
        if not _numbers_equal(float(recorded), float(fresh)):
            out.append((path, recorded, fresh))
        return
    if recorded != fresh:
        out.append((path, recorded, fresh))


def field_differences(recorded: Any, fresh: Any, prefix: str = "") -> list[tuple[str, Any, Any]]:
    """``(field path, recorded, recomputed)`` for every leaf that differs (numbers within 1e-9)."""
    out: list[tuple[str, Any, Any]] = []
    _diff(recorded, fresh, prefix, out)
    return out


def recomputation_differences(export: Mapping[str, Any],
                              fresh: Mapping[str, Any] | None = None) -> list[Difference]:
    """Every recorded engine result that differs from ``interpret(load_case(case))``.

    Parameters
    ----------
    export : dict
        An export record (see module docstring).
    fresh : dict, optional
        A recomputed interpretation document (computed here when omitted).

    Returns
    -------
    list of Difference
        Per step (``engine.<path>``), then the interpretation's ``values`` and ``summary``
        (step ``"interpretation"``). Steps present on one side only are named too.
    """
    if fresh is None:
        fresh = fresh_interpretation(export.get("case") or {}, export.get("equations") or None)
    found: list[Difference] = []
    fresh_steps = {f["id"]: f for f in fresh.get("steps") or []}
    recorded_ids = []
    for step in export.get("steps") or []:
        if not isinstance(step, Mapping):
            continue
        sid = str(step.get("id"))
        recorded_ids.append(sid)
        if sid not in fresh_steps:
            found.append(Difference(sid, "step", "present", "(no such step in recomputation)"))
            continue
        for path, a, b in field_differences(step.get("engine") or {}, fresh_steps[sid], "engine"):
            found.append(Difference(sid, path, a, b))
    for sid in fresh_steps:
        if sid not in recorded_ids:
            found.append(Difference(sid, "step", "(missing from the record)", "present"))
    order = list(fresh_steps)
    kept = [s for s in recorded_ids if s in fresh_steps]
    if kept != [s for s in order if s in kept]:
        found.append(Difference("record", "step order", kept, order))
    interp = export.get("interpretation") or {}
    for part in ("equations", "values", "summary"):
        for path, a, b in field_differences(interp.get(part), fresh.get(part), part):
            found.append(Difference("interpretation", path, a, b))
    return found
