"""Plotly figures of a case: z-score chart, flow-volume loops, volume-time curves, trend.

Pure functions: plain data in, a :class:`plotly.graph_objects.Figure` out; no widgets, no I/O.
Colours and symbols come from :mod:`pftwork.ui.style`. Figures carry no random ids, so their
JSON is reproducible (``fig.to_plotly_json()`` is stable for the same input).

Conventions: z-scores are clipped to ``Z_RANGE`` for drawing (the hover text keeps the true
value); the normal range is the band −1.645 < z < +1.645 (5th–95th centile; ERS/ATS 2022
interpretation standard §3.1) and the guide lines at z = −2.5 and −4 are the same standard's
severity cut-offs.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import plotly.graph_objects as go

from pftwork.case_model import parameter_label
from pftwork.ui.style import COLORS, FONT, SYMBOLS

__all__ = [
    "BLOCK_LABELS",
    "CurveSet",
    "Z_LLN",
    "Z_RANGE",
    "flow_volume_figure",
    "select_curves",
    "trend_figure",
    "volume_time_figure",
    "zscore_figure",
    "zscore_rows",
]

Z_LLN = -1.645
Z_RANGE = (-6.0, 4.0)
SEVERITY_LINES = (-2.5, -4.0)
BLOCK_LABELS = {"pre": "Spirometry", "volumes": "Lung volumes", "diffusion": "Gas transfer",
                "resistance": "Airway resistance"}
_PHASES = {"pre": "pre-BD", "post": "post-BD"}


@dataclass(frozen=True)
class CurveSet:
    """The curve shown for one phase: its analysis and shape descriptors (``None`` if absent)."""

    phase: str
    trial_index: int
    analysis: Any
    shape: Any = None


def _layout(fig: go.Figure, title: str, height: int) -> go.Figure:
    fig.update_layout(
        title={"text": title, "x": 0.0, "xanchor": "left", "font": {"size": 15}},
        font={"family": FONT, "color": COLORS["ink"], "size": 12},
        paper_bgcolor=COLORS["panel"], plot_bgcolor=COLORS["panel"], height=height,
        margin={"l": 70, "r": 20, "t": 46, "b": 44},
        legend={"orientation": "h", "yanchor": "bottom", "y": 1.0, "xanchor": "right", "x": 1.0},
        hoverlabel={"font": {"family": FONT}},
    )
    axis = {"showline": True, "linecolor": COLORS["rule"], "gridcolor": "#eef2f5",
            "zeroline": False, "ticks": "outside", "tickcolor": COLORS["rule"]}
    fig.update_xaxes(**axis)
    fig.update_yaxes(**axis)
    return fig


def _span(axis: str, lo: float, hi: float) -> dict[str, Any]:
    """A shaded band across the plot between ``lo`` and ``hi`` on ``axis`` ("x" or "y")."""
    other = "y" if axis == "x" else "x"
    return {"type": "rect", f"{axis}ref": axis, f"{other}ref": "paper", f"{axis}0": lo,
            f"{axis}1": hi, f"{other}0": 0, f"{other}1": 1, "fillcolor": COLORS["band"],
            "line": {"width": 0}, "layer": "below"}


def _rule(axis: str, at: float, color: str, dash: str = "solid") -> dict[str, Any]:
    """A line across the plot at ``at`` on ``axis``."""
    other = "y" if axis == "x" else "x"
    return {"type": "line", f"{axis}ref": axis, f"{other}ref": "paper", f"{axis}0": at,
            f"{axis}1": at, f"{other}0": 0, f"{other}1": 1,
            "line": {"color": color, "width": 1, "dash": dash}, "layer": "below"}


def _empty(title: str, message: str) -> go.Figure:
    fig = go.Figure()
    fig.add_annotation(text=message, showarrow=False, x=0.5, y=0.5, xref="paper", yref="paper",
                       font={"color": COLORS["muted"], "size": 13})
    fig.update_xaxes(visible=False)
    fig.update_yaxes(visible=False)
    return _layout(fig, title, 160)


def _clip(z: float) -> float:
    return max(Z_RANGE[0] + 0.15, min(Z_RANGE[1] - 0.15, z))


def _label(param: str) -> str:
    return parameter_label(param)


def zscore_rows(values: Mapping[str, Mapping[str, Mapping[str, Any]]]) -> list[dict[str, Any]]:
    """Rows of the z-score chart: one per parameter with a z in any block, in report order.

    Returns
    -------
    list of dict
        ``{"row", "block", "param", "pre", "post"}`` where ``pre``/``post`` are value entries
        (``post`` only for spirometry). ``row`` is the display label, e.g. ``"FEV1"``.
    """
    rows: list[dict[str, Any]] = []
    for block in BLOCK_LABELS:
        for param, item in (values.get(block) or {}).items():
            post = (values.get("post") or {}).get(param) if block == "pre" else None
            if _z(item) is None and _z(post) is None:
                continue
            rows.append({"row": _label(param), "block": block, "param": param, "pre": item,
                         "post": post})
    return rows


def _z(item: Mapping[str, Any] | None) -> float | None:
    if not item:
        return None
    z = item.get("z")
    return None if z is None else float(z)


def _hover(param: str, phase: str, item: Mapping[str, Any]) -> str:
    parts = [f"<b>{_label(param)}</b> {phase}", f"z = {item['z']:+.2f}"]
    if item.get("measured") is not None:
        parts.append(f"measured {item['measured']:.3g} {item.get('unit') or ''}".rstrip())
    if item.get("lln") is not None:
        parts.append(f"LLN {item['lln']:.3g}")
    if item.get("percent_predicted") is not None:
        parts.append(f"{item['percent_predicted']:.0f} % predicted")
    return "<br>".join(parts)


def zscore_figure(values: Mapping[str, Mapping[str, Mapping[str, Any]]],
                  title: str = "Measured values as z-scores") -> go.Figure:
    """Every parameter's z-score against the normal range, pre and post bronchodilator.

    Parameters
    ----------
    values : mapping
        The ``values`` block of the interpretation document (design.md §5): blocks ``pre``,
        ``post``, ``volumes``, ``diffusion`` of entries with ``z``, ``measured``, ``lln``,
        ``percent_predicted``.
    title : str
        Figure title.

    Returns
    -------
    plotly.graph_objects.Figure
        One categorical row per parameter (top to bottom in report order); the shaded band is
        −1.645 < z < +1.645, dotted guides at −2.5 and −4; pre as filled circles, post as
        open diamonds; z outside ``Z_RANGE`` is drawn at the edge.
    """
    rows = zscore_rows(values)
    if not rows:
        return _empty(title, "No parameter with reference values in this case")
    labels = [r["row"] for r in rows]
    fig = go.Figure()
    for phase, color in (("pre", COLORS["pre"]), ("post", COLORS["post"])):
        pts = [r for r in rows if _z(r[phase]) is not None]
        if not pts:
            continue
        fig.add_trace(go.Scatter(
            x=[_clip(_z(r[phase]) or 0.0) for r in pts], y=[r["row"] for r in pts],
            mode="markers+text" if phase == "pre" else "markers",
            name="measured" if phase == "pre" else "post-BD",
            text=[f"{_z(r[phase]):+.1f}" for r in pts] if phase == "pre" else None,
            textposition="middle right", textfont={"size": 10, "color": color},
            marker={"symbol": SYMBOLS[phase], "size": 11, "color": color,
                    "line": {"width": 1.5, "color": color}},
            hovertext=[_hover(r["param"], _PHASES[phase] if r["block"] == "pre" else "", r[phase])
                       for r in pts],
            hoverinfo="text"))
    fig.update_layout(shapes=[
        _span("x", Z_LLN, -Z_LLN),
        *(_rule("x", edge, COLORS["band_edge"]) for edge in (Z_LLN, -Z_LLN)),
        *(_rule("x", guide, COLORS["severity"], "dot") for guide in SEVERITY_LINES)])
    fig.update_yaxes(categoryorder="array", categoryarray=list(reversed(labels)),
                     showgrid=True)
    fig.update_xaxes(range=list(Z_RANGE), dtick=1, title_text="z-score  (shaded: normal range, "
                     "LLN z = −1.645 to ULN z = +1.645)")
    return _layout(fig, title, 90 + 26 * len(rows))


def select_curves(case: Any) -> dict[str, CurveSet]:
    """The curve to show per phase: the trial with the largest FEV1 + FVC.

    Parameters
    ----------
    case : Case
        A validated case; trials without a ``curve`` are ignored, and curves that cannot be
        analysed (:class:`~pftwork.errors.CurveError`) are skipped.

    Returns
    -------
    dict
        ``{"pre": CurveSet, "post": CurveSet}`` (phases without curves are absent).

    Notes
    -----
    SPIRO-2019 (Graham et al., AJRCCM 2019) §"Reporting": the displayed flow-volume and
    volume-time curves are those of the manoeuvre with the largest sum of FEV1 and FVC.
    """
    from pftwork.errors import CurveError
    from pftwork.quality.curves import analyse_curve
    from pftwork.quality.shape import shape_descriptors

    chosen: dict[str, CurveSet] = {}
    spiro = getattr(case, "spirometry", None)
    for phase in ("pre", "post"):
        sset = getattr(spiro, phase, None) if spiro is not None else None
        best, best_sum = None, -1.0
        for i, trial in enumerate(getattr(sset, "trials", ()) or ()):
            if trial.curve is None:
                continue
            try:
                analysis = analyse_curve(trial.curve, f"spirometry.{phase}.trials[{i}].curve")
            except CurveError:
                continue
            total = (analysis.FEV1 or 0.0) + analysis.FVC
            if total > best_sum:
                best, best_sum = (i, analysis), total
        if best is not None:
            try:
                shape = shape_descriptors(best[1])
            except (ValueError, CurveError):
                shape = None
            chosen[phase] = CurveSet(phase, best[0], best[1], shape)
    return chosen


def flow_volume_figure(curves: Mapping[str, CurveSet],
                       title: str = "Flow-volume loop") -> go.Figure:
    """Flow-volume loops, pre and post overlaid, with PEF, FEF25/50/75 and a knee marked.

    Parameters
    ----------
    curves : mapping
        ``{"pre": CurveSet, "post": CurveSet}`` from :func:`select_curves`.

    Returns
    -------
    plotly.graph_objects.Figure
        Exhaled volume (L) on x, flow (L/s) on y, expiration positive, inspiration negative.
    """
    if not curves:
        return _empty(title, "No raw curves in this case")
    fig = go.Figure()
    for phase, cs in curves.items():
        a, color = cs.analysis, COLORS[phase]
        name = f"{_PHASES[phase]} (trial {cs.trial_index + 1})"
        vol = list(a.exp_volume_l) + list(a.insp_volume_l)
        flow = list(a.exp_flow_l_s) + list(a.insp_flow_l_s)
        fig.add_trace(go.Scatter(x=vol, y=flow, mode="lines", name=name,
                                 line={"color": color, "width": 2,
                                       "dash": "solid" if phase == "pre" else "dash"},
                                 hovertemplate="%{x:.2f} L, %{y:.2f} L/s<extra></extra>"))
        fig.add_trace(go.Scatter(
            x=[_volume_at_peak(a)],
            y=[a.PEF], mode="markers", name=f"PEF {_PHASES[phase]}", showlegend=False,
            marker={"symbol": SYMBOLS["PEF"], "size": 11, "color": color},
            hovertemplate=f"PEF {a.PEF:.2f} L/s<extra></extra>"))
        fef = [(pct, getattr(a, f"FEF{pct}")) for pct in (25, 50, 75)]
        fef = [(pct, f) for pct, f in fef if f is not None]
        fig.add_trace(go.Scatter(
            x=[pct / 100.0 * a.FVC for pct, _ in fef], y=[f for _, f in fef], mode="markers",
            showlegend=False, name=f"FEF {_PHASES[phase]}",
            marker={"symbol": SYMBOLS["FEF"], "size": 9, "color": color,
                    "line": {"width": 1.5, "color": color}},
            hovertext=[f"FEF{pct} {f:.2f} L/s" for pct, f in fef], hoverinfo="text"))
        knee = getattr(cs.shape, "knee", None) if cs.shape is not None else None
        if knee is not None and knee.present:
            labelled = not any(tr.name and tr.name.startswith("knee") for tr in fig.data)
            fig.add_trace(go.Scatter(  # one text label only: pre and post knees often overlap
                x=[knee.volume_l], y=[knee.flow_l_s],
                mode="markers+text" if labelled else "markers", text=["knee"],
                textposition="top right", showlegend=False, name=f"knee {_PHASES[phase]}",
                marker={"symbol": SYMBOLS["knee"], "size": 13, "color": COLORS["knee"],
                        "line": {"width": 2, "color": COLORS["knee"]}},
                hovertext=[f"knee at {knee.volume_l:.2f} L (sharpness {knee.sharpness:.1f})"],
                hoverinfo="text"))
    fig.add_hline(y=0, line={"color": COLORS["rule"], "width": 1})
    fig.update_xaxes(title_text="volume exhaled (L)", rangemode="tozero")
    fig.update_yaxes(title_text="flow (L/s)")
    _shape_note(fig, curves)
    return _layout(fig, title, 340)


def _volume_at_peak(a: Any) -> float:
    """Exhaled volume at peak flow, read from the plot arrays."""
    flows = list(a.exp_flow_l_s)
    return float(a.exp_volume_l[flows.index(max(flows))]) if flows else 0.0


def _shape_note(fig: go.Figure, curves: Mapping[str, CurveSet]) -> None:
    lines = []
    for phase, cs in curves.items():
        if cs.shape is None:
            continue
        text = f"{_PHASES[phase]}: concavity {cs.shape.concavity_index:.2f}"
        flags = getattr(cs.shape.upper_airway, "flags", ())
        if flags:
            text += f"; upper-airway index met: {len(flags)}"
        lines.append(text)
    if lines:
        fig.add_annotation(text="<br>".join(lines), showarrow=False, x=1.0, y=1.0,
                           xref="paper", yref="paper", xanchor="right", yanchor="top",
                           align="right", font={"size": 10, "color": COLORS["muted"]})


def volume_time_figure(curves: Mapping[str, CurveSet],
                       title: str = "Volume-time curve") -> go.Figure:
    """Volume-time curves from time zero (back-extrapolated), pre and post overlaid.

    FEV1 (volume at 1 s) and the end of expiration are marked; a vertical guide at 1 s.
    """
    if not curves:
        return _empty(title, "No raw curves in this case")
    fig = go.Figure()
    for phase, cs in curves.items():
        a, color = cs.analysis, COLORS[phase]
        fig.add_trace(go.Scatter(
            x=list(a.vt_time_s), y=list(a.vt_volume_l), mode="lines",
            name=f"{_PHASES[phase]} (trial {cs.trial_index + 1})",
            line={"color": color, "width": 2, "dash": "solid" if phase == "pre" else "dash"},
            hovertemplate="%{x:.2f} s, %{y:.2f} L<extra></extra>"))
        marks = [(1.0, a.FEV1, "FEV1")] if a.FEV1 is not None else []
        marks.append((a.FET, a.FVC, "end of expiration (FVC)"))
        fig.add_trace(go.Scatter(
            x=[m[0] for m in marks], y=[m[1] for m in marks], mode="markers", showlegend=False,
            name=f"marks {_PHASES[phase]}",
            marker={"symbol": "circle-open", "size": 9, "color": color, "line": {"width": 2}},
            hovertext=[f"{m[2]}: {m[1]:.2f} L at {m[0]:.2f} s" for m in marks], hoverinfo="text"))
    fig.add_vline(x=1.0, line={"color": COLORS["severity"], "width": 1, "dash": "dot"})
    fig.update_xaxes(title_text="time from time zero (s)")
    fig.update_yaxes(title_text="volume (L)", rangemode="tozero")
    return _layout(fig, title, 300)


def trend_figure(points: Sequence[Mapping[str, Any]],
                 params: Sequence[str] = ("FEV1", "FVC", "DLCO"),
                 title: str = "Trend in z units") -> go.Figure:
    """FEV1, FVC and DLCO z-scores over time, against the normal range.

    Parameters
    ----------
    points : sequence of mapping
        ``{"date": "YYYY-MM-DD", "FEV1": z, "FVC": z, "DLCO": z}`` (any z may be ``None``),
        in any order; sorted by date here.
    params : sequence of str
        Which series to draw.
    """
    pts = sorted((p for p in points if p.get("date")), key=lambda p: str(p["date"]))
    series = {k: [(p["date"], p[k]) for p in pts if p.get(k) is not None] for k in params}
    if not any(series.values()):
        return _empty(title, "No earlier tests with reference values")
    fig = go.Figure(layout={"shapes": [_span("y", Z_LLN, -Z_LLN),
                                       _rule("y", Z_LLN, COLORS["band_edge"])]})
    for k, pts_k in series.items():
        if not pts_k:
            continue
        fig.add_trace(go.Scatter(
            x=[d for d, _ in pts_k], y=[z for _, z in pts_k], mode="lines+markers", name=k,
            line={"color": COLORS.get(k, COLORS["marker"]), "width": 2},
            marker={"size": 8}, hovertemplate=f"{k} z %{{y:+.2f}}<br>%{{x}}<extra></extra>"))
    fig.update_yaxes(title_text="z-score", zeroline=False)
    fig.update_xaxes(title_text="test date", type="date")
    return _layout(fig, title, 280)
