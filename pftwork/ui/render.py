"""HTML fragments of the worksheet (pure string builders; no widgets, no I/O).

Every function takes plain data (the interpretation document, a step record as dict) and
returns an HTML string styled by :mod:`pftwork.ui.style`. User and engine text is escaped.
The evidence table follows the spirit of the ATS 2017 standardized report (Culver et al.,
AJRCCM 2017;196:1463): measured value, LLN, z-score, % predicted, and a z-score graphic
(the glyph of :func:`pftwork.zgraphic.zscore_glyph_svg`, re-exported here as ``z_glyph_svg``).
"""

from __future__ import annotations

import html
import math
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from pftwork.case_model import parameter_label
from pftwork.zgraphic import zscore_glyph_svg as z_glyph_svg

__all__ = [
    "STEP_BLOCKS",
    "cautions_html",
    "decision_html",
    "error_html",
    "evidence_list_html",
    "header_html",
    "quality_html",
    "step_header_html",
    "values_table_html",
    "z_glyph_svg",
]

#: Which value blocks each step's table shows (block, parameters or None for all).
STEP_BLOCKS: dict[str, tuple[tuple[str, tuple[str, ...] | None], ...]] = {
    "airflow": (("pre", None),),
    "volumes": (("volumes", None),),
    "gas_transfer": (("diffusion", None),),
    "bronchodilator": (("pre", ("FEV1", "FVC", "FEV1/FVC")), ("post", ("FEV1", "FVC", "FEV1/FVC"))),
    "resistance": (("resistance", None),),
}
_BLOCK_NAMES = {"pre": "pre-BD", "post": "post-BD", "volumes": "", "diffusion": "",
                "resistance": ""}


def esc(text: Any) -> str:
    """HTML-escaped ``str(text)``."""
    return html.escape("" if text is None else str(text))


def _num(x: Any, digits: int = 2) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "–"
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, (int, float)):
        return f"{x:.{digits}f}"
    return esc(x)


def _sig(x: Any) -> str:
    """Measured/predicted values: 3 significant digits, ratios as fractions with 2 decimals."""
    if x is None or isinstance(x, bool) or not isinstance(x, (int, float)):
        return _num(x)
    return f"{x:.2f}" if abs(x) < 10 else f"{x:.1f}"


def _row_class(z: Any) -> str:
    if not isinstance(z, (int, float)) or isinstance(z, bool):
        return ""
    return ' class="pft-low"' if z < -1.645 else (' class="pft-high"' if z > 1.645 else "")


def values_table_html(values: Mapping[str, Mapping[str, Mapping[str, Any]]],
                      blocks: Sequence[tuple[str, tuple[str, ...] | None]]) -> str:
    """The evidence table: one row per parameter of the chosen blocks.

    Columns: parameter, measured, unit, predicted, LLN, ULN, z, % predicted, z graphic.
    Returns an empty string when no block has values.
    """
    rows = []
    for block, params in blocks:
        items = values.get(block) or {}
        for param in params or tuple(items):
            item = items.get(param)
            if not item:
                continue
            label = esc(parameter_label(param)) + (
                f' <span class="pft-meta">{_BLOCK_NAMES[block]}</span>'
                if _BLOCK_NAMES.get(block) else "")
            rows.append(_value_row(label, item))
            adjusted = item.get("adjusted")
            if isinstance(adjusted, Mapping) and adjusted.get("z") is not None:
                rows.append(_value_row(f'{esc(param)} <span class="pft-meta">adjusted (Hb, COHb, '
                                       "altitude)</span>",
                                       {**adjusted, "measured": item.get("measured"),
                                        "unit": item.get("unit")}))
    if not rows:
        return ""
    head = ("<tr><th>Parameter</th><th>Measured</th><th>Unit</th><th>Predicted</th><th>LLN</th>"
            "<th>ULN</th><th>z</th><th>% pred</th><th>z −5 … +3</th></tr>")
    return f'<table class="pft-evidence">{head}{"".join(rows)}</table>'


def _value_row(label: str, item: Mapping[str, Any]) -> str:
    z = item.get("z")
    pct = item.get("percent_predicted")
    return (f"<tr><td>{label}</td><td>{_sig(item.get('measured'))}</td>"
            f"<td>{esc(item.get('unit') or '')}</td><td>{_sig(item.get('predicted'))}</td>"
            f"<td>{_sig(item.get('lln'))}</td><td>{_sig(item.get('uln'))}</td>"
            f"<td{_row_class(z)}>{'–' if z is None else f'{z:+.2f}'}</td>"
            f"<td>{'–' if pct is None else f'{pct:.0f}'}</td>"
            f"<td>{z_glyph_svg(z) if z is not None else ''}</td></tr>")


def quality_html(quality: Mapping[str, Any]) -> str:
    """Session quality grades and notes."""
    grades = [(k.replace("_grade", ""), v) for k, v in quality.items() if k.endswith("_grade")]
    cells = "".join(f"<tr><td>{esc(k)}</td><td>{esc(v or '–')}</td></tr>" for k, v in grades)
    notes = "".join(f"<li>{esc(n)}</li>" for n in quality.get("notes") or [])
    table = (f'<table class="pft-evidence"><tr><th>Quality</th><th>Grade</th></tr>{cells}</table>'
             if cells else "")
    return table + (f'<ul class="pft-meta">{notes}</ul>' if notes else "")


def _flat(prefix: str, value: Any, out: list[tuple[str, Any]]) -> None:
    if isinstance(value, Mapping):
        for k, v in value.items():
            _flat(f"{prefix}.{k}" if prefix else str(k), v, out)
    elif isinstance(value, (list, tuple)) and value and isinstance(value[0], Mapping):
        for i, v in enumerate(value):
            _flat(f"{prefix}[{i}]", v, out)
    else:
        out.append((prefix, value))


def _value_text(v: Any) -> str:
    if isinstance(v, float):
        return f"{v:.3g}" if abs(v) < 1000 else f"{v:.0f}"
    if isinstance(v, (list, tuple)):
        return ", ".join(_value_text(x) for x in v) or "–"
    if v is None:
        return "–"
    return _num(v)


def evidence_list_html(evidence: Mapping[str, Any], limit: int = 24) -> str:
    """The engine's evidence dictionary as a compact ``key = value`` list (nested keys dotted)."""
    flat: list[tuple[str, Any]] = []
    _flat("", evidence, flat)
    shown = [f"<b>{esc(k)}</b> = {esc(_value_text(v))}" for k, v in flat[:limit]]
    if len(flat) > limit:
        shown.append(f"… {len(flat) - limit} more")
    return "; ".join(shown)


def error_html(message: str | None) -> str:
    """An error message box (empty string when there is no message)."""
    return f'<div class="pft-error-text">{esc(message)}</div>' if message else ""


def cautions_html(cautions: Iterable[str]) -> str:
    """The clinical cautions box shown on every screen."""
    items = "".join(f"<li>{esc(c)}</li>" for c in cautions)
    return f"<b>Clinical cautions</b><ul>{items}</ul>"


def header_html(case_raw: Mapping[str, Any], interpretation: Mapping[str, Any]) -> str:
    """Worksheet heading: case id, subject, test date, clinical question, equation sets."""
    s = case_raw.get("subject") or {}
    t = case_raw.get("test") or {}
    eq = interpretation.get("equations") or {}
    who = ", ".join(p for p in (
        esc(s.get("sex")), f"{s['age_years']:.1f} y" if s.get("age_years") is not None else "",
        f"{s['height_cm']:.0f} cm" if s.get("height_cm") is not None else "") if p)
    sub = [who]
    if t.get("date"):
        sub.append(f"tested {esc(t['date'])}")
    if t.get("question"):
        sub.append(f"question: {esc(t['question'])}")
    eqs = ", ".join(f"{esc(k)} {esc(v)}" for k, v in eq.items() if v)
    return (f'<div class="pft-header"><h2>Lung function worksheet · {esc(s.get("id", "case"))}'
            f'</h2><div class="pft-sub">{" · ".join(sub)}</div>'
            + (f'<div class="pft-sub">Reference equations: {eqs}</div>' if eqs else "")
            + "</div>")


def step_header_html(number: int, step: Mapping[str, Any]) -> str:
    """Panel heading: step number, title and the decision chip."""
    status = step["decision"]["status"]
    chip = {"pending": "to review", "accepted": "accepted", "amended": "amended"}[status]
    title = step["engine"].get("title") or step["id"]
    return (f'<span class="pft-stepno">{number}</span><h3>{esc(title)}</h3>'
            f'<span class="pft-chip pft-chip-{status}">{chip}</span>')


def decision_html(step: Mapping[str, Any]) -> str:
    """Conclusion in force, the engine's original if amended, rule, source, caveats, notes."""
    engine, dec = step["engine"], step["decision"]
    parts = []
    if dec["status"] == "amended":
        parts.append(f'<div class="pft-conclusion pft-amended pft-amended-text">'
                     f'{esc(dec["conclusion"])}</div>'
                     f'<div class="pft-original">Amended by {esc(dec.get("reviewer") or "–")} '
                     f'at {esc(dec.get("time_utc"))}; reason: {esc(dec.get("reason"))}.<br>'
                     f'Engine conclusion (kept on record): <i>{esc(engine.get("conclusion"))}'
                     f'</i></div>')
    else:
        parts.append(f'<div class="pft-conclusion pft-engine-text">'
                     f'{esc(engine.get("conclusion"))}</div>')
        if dec["status"] == "accepted":
            parts.append(f'<div class="pft-original">Accepted by {esc(dec.get("reviewer") or "–")}'
                         f' at {esc(dec.get("time_utc"))}.</div>')
    meta = []
    if engine.get("rule"):
        meta.append(f"<b>Rule.</b> {esc(engine['rule'])}")
    if engine.get("source"):
        meta.append(f"<b>Source.</b> {esc(engine['source'])}")
    if engine.get("caveats"):
        meta.append("<b>Caveats.</b> " + " ".join(esc(c) for c in engine["caveats"]))
    parts.append('<div class="pft-meta">' + "<br>".join(meta) + "</div>")
    detail = []
    if engine.get("evidence"):
        detail.append("<b>Evidence.</b> " + evidence_list_html(engine["evidence"], limit=60))
    if engine.get("thresholds"):
        detail.append("<b>Thresholds.</b> " + evidence_list_html(engine["thresholds"], limit=60))
    if detail:
        parts.append('<details class="pft-meta pft-details"><summary>Values and thresholds the '
                     "rule used</summary>" + "<br>".join(detail) + "</details>")
    notes = step.get("notes") or []
    if notes:
        items = "".join(f"<li>{esc(n['text'])} <span class='pft-meta'>— "
                        f"{esc(n.get('author') or '–')}, {esc(n['time_utc'])}</span></li>"
                        for n in notes)
        parts.append(f'<div class="pft-notes"><b>Notes</b><ul>{items}</ul></div>')
    if step.get("history"):
        items = "".join(f"<li>{esc(h.get('status'))} by {esc(h.get('reviewer') or '–')} at "
                        f"{esc(h.get('time_utc'))}"
                        + (f": {esc(h['conclusion'])}" if h.get("conclusion") else "")
                        + f" <i>(superseded {esc(h.get('superseded_utc'))}: {esc(h.get('why'))})"
                          "</i></li>" for h in step["history"])
        parts.append(f'<div class="pft-meta pft-history"><b>Earlier decisions</b>'
                     f'<ul>{items}</ul></div>')
    return "".join(parts)
