"""Hostile input on the command line: exit 2 and exactly one stderr line, never a traceback.

Contract: design.md §4 ("Exit 2 always comes with one line on stderr naming the field, the value
and what was expected — never a traceback"). Every case runs ``python -m pftwork.cli`` in a
subprocess, as a user would; none of them starts a Jupyter kernel (each fails before one would).
The runs go two at a time from one module fixture to keep the file quick (~20 s).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import nbformat
import pytest

import pftwork

GOOD = pftwork.data_path("normal_harbour_pilot")


def _files(root: Path) -> None:
    """The hostile inputs, written once into ``root``."""
    (root / "empty.json").write_text("", encoding="utf-8")
    (root / "empty.csv").write_text("", encoding="utf-8")
    (root / "text.json").write_text("this is not JSON\n", encoding="utf-8")
    (root / "array.json").write_text("[1, 2, 3]", encoding="utf-8")
    (root / "object.json").write_text("{}", encoding="utf-8")
    (root / "binary.json").write_bytes(b"\xff\xfe\x00\x01\x80")
    (root / "binary.csv").write_bytes(b"\xff\xfe\x00\x01\x80")
    (root / "junk.parquet").write_bytes(b"PAR")
    (root / "deep.json").write_text('{"a":' * 5000 + "1" + "}" * 5000, encoding="utf-8")
    case = json.loads(GOOD.read_text(encoding="utf-8"))
    case["subject"]["age_years"] = 10**400
    (root / "huge.json").write_text(json.dumps(case), encoding="utf-8")
    (root / "columns.csv").write_text("a,b\n1,2\n", encoding="utf-8")
    (root / "good.csv").write_text("id,sex,age_years,height_cm,FEV1_pre,FVC_pre\n"
                                   "t1,female,40,165,2.5,3.2\n", encoding="utf-8")
    (root / "a_folder").mkdir()
    (root / "folder.ipynb").mkdir()
    (root / "a_file").write_text("x", encoding="utf-8")
    nb = nbformat.v4.new_notebook()
    nb.cells.append(nbformat.v4.new_code_cell("1 + 1"))
    nbformat.write(nb, str(root / "foreign.ipynb"))
    nb.metadata["pftwork"] = {"format": "something-else/9"}
    nbformat.write(nb, str(root / "fake.ipynb"))
    (root / "binary.pftwork.json").write_bytes(b"\xff\xfe\x00")
    (root / "steps.pftwork.json").write_text(json.dumps(
        {"format": "pftwork-worksheet/1", "steps": [[1]], "case_raw": {},
         "interpretation": {}, "created_utc": "2026-01-01T00:00:00Z"}), encoding="utf-8")
    readonly = root / "readonly"
    readonly.mkdir()
    readonly.chmod(0o555)


G = str(GOOD)
# (id, argv, text the one stderr line must contain: the field or file and the expectation)
CASES: list[tuple[str, list[str], str]] = [
    # interpret
    ("interpret missing file", ["interpret", "missing.json"], "missing.json"),
    ("interpret directory", ["interpret", "a_folder"], "a_folder"),
    ("interpret empty file", ["interpret", "empty.json"], "valid JSON"),
    ("interpret non-JSON", ["interpret", "text.json"], "valid JSON"),
    ("interpret JSON array", ["interpret", "array.json"], "JSON object"),
    ("interpret empty object", ["interpret", "object.json"], "subject"),
    ("interpret binary file", ["interpret", "binary.json"], "UTF-8"),
    ("interpret foreign notebook", ["interpret", "foreign.ipynb"], "notebook"),
    ("interpret integer beyond float", ["interpret", "huge.json"], "subject.age_years"),
    ("interpret nesting too deep", ["interpret", "deep.json"], "depth"),
    ("interpret unknown equation set", ["interpret", G, "--equations", "gli-1066"], "gli-1066"),
    ("interpret no case argument", ["interpret"], "case"),
    # worksheet
    ("worksheet missing case", ["worksheet", "missing.json", "-o", "w.ipynb"], "missing.json"),
    ("worksheet output without .ipynb", ["worksheet", G, "-o", "w.txt"], ".ipynb"),
    ("worksheet output is a folder", ["worksheet", G, "-o", "folder.ipynb"], "folder.ipynb"),
    ("worksheet output is a foreign notebook", ["worksheet", G, "-o", "foreign.ipynb"],
     "not overwritten"),
    ("worksheet output under a file", ["worksheet", G, "-o", "a_file/w.ipynb"], "a_file"),
    ("worksheet read-only folder", ["worksheet", G, "-o", "readonly/w.ipynb"], "readonly"),
    ("worksheet bad case", ["worksheet", "object.json", "-o", "w.ipynb"], "subject"),
    ("worksheet no -o", ["worksheet", G], "-o/--output"),
    # verify
    ("verify missing file", ["verify", "missing.ipynb"], "missing.ipynb"),
    ("verify directory", ["verify", "a_folder"], "a_folder"),
    ("verify empty file", ["verify", "empty.json"], "empty.json"),
    ("verify non-JSON", ["verify", "text.json"], "text.json"),
    ("verify JSON array", ["verify", "array.json"], "array.json"),
    ("verify foreign notebook", ["verify", "foreign.ipynb"], "not a pftwork worksheet"),
    ("verify foreign pftwork metadata", ["verify", "fake.ipynb"], "metadata.pftwork.format"),
    ("verify a case file", ["verify", G], "not a readable notebook"),
    # batch
    ("batch missing table", ["batch", "missing.csv", "-o", "o.csv"], "missing.csv"),
    ("batch directory", ["batch", "a_folder", "-o", "o.csv"], "a_folder"),
    ("batch empty csv", ["batch", "empty.csv", "-o", "o.csv"], "empty.csv"),
    ("batch binary csv", ["batch", "binary.csv", "-o", "o.csv"], "binary.csv"),
    ("batch damaged parquet", ["batch", "junk.parquet", "-o", "o.csv"], "junk.parquet"),
    ("batch required columns missing", ["batch", "columns.csv", "-o", "o.csv"], "id, sex"),
    ("batch output not a table", ["batch", "good.csv", "-o", "o.txt"], "o.txt"),
    ("batch output under a file", ["batch", "good.csv", "-o", "a_file/o.csv"], "a_file"),
    ("batch read-only folder", ["batch", "good.csv", "-o", "readonly/o.csv"], "readonly"),
    ("batch mapping is an array", ["batch", "good.csv", "-o", "o.csv", "--mapping",
                                   "array.json"], "array.json"),
    ("batch unknown compare set", ["batch", "good.csv", "-o", "o.csv", "--compare",
                                   "gli-global-2022,gli-1066"], "gli-1066"),
    # present (``--once``: writes a page, starts no server)
    ("present missing file", ["present", "missing.json", "--once"], "missing.json"),
    ("present foreign notebook", ["present", "foreign.ipynb", "--once"], "foreign.ipynb"),
    ("present binary autosave", ["present", "binary.pftwork.json", "--once"], "not UTF-8"),
    ("present malformed autosave", ["present", "steps.pftwork.json", "--once"], "malformed"),
    ("present port not a number", ["present", G, "--port", "abc"], "--port"),
    # demo and the top level
    ("demo output under a file", ["demo", "--out", "a_file/demo"], "--out"),
    ("no command", [], "command"),
    ("unknown command", ["explode"], "explode"),
]
ROOT_SKIPS = {"worksheet read-only folder", "batch read-only folder"}  # root ignores 0o555
AS_ROOT = hasattr(os, "geteuid") and os.geteuid() == 0
RUN = [c for c in CASES if not (AS_ROOT and c[0] in ROOT_SKIPS)]


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """Every case run once in its own subprocess (two at a time), keyed by id."""
    root = tmp_path_factory.mktemp("cli-errors")
    _files(root)
    env = {**os.environ, "PYTHONWARNINGS": "ignore"}
    env.pop("PFTWORK_DEBUG", None)

    def run(argv: list[str]) -> subprocess.CompletedProcess:
        return subprocess.run([sys.executable, "-m", "pftwork.cli", *argv], cwd=root,
                              capture_output=True, text=True, timeout=120, env=env)

    with ThreadPoolExecutor(max_workers=2) as pool:
        results = dict(zip([c[0] for c in RUN], pool.map(run, [c[1] for c in RUN]), strict=True))
    try:
        yield root, results
    finally:
        (root / "readonly").chmod(0o755)


@pytest.mark.parametrize("name, argv, named", CASES, ids=[c[0] for c in CASES])
def test_exit_2_with_one_line(runs, name, argv, named):
    """Exit status 2, exactly one stderr line naming the input and what was expected."""
    if name in ROOT_SKIPS and AS_ROOT:
        pytest.skip("running as root: a 0o555 folder is still writable")
    root, results = runs
    result = results[name]
    lines = result.stderr.splitlines()

    assert "Traceback" not in result.stderr, result.stderr
    assert 2 == result.returncode, (argv, result.returncode, result.stderr)
    assert 1 == len(lines), result.stderr
    assert lines[0].startswith("pftwork"), lines[0]
    assert " error: " in lines[0]
    assert named in lines[0], lines[0]


def test_nothing_left_behind(runs):
    """Failed writes leave no output or temporary file behind (export writes via ``.tmp``)."""
    root, _ = runs
    left = {p.name for p in root.rglob("*") if p.suffix in (".tmp", ".ipynb", ".csv", ".html")}
    created = left - {"empty.csv", "binary.csv", "columns.csv", "good.csv", "foreign.ipynb",
                      "fake.ipynb", "folder.ipynb"}
    assert set() == created


def test_internal_error_is_one_line(tmp_path, monkeypatch, capsys):
    """A defect inside pftwork (simulated) still gives one stderr line, status 70 (sysexits
    EX_SOFTWARE, not 2: the input was not at fault), and the traceback with PFTWORK_DEBUG=1."""
    from pftwork import cli

    def broken(args):
        raise ZeroDivisionError("simulated defect")

    monkeypatch.setitem(cli.COMMANDS, "interpret", broken)
    monkeypatch.delenv("PFTWORK_DEBUG", raising=False)
    assert cli.INTERNAL_ERROR == cli.main(["interpret", "x.json"])
    err = capsys.readouterr().err.splitlines()
    assert 1 == len(err) and "ZeroDivisionError: simulated defect" in err[0]

    monkeypatch.setenv("PFTWORK_DEBUG", "1")
    with pytest.raises(ZeroDivisionError):
        cli.main(["interpret", "x.json"])


def test_multi_line_message_is_joined(monkeypatch, capsys):
    """An error message that contains line breaks is printed on one line."""
    from pftwork import cli
    from pftwork.errors import NotebookError

    def broken(args):
        raise NotebookError("first line\nsecond line\n")

    monkeypatch.setitem(cli.COMMANDS, "verify", broken)
    assert 2 == cli.main(["verify", "x.ipynb"])
    assert ["pftwork verify: error: first line second line"] == capsys.readouterr().err.splitlines()
