"""The auditable worksheet notebook: worksheet record -> ``.ipynb`` (nbformat), executed by nbclient.

Layout of a generated notebook (every generated cell is tagged ``pftwork-generated``, carries
``metadata["pftwork"] = {"role", "step"}`` and a deterministic id, and is marked not editable /
not deletable for Jupyter front ends):

=====================  ==========  ===================================================
cell id                type        content
=====================  ==========  ===================================================
``pftwork-header``     markdown    case, equation sets and table checksums, versions,
                                   times (UTC), reviewer, sign-off, chain head, cautions
``pftwork-record``     code        ``RECORD = audit.load_record('<JSON>')`` — the whole
                                   export record as ONE string literal (``repr`` of the
                                   canonical JSON text); prints the chain check and case
``pftwork-zchart``     code        ``audit.show_zscore_chart(RECORD)``: the z-score chart
                                   (REPORT-2017) of the values recomputed from the
                                   embedded case, an ``image/svg+xml`` output
``pftwork-step-<id>``  markdown    conclusion in force, decision, amendment and reason,
                                   value table (measured, LLN, z, % predicted), rule,
                                   source, caveats, evidence, notes, earlier decisions
``pftwork-check-<id>`` code        ``audit.recompute_step(RECORD, "<id>")``
``pftwork-signoff``    markdown    sign-off state and chain head
``pftwork-seal``       code        ``audit.check_seal(RECORD)``
=====================  ==========  ===================================================

The tool's metadata lives in ``nb.metadata["pftwork"]`` (``format``, ``pftwork_version``,
``chain_head``, ``deidentified``, ``record``). Exporting again to the same path replaces the
generated cells and keeps any cell a person added (after the generated ones).

The step markdown tables carry no z-score glyph column: JupyterLab 4.6's markdown sanitizer
(the allow-list bundled in ``jupyterlab/static``) has no ``svg`` element, so inline SVG in a
markdown cell would be stripped; the chart is a code-cell output instead, which verification
compares. JupyterLab renders ``image/svg+xml`` only for trusted outputs (its SVG renderer is not
"safe"), so an exported notebook opened as is shows the output's ``text/plain`` summary until the
cell is run or the notebook trusted; nbconvert's HTML shows the image.

Execution uses the *running* Python interpreter as the kernel (``ipykernel`` must be installed;
no kernelspec needs to be registered), with ``store_widget_state=False``.
:func:`build_notebook` is pure; :func:`export_notebook` does the file I/O and execution.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import nbformat
from nbformat import NotebookNode
from nbformat.v4 import new_code_cell, new_markdown_cell, new_notebook

from pftwork._version import __version__
from pftwork.errors import NotebookError

from .chain import canonical_json
from .document import build_export_record
from .render import VALUE_COLUMNS, header_view, md_text, step_view

__all__ = [
    "GENERATED_TAG",
    "NOTEBOOK_FORMAT",
    "build_notebook",
    "execute_notebook",
    "export_notebook",
    "notebook_from_record",
]

#: Format of ``nb.metadata["pftwork"]``; a change that older readers cannot check bumps it.
NOTEBOOK_FORMAT = "pftwork-notebook/1"
#: Tag of every generated cell.
GENERATED_TAG = "pftwork-generated"
KERNELSPEC = {"name": "python3", "display_name": "Python 3 (ipykernel)", "language": "python"}


# -- markdown -----------------------------------------------------------------------------------
def _table(head: list[str], rows: list[list[str]]) -> str:
    lines = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    lines += ["| " + " | ".join(md_text(c) for c in row) + " |" for row in rows]
    return "\n".join(lines)


def _header_markdown(export: Mapping[str, Any]) -> str:
    h = header_view(export)
    rows = [["Case", h["case_id"]], ["Subject", h["subject"]], ["Test date", h["test_date"]]]
    if h["question"]:
        rows.append(["Clinical question", h["question"]])
    for kind, set_id, sha in h["equations"]:
        rows.append([f"Equations ({kind})", f"{set_id}, table SHA-256 {sha}"])
    rows += [["pftwork version", h["version"]], ["Worksheet created", h["created"]],
             ["Last updated", h["updated"]], ["Exported", h["exported"]],
             ["Reviewer", h["reviewer"]], ["Sign-off", h["signoff"]],
             ["Record chain head (SHA-256)", h["head"]]]
    parts = ["# Pulmonary function worksheet: auditable record",
             "**Cautions.** " + md_text(" ".join(h["cautions"][:1])),
             "\n".join(f"- {md_text(c)}" for c in h["cautions"][1:]),
             _table(["Item", "Value"], rows)]
    if h["deidentified"]:
        info = h["deidentification"]
        text = ("De-identified copy: name, record number and birth date removed; the subject id "
                "is a pseudonym; texts marked by the reviewer and identifiers found in free text "
                "are replaced by [removed]; dates are shown as days from the test (day 0) and "
                "written from 2000-01-01 in the embedded case.")
        if info.get("age_capped"):
            text += (" Age 90 or older is recorded as 90: reference values in this copy are "
                     "computed at age 90.")
        if info.get("steps_worded_differently"):
            text += (" The engine's wording of these steps differs from the one the reviewer "
                     "decided on (values computed at the displayed age): "
                     + ", ".join(info["steps_worded_differently"]) + ".")
        parts.append("**" + md_text("De-identification") + "** " + md_text(text))
    parts.append("How to check this record: run every cell (each step is recomputed from the "
                 "embedded case and compared with what was recorded; any edit breaks the record "
                 "chain), or run <code>pftwork verify</code> on this file.")
    parts.append("The z-score chart (below the record cell) is an SVG image: Jupyter front ends "
                 "show it once the notebook is trusted or that cell has been run, and its text "
                 "summary until then.")
    return "\n\n".join(p for p in parts if p)


def _step_markdown(export: Mapping[str, Any], index: int) -> str:
    v = step_view(export, index)
    parts = [f"## {v['number']}. " + md_text(v["title"]),
             f"**Conclusion** ({md_text(v['decision_line'])}): " + md_text(v["conclusion"])]
    if v["engine_conclusion"] is not None:
        parts.append("*Engine's conclusion (kept on record):* " + md_text(v["engine_conclusion"]))
        parts.append("**Reason for the amendment:** " + md_text(v["reason"]))
    if v["rows"]:
        parts.append(_table(VALUE_COLUMNS, v["rows"]))
    parts.append("**Rule:** " + md_text(v["rule"]))
    parts.append("**Source:** " + md_text(v["source"]))
    if v["caveats"]:
        parts.append("**Caveats:**\n\n" + "\n".join(f"- {md_text(c)}" for c in v["caveats"]))
    if v["evidence"]:
        parts.append("**Evidence used by the step:** "
                     + "; ".join(f"{md_text(k)} = {md_text(val)}" for k, val in v["evidence"]))
    if v["notes"]:
        parts.append("**Reviewer's notes:**\n\n" + "\n".join(
            f"- {md_text(author)} ({md_text(when)}): {md_text(text)}"
            for author, when, text in v["notes"]))
    if v["history"]:
        parts.append("**Earlier decisions:**\n\n" + "\n".join(
            f"- {md_text(st)} by {md_text(who)} ({md_text(when)})"
            + (f": {md_text(c)}" if c else "") + (f"; reason: {md_text(r)}" if r else "")
            + (f"; superseded because: {md_text(y)}" if y else "")
            for st, who, when, c, r, y in v["history"]))
    parts.append(f"<sub>Record link SHA-256: {md_text(v['hash'])}</sub>")
    return "\n\n".join(parts)


def _signoff_markdown(export: Mapping[str, Any]) -> str:
    h = header_view(export)
    return "\n\n".join([
        "## Sign-off",
        md_text(h["signoff"]),
        "Record chain head (SHA-256): " + md_text(h["head"]),
        md_text(" ".join(h["cautions"][:3])),
    ])


# -- cells --------------------------------------------------------------------------------------
def _meta(role: str, step: str | None = None) -> dict[str, Any]:
    return {"tags": [GENERATED_TAG], "editable": False, "deletable": False,
            "pftwork": {"role": role, "step": step}}


def _record_source(export: Mapping[str, Any]) -> str:
    literal = repr(canonical_json(export))  # ASCII-only, one line: user text stays data
    return ("# pftwork-generated: the embedded worksheet record (data, not code). Do not edit:\n"
            "# any change breaks the record chain and is reported by `pftwork verify`.\n"
            "from pftwork.export import audit\n"
            f"RECORD = audit.load_record({literal})\n")


def notebook_from_record(export: Mapping[str, Any]) -> NotebookNode:
    """The generated notebook of a sealed export record (pure; used again by verification).

    The record is first normalised to sorted keys (as it reads back from a saved notebook), so
    that the cells generated at export and at verification are identical.
    """
    export = json.loads(canonical_json(export))
    cells = [new_markdown_cell(_header_markdown(export), id="pftwork-header",
                               metadata=_meta("header")),
             new_code_cell(_record_source(export), id="pftwork-record", metadata=_meta("record")),
             new_code_cell("audit.show_zscore_chart(RECORD)", id="pftwork-zchart",
                           metadata=_meta("chart"))]
    for i, step in enumerate(export.get("steps") or []):
        sid = str(step.get("id"))
        cells.append(new_markdown_cell(_step_markdown(export, i), id=f"pftwork-step-{sid}",
                                       metadata=_meta("step", sid)))
        cells.append(new_code_cell(f"audit.recompute_step(RECORD, {sid!r})",
                                   id=f"pftwork-check-{sid}", metadata=_meta("check", sid)))
    cells.append(new_markdown_cell(_signoff_markdown(export), id="pftwork-signoff",
                                   metadata=_meta("signoff")))
    cells.append(new_code_cell("audit.check_seal(RECORD)", id="pftwork-seal",
                               metadata=_meta("seal")))
    nb = new_notebook(cells=cells)
    nb.metadata["kernelspec"] = dict(KERNELSPEC)
    nb.metadata["language_info"] = {"name": "python"}
    nb.metadata["pftwork"] = {
        "format": NOTEBOOK_FORMAT,
        "pftwork_version": (export.get("export") or {}).get("pftwork_version", __version__),
        "chain_head": (export.get("chain") or {}).get("head"),
        "deidentified": bool((export.get("export") or {}).get("deidentified")),
        "record": export,
    }
    return nb


def is_generated(cell: Mapping[str, Any]) -> bool:
    """``True`` for a cell that pftwork generated (tagged ``pftwork-generated``)."""
    return GENERATED_TAG in ((cell.get("metadata") or {}).get("tags") or [])


def build_notebook(record: Any, *, deidentify: bool = False, key: bytes | None = None,
                   exported_utc: str | None = None, base: NotebookNode | None = None
                   ) -> NotebookNode:
    """The auditable notebook of a worksheet record (not executed; pure).

    Parameters
    ----------
    record : WorksheetRecord or dict
        Finished or partial worksheet.
    deidentify : bool
        Build the de-identified copy (see :mod:`pftwork.export.deidentify`).
    key : bytes, optional
        Pseudonym key (random when omitted).
    exported_utc : str, optional
        Export time stamp; defaults to now.
    base : NotebookNode, optional
        An earlier export: its generated cells are replaced, its other cells kept (after).

    Returns
    -------
    nbformat.NotebookNode
        nbformat 4.5 notebook with ``metadata["pftwork"]``.
    """
    export = build_export_record(record, deidentify=deidentify, key=key,
                                 exported_utc=exported_utc)
    nb = notebook_from_record(export)
    if base is not None:
        nb.cells.extend(c for c in base.get("cells", []) if not is_generated(c))
    return nb


# -- execution and I/O --------------------------------------------------------------------------
def _kernel_manager_class() -> type:
    """A KernelManager whose kernel is the running interpreter (no kernelspec lookup)."""
    from jupyter_client.kernelspec import KernelSpec
    from jupyter_client.manager import KernelManager

    package_root = str(Path(__file__).resolve().parents[2])

    class CurrentPythonKernelManager(KernelManager):
        """Start ``sys.executable -m ipykernel_launcher`` with pftwork importable."""

        @property
        def kernel_spec(self) -> KernelSpec:  # type: ignore[override]
            path = os.pathsep.join(p for p in (package_root, os.environ.get("PYTHONPATH")) if p)
            return KernelSpec(argv=[sys.executable, "-m", "ipykernel_launcher", "-f",
                                    "{connection_file}"], display_name=KERNELSPEC["display_name"],
                              language="python", env={"PYTHONPATH": path})

    return CurrentPythonKernelManager


def execute_notebook(nb: NotebookNode, *, timeout: int = 120, cwd: str | Path | None = None,
                     allow_errors: bool = False) -> NotebookNode:
    """Execute ``nb`` in place in a fresh kernel of the running interpreter and return it.

    Raises
    ------
    nbclient.exceptions.CellExecutionError
        When a cell fails and ``allow_errors`` is false (e.g. a tampered record).
    """
    from nbclient import NotebookClient

    with tempfile.TemporaryDirectory(prefix="pftwork-nb-") as tmp:
        client = NotebookClient(nb, timeout=timeout, kernel_name="python3",
                                kernel_manager_class=_kernel_manager_class(),
                                store_widget_state=False, allow_errors=allow_errors,
                                resources={"metadata": {"path": str(cwd or tmp)}})
        # The kernel's stderr only carries ipykernel's notice about unencrypted loopback TCP;
        # a kernel that dies is still reported by nbclient (DeadKernelError).
        client.execute(stderr=subprocess.DEVNULL)
    return nb


def read_notebook(path: str | Path) -> NotebookNode:
    """Read a notebook (``NotebookError`` when it is not readable as a notebook)."""
    try:
        return nbformat.read(str(path), as_version=4)
    except FileNotFoundError:
        raise NotebookError(f"{path}: no such file") from None
    except Exception as exc:  # nbformat raises many types for bad JSON/schema
        raise NotebookError(f"{path}: not a readable notebook ({type(exc).__name__}: "
                            f"{str(exc)[:200]})") from None


def _check_current(export: Mapping[str, Any], path: Path) -> None:
    """Refuse to execute a record whose engine findings this pftwork would not reproduce."""
    from .document import recomputation_differences

    diffs = recomputation_differences(export)
    if diffs:
        shown = "; ".join(str(d) for d in diffs[:3])
        raise NotebookError(f"{path}: the worksheet's engine findings differ from this pftwork's "
                            f"recomputation ({len(diffs)} values, e.g. {shown}); it was "
                            "interpreted by another engine version: re-interpret it "
                            "(WorksheetRecord.update_case(record.case_raw)) and review the "
                            "steps again, or export with execute=False to archive it as is")


def _pseudonym_key() -> bytes | None:
    key = os.environ.get("PFTWORK_PSEUDONYM_KEY")
    return key.encode("utf-8") if key else None


def export_notebook(record: Any, path: str | Path, *, execute: bool = True,
                    deidentify: bool = False, timeout: int = 120) -> Path:
    """Write the auditable notebook of ``record`` to ``path`` (executed by default).

    Parameters
    ----------
    record : WorksheetRecord or dict
        Finished or partial worksheet.
    path : path
        ``.ipynb`` file; an earlier pftwork export there has its generated cells replaced and
        keeps the cells a person added.
    execute : bool
        Run every cell with nbclient so outputs are stored (about 4 s with kernel start).
    deidentify : bool
        Write the de-identified copy. The pseudonym key is ``$PFTWORK_PSEUDONYM_KEY`` when
        set, otherwise random (pseudonyms then link nothing across exports).
    timeout : int
        Per-cell timeout in seconds.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    NotebookError
        When ``path`` exists but is not a pftwork notebook, or execution fails (no kernel,
        timeout, a check cell raising).
    """
    path = Path(path)
    base = None
    if path.exists():
        base = read_notebook(path)
        if "pftwork" not in base.metadata:
            raise NotebookError(f"{path}: exists and is not a pftwork worksheet; not overwritten")
    nb = build_notebook(record, deidentify=deidentify, key=_pseudonym_key(), base=base)
    tmp = path.with_name(path.name + ".tmp")
    try:  # fail before the kernel runs when the notebook cannot be written there
        path.parent.mkdir(parents=True, exist_ok=True)  # also the kernel's working folder
        tmp.write_bytes(b"")
    except OSError as exc:
        raise NotebookError(f"{path}: expected a writable notebook path; cannot write there "
                            f"({exc.strerror or type(exc).__name__})") from None
    try:
        if execute:
            _check_current(nb.metadata["pftwork"]["record"], path)
            try:
                execute_notebook(nb, timeout=timeout, cwd=path.parent.resolve())
            except Exception as exc:  # kernel missing or dead, timeout, or a failing check cell
                first = str(exc).strip().splitlines()[-1:] or [""]
                raise NotebookError(f"{path}: executing the worksheet notebook failed "
                                    f"({type(exc).__name__}: {first[0][:300]}); is ipykernel "
                                    "installed in this Python?") from exc
        try:
            nbformat.write(nb, str(tmp))
            os.replace(tmp, path)
        except OSError as exc:
            raise NotebookError(f"{path}: expected a writable notebook path; writing failed "
                                f"({exc.strerror or type(exc).__name__})") from None
    finally:
        tmp.unlink(missing_ok=True)
    return path
