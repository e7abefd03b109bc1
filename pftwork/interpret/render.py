"""Plain-text rendering of an interpretation document for the command line.

Layout in the spirit of the ATS 2017 recommendations for a standardized report: each value
with its LLN, z-score and % predicted, then the chain of steps and the cautions.
"""

from __future__ import annotations

from typing import Any

from pftwork.case_model import parameter_label

__all__ = ["render_text"]

_BLOCK_TITLES = (("pre", "Spirometry, pre-bronchodilator"), ("post", "Spirometry, post-bronchodilator"),
                 ("volumes", "Lung volumes"), ("diffusion", "Gas transfer"),
                 ("resistance", "Airway resistance"))


def _num(x: Any, fmt: str) -> str:
    return "—" if x is None else format(x, fmt)


def _value_fmt(item: dict[str, Any]) -> str:
    return ".1f" if str(item.get("unit", "")).startswith("mL/") else ".2f"


def _row(param: str, item: dict[str, Any]) -> str:
    fmt = _value_fmt(item)
    if item.get("z") is None and item.get("range"):
        rng = item["range"]
        lln = " to ".join(_num(v, fmt) for v in rng.get("lln", [None]))
        z = " to ".join(_num(v, "+.2f") for v in rng.get("z", [None]))
        pct = " to ".join(_num(v, ".0f") for v in rng.get("percent_predicted", [None]))
    else:
        lln, z = _num(item.get("lln"), fmt), _num(item.get("z"), "+.2f")
        pct = _num(item.get("percent_predicted"), ".0f")
    flag = " *" if item.get("extrapolated") else ""
    unit = item.get("unit") or ""
    line = (f"  {parameter_label(param):<12}{_num(item.get('measured'), fmt):>9}  {lln:>12}  {z:>14}  {pct:>9}"
            f"  {unit}{flag}")
    adj = item.get("adjusted")
    if adj:
        line += (f"\n  {'  adjusted':<12}{'':>9}  {_num(adj.get('lln'), fmt):>12}  "
                 f"{_num(adj.get('z'), '+.2f'):>14}  {_num(adj.get('percent_predicted'), '.0f'):>9}"
                 "  (Hb/COHb/altitude)")
    return line


def render_text(doc: dict[str, Any]) -> str:
    """Readable text of a ``pftwork-interpretation/1`` document.

    Parameters
    ----------
    doc : dict
        From :meth:`pftwork.interpret.Interpretation.to_dict`.

    Returns
    -------
    str
        Values table (measured, LLN, z, % predicted), quality, steps, summary and cautions.
    """
    subj = doc.get("subject", {})
    lines = [f"pftwork interpretation — subject {subj.get('id')}, {subj.get('sex')}, "
             f"{_num(subj.get('age_years'), '.1f')} y, {_num(subj.get('height_cm'), '.0f')} cm",
             "Equations: " + ", ".join(f"{k} {v}" for k, v in doc.get("equations", {}).items()),
             ""]
    header = f"  {'':<12}{'measured':>9}  {'LLN':>12}  {'z':>14}  {'% pred':>9}"
    for key, title in _BLOCK_TITLES:
        block = (doc.get("values") or {}).get(key) or {}
        if block:
            lines += [title, header] + [_row(p, item) for p, item in block.items()] + [""]
    if any(item.get("extrapolated") for blk in (doc.get("values") or {}).values()
           for item in blk.values()):
        lines += ["  * outside the equation's published range (extrapolated)", ""]
    q = doc.get("quality") or {}
    lines.append(f"Quality: FEV1 {q.get('FEV1_grade') or '–'}, FVC {q.get('FVC_grade') or '–'}, "
                 f"DLCO {q.get('DLCO_grade') or '–'}")
    lines.append("")
    for i, step in enumerate(doc.get("steps") or [], 1):
        lines.append(f"{i}. {step['title']} [{step['status']}]")
        lines.append(f"   {step['conclusion']}")
        lines.append(f"   Source: {step['source']}")
    summary = doc.get("summary") or {}
    lines += ["", f"Pattern: {summary.get('pattern')}"]
    for b in summary.get("borderline") or []:
        lines.append(f"  borderline: {b['decision']} ({b['parameter']}), flip probability "
                     f"{b['p_flip']:.0%}")
    sens = doc.get("sensitivity") or {}
    if sens.get("note"):
        lines.append(f"Equation sensitivity: {sens['note']}")
    lines += ["", "Cautions:"] + [f"  - {c}" for c in doc.get("cautions") or []]
    return "\n".join(lines) + "\n"
