"""Display model of an export record, shared by the notebook, the HTML copy and the audit printout.

Everything a person wrote (and every engine string, which may echo case text) is *data*: these
helpers turn it into inert text for each medium.

* :func:`md_text` — safe inside a Jupyter markdown cell: HTML-escaped, every markdown/LaTeX
  special character written as a numeric character reference, line breaks as ``<br>``,
  control and bidirectional-override characters made visible, and the whole wrapped in a span
  that MathJax skips (``mathjax_ignore tex2jax_ignore``).
* :func:`html_text` — safe inside an HTML page (escaped, line breaks as ``<br>``).
* :func:`plain_text` — safe in printed output (control characters made visible).

The ``*_view`` functions build plain dictionaries (strings, numbers, rows) from an export record;
the renderers only format them. Pure; no I/O.
"""

from __future__ import annotations

import datetime as dt
import html
import re
from collections.abc import Mapping
from typing import Any

from pftwork.case_model import parameter_label
from pftwork.zgraphic import parameter_rank

__all__ = [
    "STEP_TABLES",
    "display_text",
    "display_time",
    "evidence_items",
    "html_text",
    "md_text",
    "plain_text",
    "step_view",
    "value_rows",
    "value_zs",
]

#: Which blocks of the values document each step's table shows (``None``: every parameter).
STEP_TABLES: dict[str, tuple[tuple[str, tuple[str, ...] | None], ...]] = {
    "validity": (),
    "airflow": (("pre", None),),
    "volumes": (("volumes", None),),
    "gas_transfer": (("diffusion", None),),
    "bronchodilator": (("pre", ("FEV1", "FVC", "FEV1/FVC")), ("post", ("FEV1", "FVC", "FEV1/FVC"))),
    "resistance": (("resistance", None),),
    "change": (),
    "synthesis": (("pre", ("FEV1", "FVC", "FEV1/FVC")), ("volumes", ("TLC", "RV/TLC")),
                  ("diffusion", ("DLCO", "KCO"))),
}
_BLOCK_LABEL = {"pre": "pre-BD", "post": "post-BD", "volumes": "", "diffusion": "",
                "resistance": ""}
_EPOCH = dt.date(2000, 1, 1)
_LINE_BREAKS = re.compile(r"\r\n|[\r\n\u2028\u2029\x85\x0b\x0c]")
_INVISIBLE = re.compile(r"[\x00-\x08\x0e-\x1f\x7f\u200b-\u200f\u202a-\u202e\u2060-\u2069\ufeff]")
_MD_SPECIAL = set("\\`*_{}[]()#+-.!|~$%^=:@")
_HTML_CHARS = {"&": "&amp;", "<": "&lt;", ">": "&gt;", '"': "&quot;", "'": "&#39;"}
_ISO_DATETIME = re.compile(r"(?<!\d)(\d{4})-(\d{2})-(\d{2})(?:[T ](\d{2}):(\d{2})(?::\d{2}(?:\.\d+)?)?"
                           r"(?:Z|[+-]00:?00)?)?(?!\d)")


def _visible(text: str) -> str:
    return _INVISIBLE.sub(lambda m: f"[U+{ord(m.group()):04X}]", text)


def plain_text(value: Any) -> str:
    """``value`` as one-line-per-line printable text (control characters shown as ``[U+XXXX]``)."""
    text = "" if value is None else str(value)
    return _visible(_LINE_BREAKS.sub("\n", text))


def md_text(value: Any) -> str:
    """``value`` as inert markdown: no HTML, no markdown syntax, no maths, no line structure.

    Examples
    --------
    >>> md_text("<b>*x*</b> $$y$$")
    '<span class="pft-text mathjax_ignore tex2jax_ignore">&lt;b&gt;&#42;x&#42;&lt;/b&gt; &#36;&#36;y&#36;&#36;</span>'
    """
    body = "<br>".join(_md_line(line) for line in plain_text(value).split("\n"))
    return f'<span class="pft-text mathjax_ignore tex2jax_ignore">{body}</span>'


def _md_line(line: str) -> str:
    return "".join(_HTML_CHARS.get(c) or (f"&#{ord(c)};" if c in _MD_SPECIAL else c)
                   for c in line)


def html_text(value: Any) -> str:
    """``value`` escaped for HTML, line breaks as ``<br>``."""
    return "<br>".join(html.escape(s, quote=True) for s in plain_text(value).split("\n"))


def display_time(value: Any, deidentified: bool = False) -> str:
    """An ISO time stamp as ``2026-10-14 09:12 UTC`` (``day +1, 09:12 UTC`` when de-identified)."""
    if not value:
        return "—"
    m = _ISO_DATETIME.fullmatch(str(value))
    if not m:
        return plain_text(value)
    day = dt.date(int(m.group(1)), int(m.group(2)), int(m.group(3)))
    clock = f" {m.group(4)}:{m.group(5)} UTC" if m.group(4) else ""
    if deidentified:
        offset = (day - _EPOCH).days
        label = "day 0" if offset == 0 else f"day {offset:+d}"
        return label + ("," + clock if clock else "")
    return day.isoformat() + clock


def display_text(value: Any, deidentified: bool = False) -> str:
    """Free or engine text for display; in de-identified exports ISO dates become day offsets."""
    text = "" if value is None else str(value)
    if not deidentified:
        return text

    def _day(m: re.Match[str]) -> str:
        try:
            return display_time(m.group(0), True)
        except ValueError:
            return "[date]"

    return _ISO_DATETIME.sub(_day, text)


def _fmt(value: Any, digits: int = 2) -> str:
    if value is None:
        return "—"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, (int, float)):
        return f"{value:.{digits}f}"
    return str(value)


def _value_items(values: Mapping[str, Any], step_id: str) -> list[tuple[str, Mapping[str, Any]]]:
    """``(label, item)`` of every parameter with a measured value in the step's table, in order."""
    found = []
    for block, params in STEP_TABLES.get(step_id, ()):
        entries = values.get(block) or {}
        for name in params or sorted(entries, key=parameter_rank):
            item = entries.get(name)
            if isinstance(item, Mapping) and item.get("measured") is not None:
                found.append((f"{parameter_label(name)} {_BLOCK_LABEL.get(block, '')}".strip(),
                              item))
    return found


def value_rows(values: Mapping[str, Any], step_id: str) -> list[list[str]]:
    """Rows ``[parameter, measured, unit, predicted, LLN, ULN, z, % predicted]`` for a step.

    Follows the column order recommended for reports by the ATS 2017 technical statement on a
    standardized pulmonary function report (measured beside LLN and z-score; % predicted last).
    Parameters follow :data:`pftwork.zgraphic.PARAMETER_ORDER` (the chart's order).
    """
    return [[label, _fmt(item.get("measured")), str(item.get("unit") or ""),
             _fmt(item.get("predicted")), _fmt(item.get("lln")), _fmt(item.get("uln")),
             _fmt(item.get("z"), 2), _fmt(item.get("percent_predicted"), 0)]
            for label, item in _value_items(values, step_id)]


def value_zs(values: Mapping[str, Any], step_id: str) -> list[float | None]:
    """The z-score of each row of :func:`value_rows` (``None`` where there is none)."""
    return [z if isinstance(z, (int, float)) and not isinstance(z, bool) else None
            for z in (item.get("z") for _, item in _value_items(values, step_id))]


#: Column headings of :func:`value_rows`.
VALUE_COLUMNS = ["Parameter", "Measured", "Unit", "Predicted", "LLN", "ULN", "z-score", "% pred"]


def evidence_items(evidence: Any, prefix: str = "", limit: int = 40) -> list[tuple[str, str]]:
    """The step's own evidence flattened to ``(name, value)`` pairs (numbers to 3 decimals)."""
    out: list[tuple[str, str]] = []

    def walk(obj: Any, path: str) -> None:
        if len(out) >= limit:
            return
        if isinstance(obj, Mapping):
            for k, v in obj.items():
                walk(v, f"{path}.{k}" if path else str(k))
        elif isinstance(obj, list) and obj and not all(isinstance(v, (str, int, float)) for v in obj):
            for i, v in enumerate(obj):
                walk(v, f"{path}[{i}]")
        else:
            if isinstance(obj, list):
                shown = ", ".join(_fmt(v, 3) for v in obj) or "none"
            else:
                shown = _fmt(obj, 3)
            out.append((path, shown))

    walk(evidence, prefix)
    return out


def step_view(export: Mapping[str, Any], index: int) -> dict[str, Any]:
    """Everything shown for step ``index`` of an export record, as plain strings and rows."""
    step = export["steps"][index]
    deid = bool((export.get("export") or {}).get("deidentified"))
    engine = step.get("engine") or {}
    decision = step.get("decision") or {}
    status = decision.get("status") or "pending"
    amended = status == "amended" and decision.get("conclusion")
    in_force = decision.get("conclusion") if amended else engine.get("conclusion")
    who = decision.get("reviewer") or "unnamed reviewer"
    when = display_time(decision.get("time_utc"), deid)
    decision_line = {"accepted": f"accepted by {who} ({when})",
                     "amended": f"amended by {who} ({when})"}.get(status, "pending review")
    values = (export.get("interpretation") or {}).get("values") or {}
    return {
        "number": index + 1,
        "id": str(step.get("id")),
        "title": str(engine.get("title") or step.get("id")),
        "status": status,
        "engine_status": engine.get("status"),
        "decision_line": decision_line,
        "conclusion": display_text(in_force, deid),
        "engine_conclusion": display_text(engine.get("conclusion"), deid) if amended else None,
        "reason": display_text(decision.get("reason"), deid) if amended else None,
        "rule": engine.get("rule") or "",
        "source": engine.get("source") or "",
        "caveats": [display_text(c, deid) for c in engine.get("caveats") or []],
        "rows": value_rows(values, str(step.get("id"))),
        "zs": value_zs(values, str(step.get("id"))),
        "evidence": [(k, display_text(v, deid)) for k, v in evidence_items(engine.get("evidence"))],
        "notes": [(n.get("author") or "unnamed", display_time(n.get("time_utc"), deid),
                   display_text(n.get("text"), deid)) for n in step.get("notes") or []],
        "history": [(h.get("status"), h.get("reviewer") or "unnamed",
                     display_time(h.get("time_utc"), deid),
                     display_text(h.get("conclusion"), deid), display_text(h.get("reason"), deid),
                     display_text(h.get("why"), deid)) for h in step.get("history") or []],
        "hash": ((step.get("chain") or {}).get("hash") or ""),
    }


def header_view(export: Mapping[str, Any]) -> dict[str, Any]:
    """The header of an export record as plain strings."""
    meta = export.get("export") or {}
    deid = bool(meta.get("deidentified"))
    case = export.get("case") or {}
    subject = case.get("subject") or {}
    test = case.get("test") or {}
    age = subject.get("age_years")
    info = meta.get("deidentification") or {}
    if deid and info.get("age_capped"):
        age_text = "90 or older (reference values computed at 90)"
    else:
        age_text = _fmt(age, 1) + " y" if age is not None else "—"
    signoff = export.get("signoff")
    steps = export.get("steps") or []
    reviewed = sum((s.get("decision") or {}).get("status") in ("accepted", "amended") for s in steps)
    if signoff:
        signed = (f"signed off by {signoff.get('reviewer')} "
                  f"({display_time(signoff.get('time_utc'), deid)})")
    else:
        signed = f"NOT signed off: {reviewed} of {len(steps)} steps reviewed"
    return {
        "case_id": str(subject.get("id") or "—"),
        "subject": (f"{subject.get('sex', '—')}, age {age_text}, height "
                    f"{_fmt(subject.get('height_cm'), 1)} cm"),
        "test_date": display_time(test.get("date"), deid) if test.get("date") else "—",
        "question": display_text(test.get("question"), deid) if test.get("question") else None,
        "equations": [(k, v, (export.get("tables") or {}).get(v) or "unknown")
                      for k, v in sorted((export.get("equations") or {}).items())],
        "version": meta.get("pftwork_version") or "unknown",
        "created": display_time(meta.get("created_utc"), deid),
        "updated": display_time(export.get("updated_utc"), deid),
        "exported": (display_time(meta.get("exported_utc"), deid) if meta.get("exported_utc")
                     else "withheld (de-identified copy)"),
        "reviewer": export.get("reviewer") or "—",
        "signoff": signed,
        "head": (export.get("chain") or {}).get("head") or "",
        "cautions": list(meta.get("cautions") or []),
        "deidentified": deid,
        "deidentification": info,
        "pattern": ((export.get("interpretation") or {}).get("summary") or {}).get("pattern"),
    }
