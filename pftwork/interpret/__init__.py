"""Stepwise interpretation: validity -> airflow -> volumes -> gas transfer -> bronchodilator ->
resistance -> change -> synthesis, each step a pure function returning a :class:`Finding`.

>>> from pftwork.interpret import interpret           # doctest: +SKIP
>>> result = interpret("data/demo.json")               # doctest: +SKIP
>>> result.summary["pattern"], result.step("airflow").conclusion   # doctest: +SKIP
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pftwork.interpret.airflow as _airflow
import pftwork.interpret.borderline as _borderline
import pftwork.interpret.bronchodilator as _bronchodilator
import pftwork.interpret.change as _change
import pftwork.interpret.gas_transfer as _gas_transfer
import pftwork.interpret.resistance as _resistance
import pftwork.interpret.sensitivity as _sensitivity
import pftwork.interpret.synthesis as _synthesis
import pftwork.interpret.validity as _validity
import pftwork.interpret.volumes as _volumes
from pftwork.case_model import Case
from pftwork.interpret.cautions import CAUTIONS
from pftwork.interpret.finding import STEP_IDS, Finding, json_safe
from pftwork.interpret.synthesis import SUMMARY_KEYS
from pftwork.interpret.values import (
    QualityResult,
    assess_quality,
    compute_values,
    resolve_equations,
)

__all__ = ["STEP_IDS", "SUMMARY_KEYS", "Finding", "Interpretation", "interpret", "run_steps"]

_NUMERIC = ("predicted", "lln", "uln", "z", "percent_predicted", "percentile")


@dataclass(frozen=True)
class Interpretation:
    """The complete automatic interpretation of one case.

    Attributes
    ----------
    case : Case
        The validated case.
    equations : dict
        Equation set per domain actually used.
    values : dict
        The values block (design.md §5).
    quality : dict
        The quality block (design.md §5).
    steps : tuple of Finding
        One finding per :data:`STEP_IDS`, in order.
    summary : dict
        The design.md §5 summary (plus extras).
    borderline : tuple of dict
        Every LLN/ULN decision with its flip probability (see :mod:`.borderline`).
    sensitivity : dict
        Equation/sex sensitivity block (see :mod:`.sensitivity`).
    cautions : tuple of str
        The clinical cautions.
    notes : tuple of str
        Technical notes (e.g. values without a reference equation).
    """

    case: Case
    equations: dict[str, str]
    values: dict[str, Any]
    quality: dict[str, Any]
    steps: tuple[Finding, ...]
    summary: dict[str, Any]
    borderline: tuple[dict[str, Any], ...] = ()
    sensitivity: dict[str, Any] = field(default_factory=dict)
    cautions: tuple[str, ...] = CAUTIONS
    notes: tuple[str, ...] = ()

    def step(self, step_id: str) -> Finding:
        """The finding of step ``step_id`` (one of :data:`STEP_IDS`)."""
        for f in self.steps:
            if f.id == step_id:
                return f
        raise KeyError(f"No step named {step_id!r} (expected one of {', '.join(STEP_IDS)})")

    def to_dict(self) -> dict[str, Any]:
        """The ``pftwork-interpretation/1`` document (design.md §5), JSON-safe."""
        from pftwork.interpret.document import build_document

        return build_document(self)


def run_steps(case: Case, values: dict[str, Any], quality: dict[str, Any],
              equations: dict[str, str], sex: str,
              curve_indices: dict[str, Any] | None = None) -> dict[str, Finding]:
    """Run the eight steps for one sex; returns step id -> Finding (in chain order)."""
    f: dict[str, Finding] = {}
    f["validity"] = _validity.validity(case, values, quality)
    ok = f["validity"]
    f["airflow"] = _airflow.airflow(case, values, quality, ok, curve_indices)
    f["volumes"] = _volumes.volumes(case, values, quality, ok, f["airflow"])
    f["gas_transfer"] = _gas_transfer.gas_transfer(case, values, quality, ok)
    f["bronchodilator"] = _bronchodilator.bronchodilator(case, values, quality, ok)
    f["resistance"] = _resistance.resistance(case, values, quality, ok)
    f["change"] = _change.change(case, values, quality, ok, equations, sex)
    f["synthesis"] = _synthesis.synthesis(case, values, quality, f)
    return f


def _load(case: Case | str | Path | dict[str, Any]) -> Case:
    if isinstance(case, Case):
        return case
    from pftwork.case import load_case

    return load_case(case)


def interpret(case: Case | str | Path | dict[str, Any], equations: Any = None) -> Interpretation:
    """Interpret one case automatically.

    Parameters
    ----------
    case : Case, path or dict
        A validated case, or a case file / dictionary given to :func:`pftwork.case.load_case`.
    equations : dict, sequence of str or str, optional
        Equation sets overriding the case's ``reference`` block and the defaults
        (``{"spirometry": "gli-2012"}``, ``["gli-2012"]`` or ``"gli-2012,gli-2021"``).

    Returns
    -------
    Interpretation

    Raises
    ------
    CaseError
        Invalid case input.
    EquationSetError
        Unknown equation set.

    Notes
    -----
    With ``subject.sex == "both"`` the chain runs under male and under female equations; value
    entries then hold ``range`` ([low, high] per field) and ``by_sex`` instead of single limits,
    and any step output that differs between the sexes is ``None`` and listed in
    ``data["sex_dependent"]`` (the summary's ``sex_dependent``), with both readings in the
    conclusion.
    """
    case = _load(case)
    eqs = resolve_equations(case, equations)
    q = assess_quality(case)
    curve_idx = _curve_indices(q)
    sexes = ("male", "female") if case.subject.sex == "both" else (case.subject.sex,)
    notes: list[str] = []
    per_sex = {s: compute_values(case, eqs, q, s, notes) for s in sexes}
    chains = {s: run_steps(case, per_sex[s], q.block, eqs, s, curve_idx) for s in sexes}
    if len(sexes) == 1:
        values, findings = per_sex[sexes[0]], chains[sexes[0]]
    else:
        values = _merge_values(per_sex)
        findings = {k: _merge_findings({s: chains[s][k] for s in sexes}) for k in STEP_IDS}
    decisions: list[dict[str, Any]] = []
    for s in sexes:
        for d in _borderline.borderline(case, per_sex[s], chains[s]):
            decisions.append(d | ({"sex": s} if len(sexes) > 1 else {}))
    summary = {k: v for k, v in findings["synthesis"].data.items() if k != "by_sex"}
    summary["borderline"] = [_compact(d) for d in decisions if d["borderline"]]
    summary["extrapolated"] = any(item.get("extrapolated") for s in sexes
                                  for blk in per_sex[s].values() for item in blk.values())

    def _variant(eq: dict[str, str], sex: str) -> tuple[dict[str, Any], dict[str, Any]]:
        vals = compute_values(case, eq, q, sex)
        return run_steps(case, vals, q.block, eq, sex, curve_idx)["synthesis"].data, vals

    sens = _sensitivity.sensitivity(eqs, case.subject.sex, case.subject.ancestry, _variant)
    return Interpretation(case=case, equations=eqs, values=json_safe(values),
                          quality=json_safe(q.block), steps=tuple(findings[k] for k in STEP_IDS),
                          summary=json_safe(summary), borderline=tuple(json_safe(decisions)),
                          sensitivity=json_safe(sens), cautions=CAUTIONS,
                          notes=tuple(dict.fromkeys(notes)))


def _curve_indices(q: QualityResult) -> dict[str, Any] | None:
    """Upper-airway indices of the best pre-bronchodilator manoeuvre's analysed curve, if any."""
    pre = q.pre
    if pre is None:
        return None
    best = getattr(pre, "selected_from", {}).get("best_test")
    curves = [m.curve for m in pre.maneuvers if m.index == best and m.curve is not None]
    if not curves:
        return None
    from pftwork.quality.shape import shape_descriptors

    ua = shape_descriptors(curves[0]).upper_airway
    return {"fev1_pef_ml_per_l_min": ua.fev1_pef_ml_per_l_min, "fev1_fev0_5": ua.fev1_fev0_5,
            "fif50_l_min": ua.fif50_l_min, "fef50_fif50": ua.fef50_fif50,
            "flags": list(ua.flags), "manoeuvre": best}


def _compact(d: dict[str, Any]) -> dict[str, Any]:
    keys = ("decision", "parameter", "measured", "limit", "limit_name", "p_flip", "sex")
    return {k: d[k] for k in keys if k in d}


def _merge_values(per_sex: dict[str, dict[str, Any]]) -> dict[str, Any]:
    """Values for ``sex: "both"``: measured once, limits per sex under ``by_sex`` and ``range``."""
    male, female = per_sex["male"], per_sex["female"]
    out: dict[str, Any] = {}
    for blk, items in male.items():
        out[blk] = {}
        for param, m_item in items.items():
            f_item = female[blk][param]
            merged = {k: m_item.get(k) for k in ("measured", "unit", "equation", "lab")
                      if k in m_item}
            merged.update(dict.fromkeys(_NUMERIC))
            merged["extrapolated"] = bool(m_item.get("extrapolated") or f_item.get("extrapolated"))
            merged["range"] = {k: sorted([m_item[k], f_item[k]]) for k in _NUMERIC
                               if m_item.get(k) is not None and f_item.get(k) is not None}
            merged["by_sex"] = {"male": m_item, "female": f_item}
            out[blk][param] = merged
    return out


def _merge_findings(by_sex: dict[str, Finding]) -> Finding:
    """One finding for ``sex: "both"``: shared outputs kept, differing ones set to ``None``."""
    m, f = by_sex["male"], by_sex["female"]
    same = m.status == f.status
    data = {k: (m.data.get(k) if m.data.get(k) == f.data.get(k) else None)
            for k in {**m.data, **f.data}}
    data["by_sex"] = {"male": m.data, "female": f.data}
    data["sex_dependent"] = sorted(k for k in m.data if m.data.get(k) != f.data.get(k)
                                   and k not in ("by_sex",) and not k.endswith("_z"))
    if m.id == "synthesis":
        data["borderline"] = []
    if m.conclusion == f.conclusion:
        conclusion = m.conclusion
    else:
        conclusion = (f"Same classification ({m.status}) under male and female equations; the "
                      f"details differ — male equations: {m.conclusion} "
                      f"Female equations: {f.conclusion}" if same else
                      f"The conclusion depends on the sex used — male equations: "
                      f"{m.conclusion} Female equations: {f.conclusion}")
    return Finding(m.id, m.title, conclusion, m.status if same else "sex_dependent",
                   {"male": m.evidence, "female": f.evidence}, m.thresholds, m.rule, m.source,
                   tuple(dict.fromkeys(m.caveats + f.caveats)), data)
