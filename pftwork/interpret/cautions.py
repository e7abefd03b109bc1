"""The clinical cautions that accompany every interpretation (also used by README, UI, export)."""

from __future__ import annotations

__all__ = ["CAUTIONS", "cautions"]

#: Fixed text, in our own words. Order matters: the first line is the one shown when space is short.
CAUTIONS: tuple[str, ...] = (
    "Decision support only: this text is a draft for the signing physician, who decides the "
    "final interpretation.",
    "Local protocols and licensed clinical practice prevail over anything suggested here.",
    "pftwork is not a certified medical device and has not been validated for diagnostic use.",
    "Results depend on the quality of the measurements and on the reference equations chosen; "
    "values near the limits of normal may classify differently on repeat testing or with "
    "other equations.",
    "Lung function patterns are physiological descriptions, not diagnoses: read them together "
    "with the clinical question, history, examination and imaging.",
)


def cautions() -> tuple[str, ...]:
    """The cautions as a tuple of sentences (see :data:`CAUTIONS`)."""
    return CAUTIONS
