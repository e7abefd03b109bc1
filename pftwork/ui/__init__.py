"""Jupyter front end of pftwork: worksheet and case-form widgets, plotly figures, styling.

Importing this package loads ipywidgets and plotly; the computation layers never import it.
"""

from __future__ import annotations

from typing import Any

__all__ = ["CaseForm", "Worksheet"]


def __getattr__(name: str) -> Any:
    if name == "Worksheet":
        from pftwork.ui.widget_worksheet import Worksheet

        return Worksheet
    if name == "CaseForm":
        from pftwork.ui.widget_entry import CaseForm

        return CaseForm
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
