"""The reviewer's worksheet: record model (pure), atomic storage and the Jupyter widget.

``WorksheetRecord`` and the storage functions import no UI library; ``Worksheet`` (the
ipywidgets front end from :mod:`pftwork.ui.widget_worksheet`) is imported lazily on first use.
"""

from __future__ import annotations

from typing import Any

from .record import Decision, Note, StepRecord, WorksheetRecord
from .storage import autosave_path, load_record, save_record

__all__ = [
    "Decision",
    "Note",
    "StepRecord",
    "Worksheet",
    "WorksheetRecord",
    "autosave_path",
    "load_record",
    "save_record",
]


def __getattr__(name: str) -> Any:
    if name == "Worksheet":
        from pftwork.ui.widget_worksheet import Worksheet

        return Worksheet
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
