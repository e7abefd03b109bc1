"""The ``values`` block: measured values beside predicted, LLN, ULN, z, % predicted, percentile.

This module also runs the quality layer (when it is installed) because the measured values of a
graded session are the ones the grading selects. Blocks: ``pre``, ``post`` (spirometry),
``volumes``, ``diffusion`` (in the case's own unit) and ``resistance``.

Each entry is a dict with ``measured, predicted, lln, uln, z, percent_predicted, percentile,
extrapolated, unit, equation`` (``None`` where no equation applies), plus ``lab`` (the lab's
own reference values, when the case carries them) and, for DLCO and KCO when Hb, COHb or
altitude are given, ``adjusted``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from pftwork.case_model import Case, SpirometrySet
from pftwork.errors import EquationSetError, FieldError
from pftwork.interpret.gas_transfer import (
    SI_TO_TRADITIONAL,
    altitude_factor,
    barometric_kpa_at,
    cohb_factor,
    hb_factor,
)
from pftwork.units import CMH2O_PER_KPA

__all__ = [
    "DEFAULT_EQUATIONS",
    "QualityResult",
    "assess_quality",
    "compute_values",
    "entry",
    "resolve_equations",
    "spirometry_measured",
    "value_at_z",
]

#: Default equation set per domain (design.md §3).
DEFAULT_EQUATIONS: dict[str, str] = {"spirometry": "gli-global-2022", "volumes": "gli-2021",
                                     "diffusion": "gli-2017"}
_DOMAIN_OF_SET = {"gli-global-2022": "spirometry", "gli-2012": "spirometry",
                  "gli-2017": "diffusion", "gli-2021": "volumes"}
_SPIRO_ORDER = ("FEV1", "FVC", "FEV1/FVC", "FEV6", "PEF", "FEF25_75", "FEF75", "FEV0_75",
                "FEV0_75/FVC", "FEV0_5", "FEF25", "FEF50", "VC", "FIVC", "PIF", "FIF50")
_VOLUME_ORDER = ("TLC", "RV", "RV/TLC", "FRC", "ERV", "IC", "VC")
_FLOWS = ("PEF", "FEF25_75", "FEF75", "FEF25", "FEF50", "PIF", "FIF50")
_ENTRY_KEYS = ("measured", "predicted", "lln", "uln", "z", "percent_predicted", "percentile",
               "extrapolated")


@dataclass(frozen=True)
class QualityResult:
    """Output of the quality layer for one case (objects, when available, and the §5 block)."""

    pre: Any = None
    post: Any = None
    diffusion: Any = None
    volumes: Any = None
    block: dict[str, Any] = field(default_factory=dict)


def resolve_equations(case: Case, equations: Any = None) -> dict[str, str]:
    """Equation set per domain: defaults, then the case's ``reference``, then ``equations``.

    Parameters
    ----------
    case : Case
        The case (its ``reference`` block may name sets).
    equations : dict or sequence of str or str, optional
        ``{"spirometry": "gli-2012"}``, ``["gli-2012", "gli-2021"]`` or ``"gli-2012,gli-2021"``.

    Raises
    ------
    EquationSetError
        An identifier that pftwork does not know.
    """
    chosen = dict(DEFAULT_EQUATIONS)
    chosen.update({k: v for k, v in (case.reference or {}).items() if k in chosen and v})
    if equations is None:
        return chosen
    if isinstance(equations, str):
        equations = [s.strip() for s in equations.split(",") if s.strip()]
    if isinstance(equations, dict):
        items = list(equations.items())
    else:
        items = [(_domain_of(set_id), set_id) for set_id in equations]
    for domain, set_id in items:
        if domain not in chosen:
            raise EquationSetError(f"No equation domain named {domain!r} (expected one of "
                                   f"{', '.join(chosen)})")
        _domain_of(set_id)
        chosen[domain] = set_id
    return chosen


def _domain_of(set_id: str) -> str:
    if set_id in _DOMAIN_OF_SET:
        return _DOMAIN_OF_SET[set_id]
    try:
        from pftwork.reference import get_equation_set
    except ImportError:  # pragma: no cover - reference engine always present once merged
        raise EquationSetError(f"No equation set named {set_id!r} found") from None
    eq = get_equation_set(set_id)
    params = set(getattr(eq, "parameters", ()))
    if params & {"DLCO", "KCO", "VA"}:
        return "diffusion"
    if params & {"TLC", "RV", "FRC"}:
        return "volumes"
    return "spirometry"


# --------------------------------------------------------------------------- quality
def assess_quality(case: Case) -> QualityResult:
    """Run the quality layer on every block that carries trials.

    Returns a :class:`QualityResult` whose ``block`` is the design.md §5 ``quality`` dict
    (``FEV1_grade``, ``FVC_grade``, ``DLCO_grade``, ``notes`` …). Blocks given only as reported
    values are "not assessable" (grades ``None``).
    """
    try:
        from pftwork import quality as q
    except ImportError:
        q = None
    spiro = case.spirometry
    pre = post = diff = vol = None
    notes: list[str] = []
    if q is None:
        notes.append("Quality grading unavailable in this installation; values taken as reported.")
    else:
        age = case.subject.age_years
        if spiro and spiro.pre and spiro.pre.trials:
            pre = q.assess_spirometry_set(spiro.pre.trials, age, "pre")
        if spiro and spiro.post and spiro.post.trials:
            post = q.assess_spirometry_set(spiro.post.trials, age, "post")
        if case.volumes is not None and case.volumes.trials:
            vol = q.assess_plethysmography(case.volumes, _largest_vc(case, pre, post))
        if case.diffusion is not None and case.diffusion.trials:
            diff = q.assess_diffusion(case.diffusion.trials, _largest_vc(case, pre, post))
    block: dict[str, Any] = {}
    if q is not None:
        block = dict(q.quality_block(pre, post, diff, vol) or {})
    for key in ("FEV1_grade", "FVC_grade", "DLCO_grade"):
        block.setdefault(key, None)
    block["notes"] = list(block.get("notes") or []) + notes
    if spiro and spiro.pre and not spiro.pre.trials and spiro.pre.reported:
        block["notes"].append("Pre-bronchodilator spirometry given as reported values only: "
                              "quality not assessable.")
    return QualityResult(pre=pre, post=post, diffusion=diff, volumes=vol, block=block)


def _largest_vc(case: Case, pre: Any, post: Any) -> float | None:
    candidates: list[float] = []
    for qset, sset in ((pre, case.spirometry and case.spirometry.pre),
                       (post, case.spirometry and case.spirometry.post)):
        measured = spirometry_measured(sset, qset) if sset else {}
        candidates += [measured[k] for k in ("FVC", "VC") if measured.get(k) is not None]
    if case.volumes is not None:
        candidates += [v for k, v in case.volumes.reported.items() if k == "VC" and v]
        candidates += [t.VC for t in case.volumes.trials if t.VC]
    return max(candidates) if candidates else None


# --------------------------------------------------------------------------- measured
def spirometry_measured(sset: SpirometrySet | None, qset: Any) -> dict[str, float]:
    """Measured values of a set: the quality layer's selection, the lab's reported values filling gaps.

    Parameters
    ----------
    sset : SpirometrySet or None
        The pre- or post-bronchodilator set.
    qset : SpirometryQuality or None
        Its quality assessment; ``None`` when there is none (then the largest trial values are
        taken, SPIRO-2019 §2.5).

    Returns
    -------
    dict
        Parameter -> value (L, L/s; ``FEV1/FVC`` as a fraction).
    """
    out: dict[str, float] = {}
    if sset is None:
        return out
    selected = getattr(qset, "selected", None) or {}
    out.update({k: float(v) for k, v in selected.items() if _finite(v)})
    if qset is None and sset.trials:  # no quality layer: largest values (SPIRO-2019 §2.5)
        for name in ("FEV1", "FVC", "FEV6", "FEV0_75", "FEV0_5"):
            vals = [t.value(name) for t in sset.trials if _finite(t.value(name))]
            if vals:
                out[name] = max(vals)
    for k, v in sset.reported.items():
        if _finite(v):
            out.setdefault(k, float(v))
    if "FEV1/FVC" not in out and out.get("FEV1") and out.get("FVC"):
        out["FEV1/FVC"] = out["FEV1"] / out["FVC"]
    if "FEV0_75/FVC" not in out and out.get("FEV0_75") and out.get("FVC"):
        out["FEV0_75/FVC"] = out["FEV0_75"] / out["FVC"]
    return out


def _volumes_measured(case: Case, qvol: Any) -> dict[str, float]:
    vols = case.volumes
    if vols is None:
        return {}
    out = {k: float(v) for k, v in vols.reported.items() if _finite(v)}
    derived = getattr(qvol, "derived", None) or {}
    for k, v in derived.items():
        if _finite(v) and k in _VOLUME_ORDER:
            out.setdefault(k, float(v))
    if "RV/TLC" not in out and out.get("RV") and out.get("TLC"):
        out["RV/TLC"] = out["RV"] / out["TLC"]
    return out


def _diffusion_measured(case: Case, qdiff: Any) -> dict[str, float]:
    diff = case.diffusion
    if diff is None:
        return {}
    out: dict[str, float] = {}
    reported_by_quality = getattr(qdiff, "reported", None) or {}
    if isinstance(reported_by_quality, dict):
        out.update({k: float(v) for k, v in reported_by_quality.items()
                    if k in ("DLCO", "VA", "KCO") and _finite(v)})
    if qdiff is None and diff.trials:
        for name in ("DLCO", "VA", "KCO"):  # no quality layer: mean of the trials (DLCO-2017)
            vals = [getattr(t, name) for t in diff.trials if _finite(getattr(t, name))]
            if vals:
                out[name] = float(np.mean(vals))
    for k, v in diff.reported.items():
        if _finite(v) and k in ("DLCO", "VA", "KCO"):
            out.setdefault(k, float(v))
    if "KCO" not in out and out.get("DLCO") and out.get("VA"):
        out["KCO"] = out["DLCO"] / out["VA"]
    return out


# --------------------------------------------------------------------------- reference
def _finite(v: Any) -> bool:
    return isinstance(v, (int, float, np.floating, np.integer)) and not isinstance(v, bool) \
        and math.isfinite(float(v))


def _scalar(x: Any) -> Any:
    arr = np.asarray(x)
    if arr.size == 0:
        return None
    v = arr.reshape(-1)[0]
    if isinstance(v, (bool, np.bool_)):
        return bool(v)
    v = float(v)
    return v if math.isfinite(v) else None


def _unit_of(param: str, diffusion_unit: str = "SI") -> str:
    if "/" in param:
        return "ratio"
    if param in ("DLCO",):
        return "mmol/min/kPa" if diffusion_unit == "SI" else "mL/min/mmHg"
    if param == "KCO":
        return "mmol/min/kPa/L" if diffusion_unit == "SI" else "mL/min/mmHg/L"
    if param in _FLOWS:
        return "L/s"
    return "L"


def entry(set_id: str | None, param: str, sex: str, age: float, height: float,
          measured: float | None, *, ancestry: str | None = None, unit: str = "SI",
          diffusion_unit: str = "SI", notes: list[str] | None = None) -> dict[str, Any]:
    """One values entry computed by the reference engine (``None`` fields where no equation).

    Parameters
    ----------
    set_id : str or None
        Equation set identifier; ``None`` gives an entry with the measured value only.
    param : str
        Trade spelling (``"FEV1"``, ``"FEV1/FVC"``, ``"DLCO"`` …).
    sex : str
        ``"male"`` or ``"female"``.
    age, height : float
        Years, cm.
    measured : float or None
        In the unit reported (litres, L/s, fraction, or the diffusion unit ``unit``).
    unit : str
        ``"SI"`` or ``"traditional"`` for diffusion parameters.
    notes : list of str, optional
        Receives a note when the reference engine refuses the inputs.
    """
    out: dict[str, Any] = dict.fromkeys(_ENTRY_KEYS)
    out.update(measured=measured, unit=_unit_of(param, diffusion_unit), equation=None)
    if set_id is None:
        return out
    try:
        from pftwork.reference import reference_values
    except ImportError:  # pragma: no cover - reference engine always present once merged
        return out
    try:
        rv = reference_values(set_id, param, sex, age, height, measured=measured,
                              ancestry=ancestry, unit=unit)
    except EquationSetError:
        return out
    except FieldError as exc:
        if notes is not None:
            notes.append(f"{param}: no reference value ({exc})")
        return out
    for key in _ENTRY_KEYS[1:]:
        out[key] = _scalar(getattr(rv, key, None))
    if measured is None:
        for key in ("z", "percent_predicted", "percentile"):
            out[key] = None
    out["equation"] = set_id
    return out


def value_at_z(set_id: str, param: str, sex: str, age: float, height: float, z: float, *,
               ancestry: str | None = None, unit: str = "SI") -> float:
    """The measured value that sits at z-score ``z`` for this subject (LMS centile curve).

    Useful to show what a limit means in the parameter's own unit, and to build test cases
    around a threshold. ``y(z) = M·(1 + L·S·z)^(1/L)`` (Cole & Green 1992).

    Raises
    ------
    EquationSetError
        Unknown set or parameter.
    """
    from pftwork import lms as _lms
    from pftwork.reference import lms as _lms_of

    r = _lms_of(set_id, param, sex, age, height, ancestry=ancestry, unit=unit)
    return float(np.ravel(_lms.value_at_z(z, r.L, r.M, r.S))[0])


def _with_lab(item: dict[str, Any], lab: dict[str, float] | None) -> dict[str, Any]:
    """Attach the lab's own reference values; use them when pftwork has no equation."""
    if not lab:
        return item
    item["lab"] = {k: (float(v) if _finite(v) else None) for k, v in lab.items()}
    if item["equation"] is None:
        m = item["measured"]
        pred = item["lab"].get("predicted")
        item["predicted"] = pred
        item["lln"] = item["lab"].get("lln")
        item["uln"] = item["lab"].get("uln")
        item["z"] = item["lab"].get("z")
        if pred and m is not None:
            item["percent_predicted"] = 100.0 * m / pred
        item["equation"] = "lab"
    return item


def _ordered(measured: dict[str, float], order: tuple[str, ...]) -> list[str]:
    return [k for k in order if k in measured] + sorted(k for k in measured if k not in order)


def compute_values(case: Case, equations: dict[str, str], quality: QualityResult,
                   sex: str | None = None, notes: list[str] | None = None) -> dict[str, Any]:
    """The values block for ``case`` under ``equations`` and one ``sex``.

    Parameters
    ----------
    case : Case
        Validated case (SI internally).
    equations : dict
        Domain -> equation set, from :func:`resolve_equations`.
    quality : QualityResult
        From :func:`assess_quality` (supplies the selected measured values).
    sex : str, optional
        ``"male"`` or ``"female"``; defaults to the subject's sex (``"both"`` must be resolved
        by the caller, see :func:`pftwork.interpret.interpret`).
    notes : list of str, optional
        Receives notes on values without reference (e.g. age outside an equation's range).
    """
    subj = case.subject
    sex = sex or subj.sex
    age, height = subj.age_years, subj.height_cm
    ancestry = subj.ancestry or ("other" if equations["spirometry"] == "gli-2012" else None)
    lab_ref = case.lab_reference or {}
    out: dict[str, Any] = {"pre": {}, "post": {}, "volumes": {}, "diffusion": {}, "resistance": {}}
    spiro = case.spirometry
    for phase, sset, qset in (("pre", spiro and spiro.pre, quality.pre),
                              ("post", spiro and spiro.post, quality.post)):
        measured = spirometry_measured(sset, qset) if sset else {}
        for param in _ordered(measured, _SPIRO_ORDER):
            item = entry(equations["spirometry"], param, sex, age, height, measured[param],
                         ancestry=ancestry, notes=notes)
            out[phase][param] = _with_lab(item, lab_ref.get(param) if phase == "pre" else None)
    vols = _volumes_measured(case, quality.volumes)
    for param in _ordered(vols, _VOLUME_ORDER):
        item = entry(equations["volumes"], param, sex, age, height, vols[param], notes=notes)
        out["volumes"][param] = _with_lab(item, lab_ref.get(param))
    out["diffusion"] = _diffusion_values(case, equations["diffusion"], quality, sex, notes)
    res = case.airway_resistance
    if res is not None:
        # The case holds sRaw/Raw in kPa*s (kPa*s/L); report them in the case's own unit, the
        # unit of the lab's limits compared with them (as diffusion is reported in its own unit).
        own = "cmH2O*s" if res.unit == "cmH2O*s" else "kPa*s"
        scale = CMH2O_PER_KPA if own == "cmH2O*s" else 1.0
        for param in ("sRaw", "Raw"):
            value = getattr(res, param)
            if _finite(value):
                unit = own if param == "sRaw" else f"{own}/L"
                item = dict.fromkeys(_ENTRY_KEYS) | {"measured": float(value) * scale,
                                                     "unit": unit, "equation": None}
                out["resistance"][param] = _with_lab(item, lab_ref.get(param))
    return out


def _diffusion_values(case: Case, set_id: str, quality: QualityResult, sex: str,
                      notes: list[str] | None) -> dict[str, Any]:
    diff = case.diffusion
    measured_si = _diffusion_measured(case, quality.diffusion)
    if diff is None or not measured_si:
        return {}
    subj = case.subject
    unit = "traditional" if diff.unit == "traditional" else "SI"
    scale = SI_TO_TRADITIONAL if unit == "traditional" else 1.0
    factors = _diffusion_factors(case, sex)
    block: dict[str, Any] = {}
    for param in _ordered(measured_si, ("DLCO", "KCO", "VA")):
        m = measured_si[param] * (scale if param in ("DLCO", "KCO") else 1.0)
        item = entry(set_id, param, sex, subj.age_years, subj.height_cm, m, unit=unit,
                     diffusion_unit=unit, notes=notes)
        if param in ("DLCO", "KCO") and factors["predicted_factor"] != 1.0:
            item["adjusted"] = _adjusted(item, set_id, param, sex, subj, m, unit, factors)
        block[param] = _with_lab(item, (case.lab_reference or {}).get(param))
    return block


def _diffusion_factors(case: Case, sex: str) -> dict[str, Any]:
    diff, test, subj = case.diffusion, case.test, case.subject
    f_hb = f_cohb = f_alt = 1.0
    pb = None
    if diff is not None and diff.hemoglobin_g_dl is not None:
        f_hb = float(hb_factor(diff.hemoglobin_g_dl, sex, subj.age_years))
    if diff is not None and diff.cohb_percent is not None:
        f_cohb = float(cohb_factor(diff.cohb_percent))
    if test.barometric_kpa is not None:
        pb = float(test.barometric_kpa)
    elif test.altitude_m is not None:
        pb = float(barometric_kpa_at(test.altitude_m))
    if pb is not None:
        f_alt = float(altitude_factor(pb))
    return {"hb_factor": f_hb, "cohb_factor": f_cohb, "altitude_factor": f_alt,
            "barometric_kpa": pb, "hemoglobin_g_dl": diff.hemoglobin_g_dl if diff else None,
            "cohb_percent": diff.cohb_percent if diff else None,
            "predicted_factor": f_hb * f_cohb / f_alt}


def _adjusted(item: dict[str, Any], set_id: str, param: str, sex: str, subj: Any,
              measured: float, unit: str, factors: dict[str, Any]) -> dict[str, Any]:
    """Limits and z with the predicted value adjusted (measured value untouched).

    Scaling the LMS median M by a factor f scales LLN and ULN by f and gives the z of
    ``measured / f`` against the unadjusted equation, so z comes from the reference engine.
    """
    f = factors["predicted_factor"]
    equivalent = entry(set_id, param, sex, subj.age_years, subj.height_cm, measured / f,
                       unit=unit, diffusion_unit=unit)
    adj = {k: (item[k] * f if item[k] is not None else None) for k in ("predicted", "lln", "uln")}
    adj["z"] = equivalent["z"]
    adj["percentile"] = equivalent["percentile"]
    adj["percent_predicted"] = (100.0 * measured / adj["predicted"]) if adj["predicted"] else None
    adj["factors"] = {k: v for k, v in factors.items() if k != "predicted_factor"}
    adj["factors"]["predicted_factor"] = f
    return adj
