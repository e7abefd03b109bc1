"""Equation sensitivity: does the conclusion change with the spirometry set, or with sex?

The chain is re-run under GLI-2012 (the subject's ancestry, or ``other``) and GLI Global 2022,
and under both sexes when the case asks for ``sex: "both"``. The block lists every variant's
summary and, key by key, where they differ.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

__all__ = ["COMPARED_KEYS", "sensitivity", "variants"]

#: Summary keys compared across variants.
COMPARED_KEYS = ("pattern", "obstruction", "obstruction_severity", "restriction",
                 "hyperinflation", "air_trapping", "dlco", "kco", "bdr", "nonspecific", "prism")
_SPIRO_SETS = ("gli-global-2022", "gli-2012")
_Z_SHOWN = (("pre", "FEV1/FVC"), ("pre", "FEV1"), ("pre", "FVC"))


def variants(equations: dict[str, str], sex: str) -> list[tuple[str, dict[str, str], str]]:
    """The (label, equations, sex) combinations to run, the chosen one first."""
    sexes = ["male", "female"] if sex == "both" else [sex]
    sets = [equations["spirometry"]] + [s for s in _SPIRO_SETS if s != equations["spirometry"]]
    out = []
    for spiro in sets:
        for s in sexes:
            eq = dict(equations, spirometry=spiro)
            out.append((f"{spiro} / {s}", eq, s))
    return out


def sensitivity(equations: dict[str, str], sex: str, ancestry: str | None,
                run: Callable[[dict[str, str], str], tuple[dict[str, Any], dict[str, Any]]]
                ) -> dict[str, Any]:
    """Run the chain under each variant and report where the conclusion changes.

    Parameters
    ----------
    equations : dict
        The chosen equation sets.
    sex : str
        The subject's sex (``"both"`` adds a male and a female variant).
    ancestry : str or None
        Used by GLI-2012 (``other`` when ``None``).
    run : callable
        ``run(equations, sex) -> (summary, values)`` for one variant.

    Returns
    -------
    dict
        ``variants`` (label, equations, sex, summary, z), ``changes`` (key -> value per
        variant, only where they differ), ``stable`` (no change) and ``note``.
    """
    rows = []
    for label, eq, s in variants(equations, sex):
        summary, values = run(eq, s)
        z = {f"{blk}.{p}": ((values.get(blk) or {}).get(p) or {}).get("z") for blk, p in _Z_SHOWN}
        rows.append({"label": label, "equations": eq, "sex": s,
                     "summary": {k: summary.get(k) for k in COMPARED_KEYS}, "z": z})
    changes = []
    for key in COMPARED_KEYS:
        seen = {r["label"]: r["summary"][key] for r in rows}
        if len({repr(v) for v in seen.values()}) > 1:
            changes.append({"key": key, "by_variant": seen})
    note = (f"GLI-2012 computed with ancestry '{ancestry or 'other'}'. "
            + ("No conclusion changes between variants." if not changes else
               "Conclusions that differ: " + ", ".join(c["key"] for c in changes) + "."))
    return {"variants": rows, "changes": changes, "stable": not changes, "note": note}
