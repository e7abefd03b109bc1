"""The small runtime API that the code cells of an exported worksheet call.

A generated notebook has one record cell, one chart cell and one check cell per step::

    from pftwork.export import audit
    RECORD = audit.load_record('{"format": "pftwork-export-record/1", ...}')   # one literal
    audit.show_zscore_chart(RECORD)
    audit.recompute_step(RECORD, "airflow")
    audit.check_seal(RECORD)

The record is a JSON document passed as a single Python string literal (``repr`` of the JSON
text): user text inside it is data and never code. Each call prints what it checked and raises
:class:`AuditError` when the record chain is broken or a recorded result differs from the
recomputation — so ``nbval`` and ``nbclient`` fail on a tampered notebook. A notebook recorded
with another pftwork version prints its differences as *attributed to the version change*
instead of raising (verification reports them the same way).
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import Any

from pftwork._version import __version__
from pftwork.errors import PftworkError
from pftwork.zgraphic import chart_summary, zscore_chart_svg

from .chain import chain_problems
from .document import Difference, fresh_interpretation, recomputation_differences
from .render import VALUE_COLUMNS, plain_text, value_rows

_CHART_TITLE = "z-scores against the reference equations"

__all__ = ["AuditError", "AuditRecord", "check_seal", "load_record", "recompute_step",
           "show_zscore_chart", "zscore_chart_bundle"]


class AuditError(PftworkError, AssertionError):
    """Raised when an exported worksheet no longer matches its record chain or recomputation."""


class AuditRecord:
    """A parsed export record with its (lazily computed) recomputation."""

    def __init__(self, data: Mapping[str, Any]) -> None:
        self.data = data
        self._fresh: dict[str, Any] | None = None
        self._differences: list[Difference] | None = None

    @property
    def recorded_version(self) -> str:
        """The pftwork version that wrote the record."""
        return str((self.data.get("export") or {}).get("pftwork_version") or "unknown")

    @property
    def same_version(self) -> bool:
        """``True`` when this pftwork wrote the record."""
        return self.recorded_version == __version__

    @property
    def fresh(self) -> dict[str, Any]:
        """The interpretation recomputed from the embedded case."""
        if self._fresh is None:
            self._fresh = fresh_interpretation(self.data.get("case") or {},
                                               self.data.get("equations") or None)
        return self._fresh

    @property
    def differences(self) -> list[Difference]:
        """Every recorded engine value that differs from the recomputation."""
        if self._differences is None:
            self._differences = recomputation_differences(self.data, self.fresh)
        return self._differences

    def step(self, step_id: str) -> Mapping[str, Any]:
        """The recorded step ``step_id`` (``AuditError`` when absent)."""
        for s in self.data.get("steps") or []:
            if isinstance(s, Mapping) and s.get("id") == step_id:
                return s
        raise AuditError(f"step {step_id}: missing from the embedded record")


def _as_record(record: AuditRecord | str | Mapping[str, Any]) -> AuditRecord:
    if isinstance(record, AuditRecord):
        return record
    if isinstance(record, str):
        try:
            record = json.loads(record)
        except json.JSONDecodeError as exc:
            raise AuditError(f"the embedded record is not valid JSON ({exc.msg}, "
                             f"position {exc.pos})") from None
    if not isinstance(record, Mapping):
        raise AuditError("the embedded record is not a JSON object")
    return AuditRecord(record)


def load_record(record_json: str | Mapping[str, Any]) -> AuditRecord:
    """Parse the embedded record, check its chain and print the header facts.

    Raises
    ------
    AuditError
        When the JSON is invalid or the chain is broken (every break is named).
    """
    record = _as_record(record_json)
    data = record.data
    chain = data.get("chain") or {}
    print(f"pftwork export record, chain head {chain.get('head')}")
    print(f"recorded with pftwork {record.recorded_version}; checked with pftwork {__version__}")
    problems = chain_problems(data)
    if problems:
        raise AuditError("record chain broken:\n" + "\n".join(f"  {p}" for p in problems))
    print(f"record chain intact: {len(data.get('steps') or [])} steps, sealed")
    case = _trimmed(data.get("case") or {})
    print(f"embedded case ({case.get('format', 'pftwork-case/1')}), one block per line:")
    for key, value in case.items():
        if key != "format":
            print(f"  {key}: {json.dumps(value, ensure_ascii=False, separators=(', ', ': '))}")
    return record


def _trimmed(obj: Any) -> Any:
    """Long numeric arrays (raw curves) shortened for display only."""
    if isinstance(obj, Mapping):
        return {k: _trimmed(v) for k, v in obj.items()}
    if isinstance(obj, list):
        if len(obj) > 8 and all(isinstance(v, (int, float)) for v in obj):
            return [*obj[:3], f"... {len(obj)} samples ...", obj[-1]]
        return [_trimmed(v) for v in obj]
    return plain_text(obj) if isinstance(obj, str) else obj


def _table(rows: list[list[str]]) -> list[str]:
    if not rows:
        return []
    widths = [max(len(r[i]) for r in [VALUE_COLUMNS, *rows]) for i in range(len(VALUE_COLUMNS))]
    return ["  " + "  ".join(c.rjust(w) if i else c.ljust(w) for i, (c, w) in
                             enumerate(zip(row, widths, strict=False))) for row in [VALUE_COLUMNS, *rows]]


def recompute_step(record: AuditRecord | str | Mapping[str, Any], step_id: str) -> None:
    """Recompute one step from the embedded case, print values and conclusion, compare.

    Raises
    ------
    AuditError
        When the recorded engine finding of ``step_id`` differs from the recomputation (same
        pftwork version), naming each field with recorded and recomputed values.
    """
    record = _as_record(record)
    recorded = record.step(step_id)
    fresh_steps = {f["id"]: f for f in record.fresh.get("steps") or []}
    if step_id not in fresh_steps:
        raise AuditError(f"step {step_id}: this pftwork has no such step")
    fresh = fresh_steps[step_id]
    print(f"Step {step_id}: {plain_text(fresh.get('title'))}")
    for line in _table(value_rows(record.fresh.get("values") or {}, step_id)):
        print(line)
    print(f"Recomputed conclusion: {plain_text(fresh.get('conclusion'))}")
    print(f"Recomputed status: {fresh.get('status')}")
    decision = recorded.get("decision") or {}
    status = decision.get("status") or "pending"
    print(f"Reviewer's decision: {status}"
          + (f" by {plain_text(decision.get('reviewer'))}" if decision.get("reviewer") else ""))
    if status == "amended":
        print(f"Conclusion in force (amended): {plain_text(decision.get('conclusion'))}")
    diffs = [d for d in record.differences if d.step == step_id]
    if not diffs:
        print("Check: the recorded engine finding equals the recomputation.")
        return
    lines = "\n".join(f"  {d}" for d in diffs)
    if not record.same_version:
        print(f"Note: {len(diffs)} value(s) differ, attributed to the version change "
              f"(recorded with pftwork {record.recorded_version}, recomputed with {__version__}):")
        print(lines)
        return
    raise AuditError(f"step {step_id}: the record differs from the recomputation:\n{lines}")


def zscore_chart_bundle(record: AuditRecord | str | Mapping[str, Any]) -> dict[str, str]:
    """The z-score chart of the recomputed values as a display bundle (pure; no display).

    Returns
    -------
    dict
        ``{"image/svg+xml": <svg ...>, "text/plain": summary}``: the SVG of
        :func:`pftwork.zgraphic.zscore_chart_svg` for the values recomputed from the embedded
        case, and a one-paragraph text listing the same z-scores (what a reader without images,
        nbval and verification see as plain text).
    """
    record = _as_record(record)
    values = record.fresh.get("values") or {}
    return {"image/svg+xml": zscore_chart_svg(values, title=_CHART_TITLE),
            "text/plain": f"{_CHART_TITLE} (recomputed from the embedded case). "
                          + chart_summary(values)}


def show_zscore_chart(record: AuditRecord | str | Mapping[str, Any]) -> None:
    """Display the z-score chart (REPORT-2017) of the values recomputed from the embedded case.

    The output is one ``display_data`` with ``image/svg+xml`` and a ``text/plain`` summary,
    deterministic for a given record, so nbval and ``pftwork verify`` compare it.

    Raises
    ------
    AuditError
        When the recorded values differ from the recomputation (same pftwork version): the chart
        would not show what was recorded.
    """
    record = _as_record(record)
    diffs = [d for d in record.differences
             if d.step == "interpretation" and d.field.startswith("values")]
    if diffs and record.same_version:
        raise AuditError("the recorded values differ from the recomputation the chart shows:\n"
                         + "\n".join(f"  {d}" for d in diffs[:10]))
    if diffs:
        print(f"Note: {len(diffs)} recorded value(s) differ from this recomputation, attributed "
              f"to the version change (recorded with pftwork {record.recorded_version}).")
    from IPython.display import display

    display(zscore_chart_bundle(record), raw=True)


def check_seal(record: AuditRecord | str | Mapping[str, Any]) -> None:
    """Print the sign-off state and the chain head; compare the summary with the recomputation.

    Raises
    ------
    AuditError
        When the interpretation summary or values differ from the recomputation, or a step of
        the recomputation is missing from the record (same pftwork version).
    """
    record = _as_record(record)
    data = record.data
    signoff = data.get("signoff")
    if signoff:
        print(f"Signed off by {plain_text(signoff.get('reviewer'))} at {signoff.get('time_utc')}")
    else:
        print("Not signed off.")
    summary = record.fresh.get("summary") or {}
    print(f"Recomputed pattern: {summary.get('pattern')}")
    diffs = [d for d in record.differences if d.step in ("interpretation", "record")
             or d.field == "step"]
    if diffs and record.same_version:
        raise AuditError("the record differs from the recomputation:\n"
                         + "\n".join(f"  {d}" for d in diffs))
    if diffs:
        print(f"Note: {len(diffs)} difference(s) attributed to the version change "
              f"(recorded with pftwork {record.recorded_version}).")
    print(f"Chain head: {(data.get('chain') or {}).get('head')}")
