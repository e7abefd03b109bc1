"""Auditable exports of a worksheet: notebook, record chain, verification, HTML, presentation.

Flow: worksheet record -> :func:`~pftwork.export.document.build_export_record` (sealed by
:mod:`~pftwork.export.chain`, de-identified on request by :mod:`~pftwork.export.deidentify`)
-> notebook (:mod:`~pftwork.export.notebook`) or HTML (:mod:`~pftwork.export.html`).
:func:`~pftwork.export.verify.verify_notebook` checks a notebook; the generated code cells call
:mod:`~pftwork.export.audit`. Submodules are imported on first use so that importing
``pftwork.export.audit`` inside a kernel does not pull in nbformat or nbclient.
"""

from __future__ import annotations

import importlib
from typing import Any

__all__ = [
    "auto_worksheet",
    "build_notebook",
    "export_notebook",
    "render_html",
    "serve",
    "verify_notebook",
    "write_html",
]

_LAZY = {
    "build_notebook": "pftwork.export.notebook",
    "export_notebook": "pftwork.export.notebook",
    "verify_notebook": "pftwork.export.verify",
    "render_html": "pftwork.export.html",
    "write_html": "pftwork.export.html",
    "serve": "pftwork.export.present",
}


def auto_worksheet(case: Any, reviewer: str | None = None, *, equations: Any = None) -> Any:
    """A worksheet with every engine conclusion accepted, signed off when a reviewer is named.

    Parameters
    ----------
    case : Case, dict or path
        The case.
    reviewer : str, optional
        Recorded as the person who accepted the conclusions and signed off. Without it the
        steps are accepted as "pftwork (automatic)" and the worksheet stays unsigned.
    equations : optional
        Passed to :func:`pftwork.interpret.interpret`.
    """
    from pftwork.worksheet.record import WorksheetRecord

    record = WorksheetRecord.from_case(case, equations=equations)
    record.accept_all(reviewer or "pftwork (automatic)")
    if reviewer:
        record.sign_off(reviewer)
    return record


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
