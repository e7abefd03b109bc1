"""Verification of an exported worksheet notebook: ``pftwork verify NOTEBOOK``.

:func:`verify_notebook` checks, and names in its report, every way the notebook can differ from
what was recorded:

1. **Readable** — a notebook with ``metadata["pftwork"]`` in format ``pftwork-notebook/1``;
   otherwise status ``"unreadable"`` (exit 2). An *older* or *newer* notebook format is
   reported as such (exit 2, "not checked, not reported as tampered").
2. **One record** — the record in the metadata equals the one embedded in the record cell
   (the one a kernel runs).
3. **Chain** — every field digest, link and the head (:mod:`pftwork.export.chain`).
4. **Recomputation** — every recorded engine finding, the values and the summary against a
   fresh ``interpret(load_case(embedded case))``, field by field with both values.
5. **Generated cells** — the stored cells equal the cells regenerated from the record (a
   markdown conclusion edited by hand is caught here); deleted generated cells are named.
6. **Re-execution** (``execute=True``) — the *regenerated* notebook runs in a fresh kernel;
   errors and outputs that differ from the stored ones are named (stream text, ``text/plain``
   and the z-score chart's ``image/svg+xml``; see :data:`COMPARED_MIME_TYPES`). Cells a person
   added are never executed by verification (they are listed as not checked).

A notebook written by another pftwork **version** (same format) is not reported as tampered:
the chain must still be intact, but recomputation differences, changed equation tables and
regenerated-cell differences are listed as *attributed to the version change* and the status
stays ``"valid"`` (exit 0) with that note.
"""

from __future__ import annotations

import ast
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from pftwork._version import __version__
from pftwork.errors import NotebookError

from .chain import chain_problems
from .document import RECORD_FORMAT, field_differences, recomputation_differences
from .notebook import (
    NOTEBOOK_FORMAT,
    execute_notebook,
    is_generated,
    notebook_from_record,
    read_notebook,
)

__all__ = ["COMPARED_MIME_TYPES", "Problem", "StepCheck", "VerifyReport", "verify_notebook"]

_EXIT = {"valid": 0, "mismatch": 1, "unreadable": 2}
_FORMAT_RE = re.compile(r"^pftwork-notebook/(\d+)$")


@dataclass(frozen=True)
class Problem:
    """One difference found: where (a step id, ``"record"``, ``"notebook"``), which field, what."""

    where: str
    field: str
    message: str

    def __str__(self) -> str:
        return f"{self.field}: {self.message}"


@dataclass
class StepCheck:
    """The verdict on one step."""

    id: str
    problems: list[Problem] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        """``True`` when nothing differs for this step."""
        return not self.problems


@dataclass
class VerifyReport:
    """Outcome of :func:`verify_notebook`.

    Attributes
    ----------
    path : str
        The notebook checked.
    status : str
        ``"valid"``, ``"mismatch"`` or ``"unreadable"``.
    problems : list of Problem
        Every difference (also listed per step in ``steps``).
    steps : list of StepCheck
        One per recorded (or expected) step, in order.
    notes : list of str
        Remarks that do not make the notebook invalid (version change, added cells …).
    recorded_version : str or None
        pftwork version that wrote the notebook.
    executed : bool
        Whether the notebook was re-executed in a fresh kernel.
    """

    path: str
    status: str = "valid"
    problems: list[Problem] = field(default_factory=list)
    steps: list[StepCheck] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    recorded_version: str | None = None
    chain_head: str | None = None
    executed: bool = False
    older: bool = False

    @property
    def exit_code(self) -> int:
        """0 valid, 1 mismatch or broken chain, 2 unreadable / not a pftwork notebook."""
        return _EXIT[self.status]

    @property
    def version_changed(self) -> bool:
        """``True`` when another pftwork version wrote the notebook."""
        return self.recorded_version is not None and self.recorded_version != __version__

    def step(self, step_id: str) -> StepCheck:
        """The check of ``step_id`` (``KeyError`` when the step is not in the report)."""
        for s in self.steps:
            if s.id == step_id:
                return s
        raise KeyError(step_id)

    def problems_of(self, where: str) -> list[Problem]:
        """Problems attributed to ``where`` (a step id, ``"record"`` or ``"notebook"``)."""
        return [p for p in self.problems if p.where == where]

    @property
    def error_line(self) -> str | None:
        """One line for stderr when the status is not valid (first problem named), else None."""
        if self.status == "valid" or not self.problems:
            return None
        p = self.problems[0]
        more = f" (and {len(self.problems) - 1} more; see the report)" if len(self.problems) > 1 else ""
        if p.message.startswith(self.path):
            return p.message + more
        where = "" if p.where == "notebook" else f"{p.where}: {p.field}: "
        return f"{self.path}: {where}{p.message}{more}"

    def format_report(self) -> str:
        """The human-readable report (what ``pftwork verify`` prints)."""
        lines = [f"pftwork verify: {self.path}",
                 f"status: {self.status.upper()} (exit {self.exit_code})"]
        if self.recorded_version is not None:
            how = "re-executed in a fresh kernel" if self.executed else "not re-executed"
            lines.append(f"recorded with pftwork {self.recorded_version}; checked with pftwork "
                         f"{__version__}; {how}")
        if self.chain_head:
            lines.append(f"chain head: {self.chain_head}")
        if self.status == "unreadable":
            lines += [f"reason: {p.message}" for p in self.problems]
            return "\n".join(lines)
        general = [p for p in self.problems if p.where in ("record", "notebook", "sign-off")]
        if general:
            lines.append("record:")
            lines += [f"  FAIL {p.where}: {p}" for p in general]
        if self.steps:
            lines.append("steps:")
            for s in self.steps:
                lines.append(f"  {'ok  ' if s.ok else 'FAIL'} {s.id}")
                lines += [f"       - {p}" for p in s.problems]
                lines += [f"       note: {n}" for n in s.notes]
        if self.notes:
            lines.append("notes:")
            lines += [f"  - {n}" for n in self.notes]
        return "\n".join(lines)


def _unreadable(report: VerifyReport, message: str) -> VerifyReport:
    report.status = "unreadable"
    report.problems.append(Problem("notebook", "notebook", message))
    return report


def _record_literal(nb: Any) -> tuple[Mapping[str, Any] | None, str | None]:
    """The record embedded in the record cell, or ``(None, why)``."""
    import json

    cells = [c for c in nb.cells if c.get("id") == "pftwork-record"]
    if not cells:
        return None, "the record cell (pftwork-record) is missing"
    try:
        tree = ast.parse(cells[0].source)
    except SyntaxError as exc:
        return None, f"the record cell is not valid Python ({exc.msg})"
    for node in ast.walk(tree):
        if (isinstance(node, ast.Call) and len(node.args) == 1
                and isinstance(node.args[0], ast.Constant) and isinstance(node.args[0].value, str)):
            try:
                value = json.loads(node.args[0].value)
            except ValueError as exc:
                return None, f"the record cell's literal is not valid JSON ({exc})"
            return (value, None) if isinstance(value, Mapping) else (None, "not a JSON object")
    return None, "the record cell holds no record literal"


def _format_number(fmt: Any) -> int | None:
    m = _FORMAT_RE.match(str(fmt))
    return int(m.group(1)) if m else None


def _check_format(report: VerifyReport, meta: Mapping[str, Any]) -> bool:
    fmt = meta.get("format")
    if fmt == NOTEBOOK_FORMAT:
        return True
    number, current = _format_number(fmt), _format_number(NOTEBOOK_FORMAT)
    version = meta.get("pftwork_version", "unknown")
    if number is not None and current is not None and number < current:
        report.older = True
        _unreadable(report, f"written in the older notebook format {fmt} by pftwork {version}; "
                    f"this pftwork ({__version__}) checks {NOTEBOOK_FORMAT}. It was NOT checked "
                    "and is NOT reported as tampered: verify it with the pftwork version that "
                    "wrote it.")
    elif number is not None:
        _unreadable(report, f"written in the newer notebook format {fmt} by pftwork {version}; "
                    f"upgrade pftwork to check it")
    else:
        _unreadable(report, f"metadata.pftwork.format = {fmt!r}: expected {NOTEBOOK_FORMAT!r}")
    return False


def _compare_copies(report: VerifyReport, meta_record: Mapping[str, Any] | None,
                    cell_record: Mapping[str, Any] | None, why: str | None) -> None:
    if cell_record is None:
        report.problems.append(Problem("record", "record cell", why or "missing"))
        return
    if meta_record is None:
        report.problems.append(Problem("record", "metadata.pftwork.record",
                                       "missing from the notebook metadata"))
        return
    diffs = field_differences(meta_record, cell_record)
    for path, a, b in diffs[:3]:
        report.problems.append(Problem("record", f"record cell: {path}",
                                       f"notebook metadata has {_short(a)}, the record cell has "
                                       f"{_short(b)}"))
    if len(diffs) > 3:
        report.problems.append(Problem("record", "record cell", f"... and {len(diffs) - 3} more "
                                       "differences between the two copies of the record"))


def _short(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 100 else text[:97] + "..."


def _where(name: str, step_ids: list[str]) -> str:
    return name if name in step_ids else ("sign-off" if name == "sign-off" else "record")


def _check_chain(report: VerifyReport, record: Mapping[str, Any], head: Any,
                 step_ids: list[str], label: str = "") -> None:
    for p in chain_problems(record, expected_head=head if isinstance(head, str) else None):
        report.problems.append(Problem(_where(p.step, step_ids), f"{label}{p.field}",
                                       p.message))


def _check_recomputation(report: VerifyReport, record: Mapping[str, Any],
                         step_ids: list[str]) -> list[str]:
    """Problems (same version) or version notes; returns the step ids the recomputation has."""
    from .document import fresh_interpretation

    try:
        fresh = fresh_interpretation(record.get("case") or {}, record.get("equations") or None)
    except Exception as exc:  # a tampered case may no longer load
        report.problems.append(Problem("record", "case", f"cannot be recomputed: {exc}"))
        return []
    diffs = recomputation_differences(record, fresh)
    fresh_ids = [str(f["id"]) for f in fresh.get("steps") or []]
    for d in diffs:
        where = d.step if d.step in step_ids or d.step in fresh_ids else "record"
        message = f"recorded {_short(d.recorded)}, recomputed {_short(d.recomputed)}"
        if report.version_changed:
            _note(report, where, f"{d.field}: {message} (attributed to the version change)")
        else:
            report.problems.append(Problem(where, d.field, message))
    _check_tables(report, record)
    return fresh_ids


def _check_tables(report: VerifyReport, record: Mapping[str, Any]) -> None:
    from pftwork.reference import get_equation_set

    for set_id, sha in sorted((record.get("tables") or {}).items()):
        try:
            now = get_equation_set(set_id).table_sha256
        except Exception:
            now = None
        if now == sha:
            continue
        message = f"recorded table SHA-256 {sha}, this pftwork has {now or 'no such set'}"
        if report.version_changed:
            report.notes.append(f"equation table {set_id}: {message} (version change)")
        else:
            report.problems.append(Problem("record", f"tables.{set_id}", message))


def _note(report: VerifyReport, where: str, text: str) -> None:
    for s in report.steps:
        if s.id == where:
            s.notes.append(text)
            return
    report.notes.append(f"{where}: {text}")


def _step_of(cell: Mapping[str, Any]) -> str:
    meta = (cell.get("metadata") or {}).get("pftwork") or {}
    return str(meta.get("step") or "notebook")


def _check_cells(report: VerifyReport, nb: Any, fresh_nb: Any, step_ids: list[str]) -> None:
    stored = {c.get("id"): c for c in nb.cells if is_generated(c)}
    expected = {c.get("id"): c for c in fresh_nb.cells}
    user_cells = [c for c in nb.cells if not is_generated(c)]
    if user_cells:
        report.notes.append(f"{len(user_cells)} cell(s) not generated by pftwork were neither "
                            "executed nor checked")
    for cid, cell in expected.items():
        where = _where(_step_of(cell), step_ids)
        if cid not in stored:
            report.problems.append(Problem(where, f"cell {cid}", "the generated cell was deleted"))
        elif stored[cid].cell_type != cell.cell_type or stored[cid].source != cell.source:
            if report.version_changed:
                _note(report, where, f"cell {cid} is worded differently by this version")
            else:
                report.problems.append(Problem(where, f"cell {cid}", "edited: it no longer "
                                               "matches the cell generated from the record"))
    for cid in stored:
        if cid not in expected:
            report.problems.append(Problem(_where(_step_of(stored[cid]), step_ids), f"cell {cid}",
                                           "a generated cell that the record does not explain"))
    order = [cid for cid in (c.get("id") for c in nb.cells if is_generated(c)) if cid in expected]
    if order != [cid for cid in expected if cid in stored]:
        report.problems.append(Problem("notebook", "cell order", "generated cells were reordered"))


#: Output MIME types compared with the re-execution: plain text, and the z-score chart's SVG
#: (deterministic text, see pftwork.zgraphic). Other types (widget views, HTML) are not compared.
COMPARED_MIME_TYPES = ("text/plain", "image/svg+xml")


def _mime_text(value: Any) -> str:
    return "".join(value) if isinstance(value, list) else str(value)


def _output_text(cell: Mapping[str, Any]) -> str:
    parts = []
    for out in cell.get("outputs") or []:
        kind = out.get("output_type")
        if kind == "stream":
            parts.append(str(out.get("text", "")))
        elif kind in ("execute_result", "display_data"):
            data = out.get("data") or {}
            parts += [f"{mime}: {_mime_text(data[mime])}\n" for mime in COMPARED_MIME_TYPES
                      if mime in data]
        elif kind == "error":
            parts.append(f"{out.get('ename')}: {out.get('evalue')}")
    return "".join(parts)


def _check_execution(report: VerifyReport, nb: Any, fresh_nb: Any, step_ids: list[str],
                     timeout: int) -> None:
    try:
        execute_notebook(fresh_nb, timeout=timeout, allow_errors=True)
    except Exception as exc:  # the kernel could not start or timed out
        _unreadable(report, f"could not re-execute the notebook ({type(exc).__name__}: {exc})")
        return
    report.executed = True
    stored = {c.get("id"): c for c in nb.cells if is_generated(c)}
    unexecuted = 0
    for cell in fresh_nb.cells:
        if cell.cell_type != "code":
            continue
        where = _where(_step_of(cell), step_ids)
        errors = [o for o in cell.get("outputs") or [] if o.get("output_type") == "error"]
        for err in errors:
            first = str(err.get("evalue", "")).strip().splitlines()[:1]
            report.problems.append(Problem(where, f"re-execution of cell {cell.get('id')}",
                                           f"{err.get('ename')}: {first[0] if first else ''}"))
        old = stored.get(cell.get("id"))
        if old is None or errors or report.version_changed:
            continue
        if not old.get("outputs") and old.get("execution_count") is None:
            unexecuted += 1
            continue
        if _output_text(old) != _output_text(cell):
            report.problems.append(Problem(where, f"output of cell {cell.get('id')}",
                                           "the stored output differs from the re-execution: "
                                           + _first_difference(_output_text(old),
                                                               _output_text(cell))))
    if unexecuted:
        report.notes.append(f"{unexecuted} code cell(s) were stored without outputs (exported "
                            "without execution); their re-execution was checked, not compared")


def _first_difference(a: str, b: str) -> str:
    for i, (x, y) in enumerate(zip(a.splitlines(), b.splitlines(), strict=False), start=1):
        if x != y:
            at = next((k for k, (p, q) in enumerate(zip(x, y, strict=False)) if p != q),
                      min(len(x), len(y)))
            start = max(0, at - 30) if at > 60 else 0  # long lines (SVG): show where they part
            mime = next((m for m in COMPARED_MIME_TYPES if x.startswith(m + ": ")), None)
            where = ", ".join(w for w in (mime, f"from character {start + 1}" if start else "")
                              if w)
            where = f" ({where})" if where else ""
            return (f"line {i}{where}: stored {x[start:start + 80].strip()!r}, re-executed "
                    f"{y[start:start + 80].strip()!r}")
    return f"stored {len(a.splitlines())} lines, re-executed {len(b.splitlines())} lines"


def verify_notebook(path: str | Path, *, execute: bool = True, timeout: int = 120
                    ) -> VerifyReport:
    """Check an exported worksheet notebook against its record chain and a recomputation.

    Parameters
    ----------
    path : path
        The ``.ipynb`` written by :func:`pftwork.export.notebook.export_notebook`.
    execute : bool
        Re-execute the regenerated notebook in a fresh kernel (about 2-4 s) and compare the
        stored outputs; ``False`` checks record, chain, recomputation and cells in-process.
    timeout : int
        Per-cell timeout of the re-execution, seconds.

    Returns
    -------
    VerifyReport
        ``status`` ``"valid"`` / ``"mismatch"`` / ``"unreadable"``; ``exit_code`` 0 / 1 / 2;
        every problem names its step (or record part) and field.
    """
    report = VerifyReport(path=str(path))
    try:
        nb = read_notebook(path)
    except NotebookError as exc:
        return _unreadable(report, str(exc))
    meta = nb.metadata.get("pftwork")
    if not isinstance(meta, Mapping):
        return _unreadable(report, "not a pftwork worksheet notebook (no metadata.pftwork)")
    report.recorded_version = str(meta.get("pftwork_version") or "unknown")
    if not _check_format(report, meta):
        return report
    report.chain_head = meta.get("chain_head")
    meta_record = meta.get("record") if isinstance(meta.get("record"), Mapping) else None
    cell_record, why = _record_literal(nb)
    record = meta_record or cell_record
    if record is None or record.get("format") != RECORD_FORMAT:
        return _unreadable(report, "no readable pftwork export record in the notebook "
                           f"(expected format {RECORD_FORMAT})")
    recorded_with = (record.get("export") or {}).get("pftwork_version")
    if recorded_with and recorded_with != report.recorded_version:
        report.problems.append(Problem("record", "pftwork_version", f"metadata says "
                                       f"{report.recorded_version}, the record {recorded_with}"))
    try:
        _check_record(report, nb, meta, meta_record, cell_record, why, record, execute, timeout)
    except (TypeError, AttributeError, KeyError, ValueError, IndexError) as exc:
        # Only a hand-edited record has the wrong shape: a mismatch, named, never a traceback.
        report.problems.append(Problem("record", "structure", f"malformed record "
                                       f"({type(exc).__name__}: {str(exc)[:200]})"))
    if report.status == "unreadable":
        return report
    for s in report.steps:
        s.problems = [p for p in report.problems if p.where == s.id]
    report.status = "mismatch" if report.problems else "valid"
    return report


def _check_record(report: VerifyReport, nb: Any, meta: Mapping[str, Any],
                  meta_record: Mapping[str, Any] | None, cell_record: Mapping[str, Any] | None,
                  why: str | None, record: Mapping[str, Any], execute: bool,
                  timeout: int) -> None:
    """Checks 2-6 of the module docstring, appending to ``report``."""
    step_ids = [str(s.get("id")) for s in record.get("steps") or [] if isinstance(s, Mapping)]
    report.steps = [StepCheck(sid) for sid in step_ids]
    if report.version_changed:
        report.notes.append(f"recorded with pftwork {report.recorded_version}, checked with "
                            f"{__version__}: differences in recomputed values and cell wording "
                            "are attributed to the version change, not to tampering")
    _compare_copies(report, meta_record, cell_record, why)
    _check_chain(report, record, meta.get("chain_head"), step_ids)
    if cell_record is not None and meta_record is not None and cell_record != meta_record:
        _check_chain(report, cell_record, None, step_ids, label="record cell: ")
    fresh_ids = _check_recomputation(report, record, step_ids)
    for sid in fresh_ids:
        if sid not in step_ids:
            report.steps.append(StepCheck(sid))
    fresh_nb = notebook_from_record(record)
    _check_cells(report, nb, fresh_nb, step_ids)
    if execute:
        _check_execution(report, nb, fresh_nb, step_ids, timeout)
