"""z-score graphics as SVG text: the report chart and the small per-row glyph.

The ATS 2017 technical statement on a standardized pulmonary function report (Culver et al.,
AJRCCM 2017;196:1463) asks for the measured value, LLN, z-score and % predicted *and* a graphic
of the z-scores. This module draws that graphic in our own design, as plain SVG text shared by
the live worksheet (:mod:`pftwork.ui.render`) and the exports (:mod:`pftwork.export.html`,
:mod:`pftwork.export.audit`).

Pure and deterministic: no numpy, plotting or widget import, no element ids, no randomness,
coordinates always written with one decimal, so the same values give byte-identical SVG (the
notebook export stores the chart as an output that verification compares). Every text is
HTML-escaped. Each graphic is ``role="img"`` with an ``aria-label`` (and, for the chart, a
``<title>``) that lists the values shown.

Geometry of :func:`zscore_chart_svg` (public so that tests and readers can check it): the z axis
runs from ``AXIS[0]`` to ``AXIS[1]`` and maps linearly onto ``PLOT_X[0]`` … ``PLOT_X[1]``
(40 px per z unit). The shaded normal range spans z = -1.645 … +1.645, i.e. the 5th and 95th
percentiles that INTERP-2022 (Stanojevic et al., ERJ 2022) uses as LLN and ULN.
"""

from __future__ import annotations

import html
import math
from collections.abc import Mapping
from typing import Any

from pftwork.case_model import parameter_label

__all__ = [
    "AXIS",
    "COLORS",
    "GLYPH_AXIS",
    "NORMAL_LIMIT",
    "PARAMETER_ORDER",
    "PLOT_X",
    "chart_rows",
    "chart_summary",
    "parameter_rank",
    "z_to_x",
    "zscore_chart_svg",
    "zscore_glyph_svg",
]

#: |z| of the LLN and ULN: 5th / 95th percentile (INTERP-2022; REPORT-2017).
NORMAL_LIMIT = 1.645
#: z range drawn by the chart; values beyond are clipped to the edge and flagged.
AXIS = (-6.0, 4.0)
#: x pixel range of the chart's z axis.
PLOT_X = (150.0, 550.0)
#: z range of the per-row glyph (the live worksheet's table header says "z −5 … +3").
GLYPH_AXIS = (-5.0, 3.0)
#: Base colours of every pftwork graphic (:data:`pftwork.ui.style.COLORS` extends them).
COLORS: dict[str, str] = {
    "ink": "#1f2a36",
    "muted": "#5b6b7b",
    "rule": "#d5dde5",
    "pre": "#0b6e79",
    "post": "#c2571a",
    "band": "#dcefe9",
    "band_edge": "#8fb8ad",
    "severity": "#b9c3cc",
}
#: Order of parameters in every value table and chart (unknown names follow, sorted).
PARAMETER_ORDER = ("FEV1", "FVC", "FEV1/FVC", "FEV6", "FEV0_75", "FEV0_75/FVC", "FEV0_5", "PEF",
                   "FEF25_75", "FEF75", "FEF25", "FEF50", "VC", "FIVC", "PIF", "FIF50", "TLC", "RV",
                   "RV/TLC", "FRC", "ERV", "IC", "DLCO", "KCO", "VA", "sRaw", "Raw")
#: Chart groups: heading and the blocks of the values document drawn in them.
_GROUPS = (("Spirometry", ("pre", "post")), ("Lung volumes", ("volumes",)),
           ("Diffusing capacity", ("diffusion",)))
_FONT = "font-family=\"system-ui, 'Segoe UI', Arial, sans-serif\""
_ROW_H = 26.0
_HEAD_H = 18.0
_TOP = 58.0
_RIGHT_LABEL_ROOM = 44.0


def _esc(text: Any) -> str:
    return html.escape("" if text is None else str(text), quote=True)


def _f(v: float) -> str:
    """Fixed one-decimal coordinate text (``-0.0`` written as ``0.0``)."""
    text = f"{v:.1f}"
    return "0.0" if text == "-0.0" else text


def _z_text(z: float) -> str:
    return f"{z:+.2f}"


def _finite(z: Any) -> float | None:
    if isinstance(z, bool) or not isinstance(z, (int, float)):
        return None
    z = float(z)
    return None if math.isnan(z) else z


def parameter_rank(name: str) -> tuple[int, str]:
    """Sort key of a parameter: its place in :data:`PARAMETER_ORDER`, unknown names last."""
    known = name in PARAMETER_ORDER
    return (PARAMETER_ORDER.index(name) if known else len(PARAMETER_ORDER), name)


def z_to_x(z: float, axis: tuple[float, float] = AXIS,
           plot_x: tuple[float, float] = PLOT_X) -> float:
    """x pixel of ``z`` on a linear axis, clipped to the axis range.

    Examples
    --------
    >>> z_to_x(0.0), z_to_x(-6.0), z_to_x(9.0)
    (390.0, 150.0, 550.0)
    """
    lo, hi = axis
    clipped = min(max(z, lo), hi)
    return plot_x[0] + (clipped - lo) / (hi - lo) * (plot_x[1] - plot_x[0])


def chart_rows(values: Mapping[str, Any]) -> list[tuple[str, list[tuple[str, float | None,
                                                                        float | None]]]]:
    """The rows the chart draws: ``[(group heading, [(parameter, pre z, post z), ...]), ...]``.

    ``values`` is the ``values`` part of an interpretation document (blocks ``pre``, ``post``,
    ``volumes``, ``diffusion``; each parameter a mapping with ``z``). Spirometry rows carry the
    pre-bronchodilator z and the post-bronchodilator z of the same parameter; other groups only
    the first. Parameters without a finite z in any block are left out, as are empty groups.
    """
    if not isinstance(values, Mapping):
        raise TypeError(f"values: expected the interpretation's values mapping, got "
                        f"{type(values).__name__}")
    out = []
    for heading, blocks in _GROUPS:
        zs: dict[str, list[float | None]] = {}
        for slot, block in enumerate(blocks):
            entries = values.get(block)
            if not isinstance(entries, Mapping):
                continue
            for name, item in entries.items():
                z = _finite(item.get("z")) if isinstance(item, Mapping) else None
                if z is not None:
                    zs.setdefault(str(name), [None, None])[slot] = z
        rows = [(name, zs[name][0], zs[name][1]) for name in sorted(zs, key=parameter_rank)]
        if rows:
            out.append((heading, rows))
    return out


def _marker(x: float, y: float, kind: str, clipped: int) -> str:
    """Filled circle (pre) or open diamond (post); a triangle pointing out when clipped."""
    color = COLORS[kind]
    fill = color if kind == "pre" else "#ffffff"
    style = f'fill="{fill}" stroke="{color}" stroke-width="1.6"'
    if clipped:
        tip, base = x + 7.0 * clipped, x - 2.0 * clipped
        pts = f"{_f(tip)},{_f(y)} {_f(base)},{_f(y - 5.5)} {_f(base)},{_f(y + 5.5)}"
        return f'<polygon class="pft-zmark-shape" points="{pts}" {style}/>'
    if kind == "pre":
        return f'<circle class="pft-zmark-shape" cx="{_f(x)}" cy="{_f(y)}" r="4.5" {style}/>'
    pts = (f"{_f(x)},{_f(y - 5.5)} {_f(x + 5.5)},{_f(y)} {_f(x)},{_f(y + 5.5)} "
           f"{_f(x - 5.5)},{_f(y)}")
    return f'<polygon class="pft-zmark-shape" points="{pts}" {style}/>'


def _mark(label: str, z: float, y: float, kind: str) -> str:
    lo, hi = AXIS
    clipped = -1 if z < lo else (1 if z > hi else 0)
    x = z_to_x(z)
    phase = "pre-BD / measured" if kind == "pre" else "post-BD"
    beyond = (f" (beyond the axis, drawn at {_z_text(lo if clipped < 0 else hi)})"
              if clipped else "")
    if x > PLOT_X[1] - _RIGHT_LABEL_ROOM or clipped > 0:  # no room on the right: print left
        tx, anchor = x - 9.0 - (4.0 if clipped > 0 else 0.0), "end"
    else:
        tx, anchor = x + 9.0 + (4.0 if clipped < 0 else 0.0), "start"
    cls = f"pft-zmark pft-{kind}" + (" pft-beyond" if clipped else "")
    return (f'<g class="{cls}" data-z="{_z_text(z)}" data-clipped="{abs(clipped)}">'
            f"<title>{_esc(label)} {phase}: z = {_z_text(z)}{beyond}</title>"
            + _marker(x, y, kind, clipped)
            + f'<text x="{_f(tx)}" y="{_f(y + 3.5)}" text-anchor="{anchor}" font-size="10" '
              f'fill="{COLORS["ink"]}">{_z_text(z)}</text></g>')


def _summary(groups: list[tuple[str, list[tuple[str, float | None, float | None]]]]) -> str:
    parts = []
    for _, rows in groups:
        for name, pre, post in rows:
            label = parameter_label(name)
            text = []
            if pre is not None:
                text.append(_z_text(pre) + (" pre-BD" if post is not None else ""))
            if post is not None:
                text.append(_z_text(post) + " post-BD")
            parts.append(f"{label} {', '.join(text)}")
    lo, hi = AXIS
    return (f"z-scores: {'; '.join(parts) or 'none available'}. Normal range z "
            f"-{NORMAL_LIMIT} to +{NORMAL_LIMIT} (LLN at -{NORMAL_LIMIT}); axis {lo:+.0f} to "
            f"{hi:+.0f}, values beyond it drawn at the edge as arrows.")


def chart_summary(values: Mapping[str, Any]) -> str:
    """The text alternative of :func:`zscore_chart_svg` (its ``aria-label`` and ``<title>``)."""
    return _summary(chart_rows(values))


def _axis_parts(top: float, bottom: float) -> list[str]:
    lo, hi = AXIS
    xl, xu = z_to_x(-NORMAL_LIMIT), z_to_x(NORMAL_LIMIT)
    parts = [f'<rect class="pft-normal-band" x="{_f(xl)}" y="{_f(top)}" width="{_f(xu - xl)}" '
             f'height="{_f(bottom - top)}" fill="{COLORS["band"]}"/>']
    for z in range(int(lo), int(hi) + 1):
        x = _f(z_to_x(z))
        color = COLORS["muted"] if z == 0 else COLORS["rule"]
        parts.append(f'<line class="pft-grid" data-z="{z:+d}" x1="{x}" y1="{_f(top)}" x2="{x}" '
                     f'y2="{_f(bottom)}" stroke="{color}" stroke-width="1"/>')
        parts.append(f'<text x="{x}" y="{_f(bottom + 14)}" text-anchor="middle" font-size="10" '
                     f'fill="{COLORS["muted"]}">{f"{z:+d}" if z else "0"}</text>')
    for z, name, style in ((-NORMAL_LIMIT, "LLN", f'stroke="{COLORS["ink"]}" stroke-width="1.5"'),
                           (NORMAL_LIMIT, "ULN", f'stroke="{COLORS["band_edge"]}" '
                                                 'stroke-width="1" stroke-dasharray="4 3"')):
        x = _f(z_to_x(z))
        parts.append(f'<line class="pft-{name.lower()}" x1="{x}" y1="{_f(top - 4)}" x2="{x}" '
                     f'y2="{_f(bottom)}" {style}/>')
        parts.append(f'<text x="{x}" y="{_f(top - 7)}" text-anchor="middle" font-size="10" '
                     f'fill="{COLORS["ink"]}">{name} {z:+.3f}</text>')
    parts.append(f'<text x="{_f((PLOT_X[0] + PLOT_X[1]) / 2)}" y="{_f(bottom + 28)}" '
                 f'text-anchor="middle" font-size="10" fill="{COLORS["muted"]}">z-score</text>')
    return parts


def _legend(y: float) -> str:
    x0 = PLOT_X[0]
    return (f'<g class="pft-legend" font-size="10" fill="{COLORS["ink"]}">'
            f'<circle cx="{_f(x0 + 5)}" cy="{_f(y)}" r="4.5" fill="{COLORS["pre"]}" '
            f'stroke="{COLORS["pre"]}" stroke-width="1.6"/>'
            f'<text x="{_f(x0 + 14)}" y="{_f(y + 3.5)}">pre-BD / measured</text>'
            f'<polygon points="{_f(x0 + 125)},{_f(y - 5.5)} {_f(x0 + 130.5)},{_f(y)} '
            f'{_f(x0 + 125)},{_f(y + 5.5)} {_f(x0 + 119.5)},{_f(y)}" fill="#ffffff" '
            f'stroke="{COLORS["post"]}" stroke-width="1.6"/>'
            f'<text x="{_f(x0 + 135)}" y="{_f(y + 3.5)}">post-BD</text>'
            f'<rect x="{_f(x0 + 190)}" y="{_f(y - 5)}" width="14" height="10" '
            f'fill="{COLORS["band"]}"/>'
            f'<text x="{_f(x0 + 209)}" y="{_f(y + 3.5)}">normal range, z ±{NORMAL_LIMIT}</text>'
            "</g>")


def zscore_chart_svg(values: Mapping[str, Any], *,
                     title: str = "z-scores against the reference equations",
                     standalone: bool = True) -> str:
    """The report's z-score chart: one row per parameter, shaded normal range, LLN line.

    Parameters
    ----------
    values : Mapping
        The ``values`` part of an interpretation document (``pre``, ``post``, ``volumes``,
        ``diffusion`` blocks of ``{parameter: {"z": float, ...}}``). Other blocks are ignored.
    title : str
        Heading drawn above the chart (escaped).
    standalone : bool
        Write ``xmlns`` on the root element: needed for an ``image/svg+xml`` document, not for
        SVG inline in an HTML page.

    Returns
    -------
    str
        One ``<svg>`` element. Pre-bronchodilator (or the only) measurement: filled circle;
        post-bronchodilator: open diamond; its z printed beside it. The axis runs from
        ``AXIS[0]`` to ``AXIS[1]`` with gridlines at integer z; a value beyond it is drawn as an
        arrow at the edge (``class="pft-beyond"``, ``data-clipped="1"``) and still printed.
    """
    groups = chart_rows(values)
    n_rows = sum(len(rows) for _, rows in groups)
    top = _TOP
    bottom = top + n_rows * _ROW_H + len(groups) * _HEAD_H + 4.0
    height = bottom + 36.0
    width = PLOT_X[1] + 24.0
    summary = _summary(groups)
    ns = ' xmlns="http://www.w3.org/2000/svg"' if standalone else ""
    parts = [f'<svg{ns} class="pft-zchart" width="{_f(width)}" height="{_f(height)}" '
             f'viewBox="0 0 {_f(width)} {_f(height)}" role="img" aria-label="{_esc(summary)}" '
             f'{_FONT}>',
             f"<title>{_esc(summary)}</title>",
             f'<rect x="0" y="0" width="{_f(width)}" height="{_f(height)}" fill="#ffffff"/>',
             f'<text x="8" y="16" font-size="13" font-weight="600" fill="{COLORS["ink"]}">'
             f"{_esc(title)}</text>",
             _legend(32.0)]
    parts += _axis_parts(top, bottom)
    y = top + 2.0
    for heading, rows in groups:
        parts.append(f'<text class="pft-zgroup" x="8" y="{_f(y + 12)}" font-size="10" '
                     f'font-weight="600" fill="{COLORS["muted"]}">{_esc(heading)}</text>')
        y += _HEAD_H
        for name, pre, post in rows:
            mid = y + _ROW_H / 2
            label = parameter_label(name)
            parts.append(f'<g class="pft-zrow"><text x="{_f(PLOT_X[0] - 16)}" y="{_f(mid + 4)}" '
                         f'text-anchor="end" font-size="11" fill="{COLORS["ink"]}">'
                         f"{_esc(label)}</text>")
            both = pre is not None and post is not None
            if pre is not None:
                parts.append(_mark(label, pre, mid - 6.0 if both else mid, "pre"))
            if post is not None:
                parts.append(_mark(label, post, mid + 6.0 if both else mid, "post"))
            parts.append("</g>")
            y += _ROW_H
    if not groups:
        parts.append(f'<text x="{_f(PLOT_X[0])}" y="{_f(top + 14)}" font-size="11" '
                     f'fill="{COLORS["muted"]}">No z-scores in this interpretation.</text>')
    parts.append("</svg>")
    return "".join(parts)


def zscore_glyph_svg(z: float | None, *, axis: tuple[float, float] = GLYPH_AXIS,
                     width: int = 132, height: int = 16) -> str:
    """A small inline SVG for one table row: the z-score as a dot on a shaded scale.

    The scale runs over ``axis`` (default z = -5 … +3); the band is the normal range
    (-1.645 … +1.645) and the tick marks are at z = 0, -2.5 and -4 (INTERP-2022 severity
    cut-offs). A value beyond the scale is drawn as an arrowhead at the edge pointing out.
    No xmlns: the glyph is meant for inline HTML.
    """
    lo, hi = axis
    w, h = width, height

    def x(v: float) -> float:
        return round(z_to_x(v, axis, (4.0, w - 4.0)), 1)

    value = _finite(z)
    if value is None:
        label = "z-score not available"
    else:
        label = f"z-score {_z_text(value)}" + ("" if lo <= value <= hi else
                                               " (beyond the scale)")
    parts = [f'<svg class="pft-zglyph" width="{w}" height="{h}" viewBox="0 0 {w} {h}" '
             f'role="img" aria-label="{label}"><title>{label}</title>',
             f'<rect x="{x(-NORMAL_LIMIT)}" y="3" '
             f'width="{round(x(NORMAL_LIMIT) - x(-NORMAL_LIMIT), 1)}" height="10" '
             f'fill="{COLORS["band"]}"/>',
             f'<line x1="4" y1="8" x2="{w - 4}" y2="8" stroke="{COLORS["rule"]}"/>']
    parts += [f'<line x1="{x(t)}" y1="4" x2="{x(t)}" y2="12" stroke="{COLORS["severity"]}"/>'
              for t in (0.0, -2.5, -4.0)]
    if value is not None:
        if lo <= value <= hi:
            parts.append(f'<circle cx="{x(value)}" cy="8" r="4" fill="{COLORS["pre"]}" '
                         f'stroke="{COLORS["pre"]}" stroke-width="1.5"/>')
        else:
            edge, out = (x(lo), -1.0) if value < lo else (x(hi), 1.0)
            parts.append(f'<polygon points="{_f(edge + 4 * out)},8 {_f(edge - 3 * out)},3.5 '
                         f'{_f(edge - 3 * out)},12.5" fill="{COLORS["pre"]}" '
                         f'stroke="{COLORS["pre"]}" stroke-width="1"/>')
    parts.append("</svg>")
    return "".join(parts)
