"""The one-way flow of design.md §1: computation never imports widgets, plotting or notebooks."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "pftwork"
COMPUTATION = ["case.py", "case_model.py", "units.py", "errors.py", "lms.py", "reference.py",
               "quality", "interpret", "worksheet/record.py"]
FORBIDDEN = ("ipywidgets", "plotly", "IPython", "nbformat", "nbclient", "anywidget",
             "pyspiro", "spiref", "spiro_zscore")


def _python_files():
    for entry in COMPUTATION:
        path = PACKAGE / entry
        if path.is_dir():
            yield from sorted(path.rglob("*.py"))
        elif path.exists():
            yield path


@pytest.mark.parametrize("path", list(_python_files()), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_no_ui_or_notebook_imports(path):
    """Computation modules import none of the UI, notebook or oracle libraries."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    imported = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            imported.update(alias.name.split(".")[0] for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            imported.add(node.module.split(".")[0])

    assert set() == imported & set(FORBIDDEN)


def test_interpreting_a_case_loads_no_ui():
    """Loading and interpreting a case in a fresh interpreter pulls in no UI/notebook module."""
    code = (
        "import sys, pftwork\n"
        "case = pftwork.load_case(pftwork.data_path())\n"
        "pftwork.interpret(case)\n"
        f"bad = [m for m in {FORBIDDEN!r} if m in sys.modules]\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)

    assert "" == out.stdout.strip()


def test_interpret_stays_callable_after_subpackage_import():
    """``pftwork.interpret`` is the function even after ``pftwork.interpret.*`` modules load.

    (A regression: a lazily resolved attribute was shadowed by the subpackage of the same name,
    so a notebook run a second time in one kernel failed.)
    """
    code = (
        "import pftwork\n"
        "case = pftwork.load_case(pftwork.data_path())\n"
        "pftwork.interpret(case)\n"
        "import pftwork.interpret.change\n"
        "print(pftwork.interpret(case).summary['pattern'])\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)

    assert "obstruction" == out.stdout.strip()
