"""Exception and warning types of pftwork.

Every error a user can cause derives from :class:`PftworkError` and also from the matching
builtin (``ValueError``, ``KeyError`` …), so callers may catch either. Errors about input data
carry the offending ``field`` (a dotted path such as ``spirometry.pre.FVC``), the ``value`` and
what was ``expected``, and their message names all three.
"""

from __future__ import annotations

from typing import Any

__all__ = [
    "CaseError",
    "CaseWarning",
    "CurveError",
    "EquationSetError",
    "NotebookError",
    "PftworkError",
    "PftworkWarning",
    "WorksheetError",
]


class PftworkError(Exception):
    """Base class of every error raised on purpose by pftwork."""


class FieldError(PftworkError, ValueError):
    """Raised when a named input field holds a value outside what is expected."""

    def __init__(self, field: str, value: Any, expected: str, hint: str | None = None) -> None:
        self.field = field
        self.value = value
        self.expected = expected
        self.hint = hint
        shown = _show(value)
        message = f"{field} = {shown}: expected {expected}"
        if hint:
            message += f" — {hint}"
        super().__init__(message)


class CaseError(FieldError):
    """Raised when a case file or case dictionary is invalid (field, value and expectation named)."""


class CurveError(FieldError):
    """Raised when a raw volume-time curve cannot be analysed (field, value and expectation named)."""


class EquationSetError(PftworkError, KeyError):
    """Raised when an equation set or a parameter is not known to pftwork."""

    def __str__(self) -> str:  # KeyError would otherwise quote the whole message
        return str(self.args[0]) if self.args else ""


class WorksheetError(PftworkError, RuntimeError):
    """Raised when a worksheet action is not allowed in its current state (e.g. sign-off too early)."""


class NotebookError(PftworkError, ValueError):
    """Raised when a notebook is not a pftwork worksheet or cannot be read."""


class PftworkWarning(UserWarning):
    """Base class of pftwork's warnings: computed, but worth a second look."""


class CaseWarning(PftworkWarning):
    """An unusual but possible input value; travels with the result."""


def _show(value: Any) -> str:
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, str):
        return repr(value)
    try:
        text = repr(value)
    except ValueError:  # e.g. an int too long to print (Python's int-to-str digit limit)
        return f"<{type(value).__name__} too long to show>"
    return text if len(text) <= 60 else text[:57] + "..."
