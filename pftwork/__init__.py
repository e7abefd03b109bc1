"""pftwork: documented, auditable interpretation of pulmonary function tests in Jupyter.

Decision support only: the signing physician decides; local protocols and licensed practice
prevail. Not a certified medical device.

Public API (imported lazily so that computation never pulls in widgets or plotting)::

    load_case(path_or_dict) -> Case              # validated case, SI units
    reference_values(set_id, parameter, ...)     # GLI predicted / LLN / ULN / z, vectorised
    interpret(case) -> Interpretation            # the step chain and the summary
    interpret_table(dataframe) -> DataFrame      # the same for a table of tests, vectorised
    Worksheet(case)                              # the ipywidgets worksheet
    WorksheetRecord                              # the worksheet's state, without widgets
    export_notebook(record, path)                # the auditable notebook
    verify_notebook(path)                        # re-execute and check an exported notebook
    data_path(name), demo_cases()                # the bundled invented demo cases
"""

from __future__ import annotations

import importlib
from pathlib import Path
from typing import Any

from ._version import __version__
from .interpret import interpret  # eager: the subpackage of the same name would shadow a lazy one

__all__ = [
    "__version__",
    "CaseError",
    "PftworkError",
    "Worksheet",
    "WorksheetRecord",
    "data_path",
    "demo_cases",
    "export_notebook",
    "interpret",
    "interpret_table",
    "load_case",
    "reference_values",
    "verify_notebook",
]

_LAZY = {
    "load_case": ("pftwork.case", "load_case"),
    "reference_values": ("pftwork.reference", "reference_values"),
    "Worksheet": ("pftwork.ui.widget_worksheet", "Worksheet"),
    "WorksheetRecord": ("pftwork.worksheet.record", "WorksheetRecord"),
    "export_notebook": ("pftwork.export.notebook", "export_notebook"),
    "interpret_table": ("pftwork.batch", "interpret_table"),
    "verify_notebook": ("pftwork.export.verify", "verify_notebook"),
    "CaseError": ("pftwork.errors", "CaseError"),
    "PftworkError": ("pftwork.errors", "PftworkError"),
}

#: The demo case that ``pftwork demo`` and ``worksheets/demo.ipynb`` open first.
DEMO_CASE = "copd_hyperinflation_retired_welder"


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        module, attr = _LAZY[name]
        return getattr(importlib.import_module(module), attr)
    raise AttributeError(f"module 'pftwork' has no attribute {name!r}")


def _data_dir() -> Path:
    here = Path(__file__).resolve().parent
    for candidate in (here / "_data", here.parent / "data"):
        if candidate.is_dir():
            return candidate
    raise FileNotFoundError("pftwork's demo data folder is missing (expected pftwork/_data or data/)")


def data_path(name: str = DEMO_CASE) -> Path:
    """Path of a bundled invented demo case, by file name with or without ``.json``."""
    stem = name[:-5] if name.endswith(".json") else name
    path = _data_dir() / f"{stem}.json"
    if not path.is_file():
        known = ", ".join(p.stem for p in sorted(_data_dir().glob("*.json")))
        raise FileNotFoundError(f"no demo case named {name!r}; bundled cases: {known}")
    return path


def demo_cases() -> list[Path]:
    """Paths of all bundled invented demo cases."""
    return sorted(_data_dir().glob("*.json"))
