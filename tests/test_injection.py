"""Free text is data, never code: injection payloads stay inert in notebook, kernel and HTML.

Payloads go everywhere a person can type: reviewer name, amended conclusion, reason, notes, the
clinical question and the operator comments. The notebook must keep each as text (markdown
escaped; code cells carry it only inside one JSON string literal) and executing the notebook
must not run any of it (a marker file must not appear).
"""

from __future__ import annotations

import ast
import html
import json
import re

import nbformat
import pytest
from test_export import invented_case

from pftwork.export.html import render_html
from pftwork.export.notebook import build_notebook, export_notebook
from pftwork.export.verify import verify_notebook
from pftwork.worksheet.record import WorksheetRecord


def payloads(marker: str) -> list[str]:
    """Classic injection strings, each trying to create ``marker`` or run markup."""
    return [
        f'"); import os; os.system("touch {marker}") #',
        f"'); import os; os.system('touch {marker}') #",
        f"'''\nimport os; os.system('touch {marker}')\n'''",
        f'"""\nimport os; os.system("touch {marker}")\n"""',
        f"line one\nimport os; os.system('touch {marker}')",
        f"%%bash\ntouch {marker}",
        f"!touch {marker}",
        f"!rm -rf {marker}",
        f"%system touch {marker}",
        "<script>alert(1)</script>",
        '<img src=x onerror="alert(1)">',
        "`code` and ```fence```",
        "$$\\begin{x}\\end{x}$$ and $y$",
        "{{ config }} {% raw %}",
        "back\\slash \\n \\u2028 \\\\",
        f"sep\u2028import os; os.system('touch {marker}')\u2029end",
        "[link](javascript:alert(1)) <a href='javascript:alert(1)'>x</a>",
        "# heading\n- list\n| a | b |",
        "\x1b[8mhidden\x1b[0m \u202eevil",
    ]


def _record(marker: str) -> WorksheetRecord:
    items = payloads(marker)
    case = invented_case()
    case["test"]["question"] = items[0] + " / " + items[9]
    case["test"]["operator_comments"] = items[5] + items[10]
    record = WorksheetRecord.from_case(case)
    reviewer = "Dr X " + items[1]
    record.accept_all(reviewer)
    record.amend("airflow", items[2] + items[9], items[3] + items[12], reviewer)
    for i, text in enumerate(items):
        record.add_note(("volumes", "gas_transfer", "change")[i % 3], text, reviewer)
    record.sign_off(reviewer)
    return record


@pytest.fixture(scope="module")
def marker(tmp_path_factory):
    return tmp_path_factory.mktemp("inj") / "pwned-marker"


@pytest.fixture(scope="module")
def notebook(marker):
    return build_notebook(_record(str(marker)))


def test_record_cell_is_one_import_and_one_assignment(notebook):
    """The record cell parses to an import and one call with a single string constant."""
    cell = next(c for c in notebook.cells if c.id == "pftwork-record")
    tree = ast.parse(cell.source)
    assert ["ImportFrom", "Assign"] == [type(n).__name__ for n in tree.body]
    call = tree.body[1].value
    assert "load_record" == call.func.attr
    assert 1 == len(call.args) and isinstance(call.args[0], ast.Constant)
    assert 4 == len(cell.source.splitlines())  # the JSON literal is on one line


def test_payloads_round_trip_as_data(notebook, marker):
    """Each payload comes back unchanged from the embedded JSON (it is data, not code)."""
    cell = next(c for c in notebook.cells if c.id == "pftwork-record")
    record = json.loads(ast.parse(cell.source).body[1].value.args[0].value)
    texts = [n["text"] for s in record["steps"] for n in s["notes"]]
    assert sorted(payloads(str(marker))) == sorted(texts)


def test_other_code_cells_contain_no_user_text(notebook):
    """Check and chart cells are fixed templates naming only a step id."""
    sources = [c.source for c in notebook.cells if c.cell_type == "code"][1:]
    for src in sources:
        assert re.fullmatch(r"audit\.(recompute_step\(RECORD, '[a-z_]+'\)|check_seal\(RECORD\)"
                            r"|show_zscore_chart\(RECORD\))", src)


def test_markdown_neutralised(notebook):
    """No raw HTML tag, backtick, $$, template braces or line-start magic from user text."""
    for cell in notebook.cells:
        if cell.cell_type != "markdown":
            continue
        src = cell.source
        for bad in ("<script", "<img", "<a ", "`", "$$", "{{", "\u2028", "\x1b", "\u202e"):
            assert bad not in src, (cell.id, bad)
        for line in src.splitlines():
            assert not line.startswith(("%%", "!", "# heading", "- list")), (cell.id, line)


def test_markdown_renders_payloads_as_text(notebook):
    """Rendered by mistune 3 (nbconvert's renderer), payloads yield no element, only text."""
    mistune = pytest.importorskip("mistune")
    rendered = "".join(mistune.html(c.source) for c in notebook.cells
                       if c.cell_type == "markdown")
    tags = set(re.findall(r"<([a-zA-Z0-9]+)", rendered))
    assert tags <= {"h1", "h2", "p", "strong", "em", "span", "br", "ul", "li", "table", "thead",
                    "tbody", "tr", "th", "td", "sub", "code"}
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in rendered.replace("&#40;", "(").replace(
        "&#41;", ")")


def test_html_copy_escapes_payloads(marker):
    """The HTML copy contains the payloads only as escaped text."""
    page = render_html(_record(str(marker)))
    assert "<script" not in page and "<img" not in page and "javascript:alert(1)'>" not in page
    assert html.escape("<script>alert(1)</script>") in page


@pytest.mark.kernel
def test_execution_runs_no_payload(tmp_path, marker):
    """Executing the exported notebook creates no marker file, and the result verifies."""
    path = export_notebook(_record(str(marker)), tmp_path / "inj.ipynb", execute=True)
    nb = nbformat.read(path, as_version=4)
    errors = [o for c in nb.cells if c.cell_type == "code" for o in c.outputs
              if o.output_type == "error"]
    assert [] == errors
    assert not marker.exists()
    assert 0 == verify_notebook(path, execute=False).exit_code
    assert not marker.exists()
