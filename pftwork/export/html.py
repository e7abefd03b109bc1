"""Self-contained static HTML copy of a worksheet, for record systems that cannot open notebooks.

One file, no script, no external resource (no CDN, fonts or images): inline CSS only, and a
Content-Security-Policy meta tag that forbids everything else. Every text from the record is
HTML-escaped. The page shows the cautions, the case, each step (conclusion in force, decision,
amendment and reason, value table, rule, source, caveats, notes) and the record chain head of
the same export record a notebook would embed, with the z-score chart of
:mod:`pftwork.zgraphic` under the header and a z-score glyph in each value table (inline SVG:
no script, allowed by the policy). :func:`render_html` is pure; :func:`write_html`
writes the file.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from pftwork.zgraphic import GLYPH_AXIS, zscore_chart_svg, zscore_glyph_svg

from .document import build_export_record
from .render import VALUE_COLUMNS, header_view, html_text, step_view

__all__ = ["html_from_record", "render_html", "write_html"]

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;max-width:60rem;margin:1.5rem auto;
padding:0 1rem;color:#1d2530;line-height:1.45}
h1{font-size:1.4rem;margin-bottom:.3rem}h2{font-size:1.1rem;border-top:1px solid #c9d1da;
padding-top:.8rem;margin-top:1.4rem}
.caution{background:#fff6e0;border-left:4px solid #b7791f;padding:.5rem .8rem;margin:.8rem 0}
.caution ul{margin:.3rem 0 0 1.1rem;padding:0}
table{border-collapse:collapse;margin:.5rem 0;font-size:.92rem}
th,td{border:1px solid #c9d1da;padding:.2rem .5rem;text-align:right}
th:first-child,td:first-child{text-align:left}
table.facts td{text-align:left}
.conclusion{font-weight:600}.decision{color:#4a5868;font-size:.9rem}
.amended{background:#eef4ff;padding:.3rem .6rem}
.hash{font-family:ui-monospace,monospace;font-size:.8rem;word-break:break-all}
.small{font-size:.85rem;color:#4a5868}
.zchart{margin:.8rem 0}.zchart svg{max-width:100%;height:auto}
td.glyph{padding:0 .3rem;vertical-align:middle}td.glyph svg{display:block}
"""
_CSP = "default-src 'none'; style-src 'unsafe-inline'"
_GLYPH_HEADING = f"z {GLYPH_AXIS[0]:+.0f} … {GLYPH_AXIS[1]:+.0f}"


def _table(head: list[str], rows: list[list[str]], css: str = "",
           graphics: list[str] | None = None) -> str:
    """A table of escaped texts; ``graphics`` (SVG built by pftwork.zgraphic) is a last column."""
    cls = f' class="{css}"' if css else ""
    out = [f"<table{cls}>"]
    if head:
        out.append("<tr>" + "".join(f"<th>{html_text(h)}</th>" for h in head) + "</tr>")
    for i, row in enumerate(rows):
        cells = "".join(f"<td>{html_text(c)}</td>" for c in row)
        if graphics is not None:
            cells += f'<td class="glyph">{graphics[i]}</td>'
        out.append(f"<tr>{cells}</tr>")
    out.append("</table>")
    return "".join(out)


def _step(export: Mapping[str, Any], index: int) -> str:
    v = step_view(export, index)
    parts = [f'<section class="step" id="step-{html_text(v["id"])}">',
             f"<h2>{v['number']}. {html_text(v['title'])}</h2>",
             f'<p class="conclusion">{html_text(v["conclusion"])}</p>',
             f'<p class="decision">{html_text(v["decision_line"])}</p>']
    if v["engine_conclusion"] is not None:
        parts.append(f'<div class="amended"><p>Engine\'s conclusion (kept on record): '
                     f'{html_text(v["engine_conclusion"])}</p><p>Reason for the amendment: '
                     f'{html_text(v["reason"])}</p></div>')
    if v["rows"]:
        glyphs = [zscore_glyph_svg(z) if z is not None else "" for z in v["zs"]]
        parts.append(_table([*VALUE_COLUMNS, _GLYPH_HEADING], v["rows"], graphics=glyphs))
    parts.append(f"<p><b>Rule:</b> {html_text(v['rule'])}</p>")
    parts.append(f"<p><b>Source:</b> {html_text(v['source'])}</p>")
    if v["caveats"]:
        parts.append("<p><b>Caveats:</b></p><ul>"
                     + "".join(f"<li>{html_text(c)}</li>" for c in v["caveats"]) + "</ul>")
    if v["notes"]:
        parts.append("<p><b>Reviewer's notes:</b></p><ul>" + "".join(
            f"<li>{html_text(a)} ({html_text(w)}): {html_text(t)}</li>" for a, w, t in v["notes"])
            + "</ul>")
    if v["history"]:
        parts.append("<p><b>Earlier decisions:</b></p><ul>" + "".join(
            f"<li>{html_text(st)} by {html_text(who)} ({html_text(when)})"
            + (f": {html_text(c)}" if c else "") + (f"; reason: {html_text(r)}" if r else "")
            + "</li>" for st, who, when, c, r, _ in v["history"]) + "</ul>")
    parts.append(f'<p class="small">Record link SHA-256: <span class="hash">'
                 f'{html_text(v["hash"])}</span></p></section>')
    return "".join(parts)


def html_from_record(export: Mapping[str, Any], *, title: str | None = None) -> str:
    """The HTML page of a sealed export record (pure)."""
    h = header_view(export)
    rows = [["Case", h["case_id"]], ["Subject", h["subject"]], ["Test date", h["test_date"]]]
    if h["question"]:
        rows.append(["Clinical question", h["question"]])
    rows += [[f"Equations ({k})", f"{s} (table SHA-256 {sha})"] for k, s, sha in h["equations"]]
    rows += [["pftwork version", h["version"]], ["Worksheet created", h["created"]],
             ["Last updated", h["updated"]], ["Exported", h["exported"]],
             ["Reviewer", h["reviewer"]], ["Sign-off", h["signoff"]]]
    cautions = "".join(f"<li>{html_text(c)}</li>" for c in h["cautions"])
    deid = ""
    if h["deidentified"]:
        text = ("De-identified copy: direct identifiers removed, the subject id is a pseudonym, "
                "dates are shown as days from the test (day 0).")
        if h["deidentification"].get("age_capped"):
            text += " Age 90 or older is recorded as 90; reference values are computed at 90."
        deid = f'<p class="caution">{html_text(text)}</p>'
    steps = "".join(_step(export, i) for i in range(len(export.get("steps") or [])))
    values = (export.get("interpretation") or {}).get("values") or {}
    page_title = html_text(title or f"PFT worksheet {h['case_id']}")
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        f'<meta http-equiv="Content-Security-Policy" content="{_CSP}">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{page_title}</title><style>{_CSS}</style></head><body>"
        "<h1>Pulmonary function worksheet</h1>"
        f'<div class="caution"><b>Cautions</b><ul>{cautions}</ul></div>'
        f"{deid}{_table([], rows, 'facts')}"
        f'<div class="zchart">{zscore_chart_svg(values, standalone=False)}</div>'
        f'<p class="small">Record chain head (SHA-256): <span class="hash">{html_text(h["head"])}'
        "</span>. The auditable notebook of the same export carries this head; "
        "<code>pftwork verify</code> re-checks it.</p>"
        f"{steps}"
        f'<h2>Sign-off</h2><p>{html_text(h["signoff"])}</p>'
        "</body></html>\n"
    )


def render_html(record: Any, *, deidentify: bool = False, key: bytes | None = None) -> str:
    """The HTML page of a worksheet record (pure; de-identified on request)."""
    return html_from_record(build_export_record(record, deidentify=deidentify, key=key))


def write_html(record: Any, path: str | Path, *, deidentify: bool = False) -> Path:
    """Write the self-contained HTML copy of ``record`` to ``path`` and return the path.

    ``record`` may also be the path of an exported ``.ipynb``: the page then shows that
    notebook's own export record, so both carry the same chain head (``deidentify`` is then
    ignored: the notebook already is, or is not, de-identified).
    """
    path = Path(path)
    if isinstance(record, (str, Path)) and str(record).endswith(".ipynb"):
        from .notebook import read_notebook

        export = read_notebook(record).metadata.get("pftwork", {}).get("record")
        if not isinstance(export, Mapping):
            from pftwork.errors import NotebookError

            raise NotebookError(f"{record}: not a pftwork worksheet notebook")
        text = html_from_record(export)
    else:
        key = os.environ.get("PFTWORK_PSEUDONYM_KEY")
        text = render_html(record, deidentify=deidentify,
                           key=key.encode("utf-8") if key else None)
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text, encoding="utf-8")
    return path
