"""Assemble the ``pftwork-interpretation/1`` JSON document (design.md §5)."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from pftwork._version import __version__
from pftwork.interpret.finding import json_safe

if TYPE_CHECKING:
    from pftwork.interpret import Interpretation

__all__ = ["FORMAT", "build_document"]

#: Format tag of the document; keys may be added within ``/1``, none renamed or removed.
FORMAT = "pftwork-interpretation/1"


def _equation_sets(equations: dict[str, str]) -> dict[str, Any]:
    try:
        from pftwork.reference import get_equation_set
    except ImportError:  # pragma: no cover - reference engine always present once merged
        return {}
    out = {}
    for set_id in dict.fromkeys(equations.values()):
        eq = get_equation_set(set_id)
        out[set_id] = {"title": eq.title, "citation": eq.citation, "doi": eq.doi,
                       "erratum_doi": getattr(eq, "erratum_doi", None),
                       "table_sha256": eq.table_sha256}
    return out


def build_document(result: Interpretation) -> dict[str, Any]:
    """The §5 document of one interpretation (JSON-safe; no personal identifiers but ``id``).

    Parameters
    ----------
    result : Interpretation
        From :func:`pftwork.interpret.interpret`.

    Returns
    -------
    dict
        ``format, pftwork_version, equations, equation_sets, subject, test, values, quality,
        summary, steps, borderline, sensitivity, cautions, notes``.
    """
    subj, test = result.case.subject, result.case.test
    doc = {
        "format": FORMAT,
        "pftwork_version": __version__,
        "equations": dict(result.equations),
        "equation_sets": _equation_sets(result.equations),
        "subject": {"id": subj.id, "sex": subj.sex, "age_years": subj.age_years,
                    "height_cm": subj.height_cm, "ancestry": subj.ancestry},
        "test": {"date": test.date, "altitude_m": test.altitude_m,
                 "barometric_kpa": test.barometric_kpa, "question": test.question,
                 "copd": test.copd},
        "values": result.values,
        "quality": result.quality,
        "summary": result.summary,
        "steps": [f.to_dict() for f in result.steps],
        "borderline": list(result.borderline),
        "sensitivity": result.sensitivity,
        "cautions": list(result.cautions),
        "notes": list(result.notes),
    }
    return json_safe(doc)
