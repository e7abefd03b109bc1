"""Step 2 — airflow: obstruction, its severity, GOLD grade (COPD context) and upper-airway flags."""

from __future__ import annotations

from typing import Any

from pftwork.case_model import Case
from pftwork.interpret.finding import Z_LLN, Finding, not_assessed, severity, value

__all__ = ["EMPEY_LIMIT", "GOLD_RATIO", "airflow", "gold_grade", "upper_airway_indices"]

TITLE = "Airflow"
SOURCE = ("ERS/ATS 2022 interpretive strategies (INTERP-2022), Table 8 (obstruction: FEV1/FVC "
          "< 5th percentile) and severity by FEV1 z-score; GOLD spirometric grades (post-BD "
          "FEV1/FVC < 0.70; FEV1 80/50/30 % predicted); Empey, BMJ 1972 (FEV1 mL / PEF L/min > 10); "
          "Rotman et al., Chest 1975 (FEV1/FEV0.5 >= 1.5)")
RULE = ("Obstruction when the pre-bronchodilator FEV1/FVC z-score is below -1.645 (the LLN). "
        "Its severity follows the FEV1 z-score in half-open bands: mild -2.5 <= z < -1.645, "
        "moderate -4 <= z < -2.5, severe z < -4 (an obstructed FEV1 with z >= -1.645 is graded "
        "mild: our own choice, the lowest band).")
#: GOLD fixed post-bronchodilator FEV1/FVC ratio (standards.md §3.9, VERIFIED).
GOLD_RATIO = 0.70
#: Empey index threshold, FEV1 (mL) / PEF (L/min) (standards.md §3.8, VERIFIED [S21a]).
EMPEY_LIMIT = 10.0  # applied in pftwork.quality.shape; repeated here for the thresholds record
_KEYS = ("obstruction", "severity", "ratio_z", "fev1_z", "fvc_z", "fev1_low", "fvc_low",
         "gold_grade", "upper_airway_flag")


def gold_grade(post_ratio: float | None, post_fev1_pct: float | None) -> int | None:
    """GOLD spirometric grade 1-4, or ``None`` when post-BD FEV1/FVC >= 0.70 or data are absent.

    Grades on post-BD FEV1 % predicted: 1 >= 80, 2 in [50, 80), 3 in [30, 50), 4 < 30
    (GOLD; standards.md §3.9, VERIFIED [S23a, S23b]).
    """
    if post_ratio is None or post_fev1_pct is None or post_ratio >= GOLD_RATIO:
        return None
    if post_fev1_pct >= 80.0:
        return 1
    if post_fev1_pct >= 50.0:
        return 2
    if post_fev1_pct >= 30.0:
        return 3
    return 4


def upper_airway_indices(values: dict[str, Any], curve_indices: dict[str, Any] | None = None
                         ) -> dict[str, Any]:
    """Published upper-airway screening indices, from the raw curve when analysed, else values.

    Parameters
    ----------
    values : dict
        Values block (pre FEV1, PEF, FEV0_5, FEF50, FIF50 used when present).
    curve_indices : dict, optional
        ``UpperAirwayIndices`` of the best manoeuvre's curve, as a dict (from the quality layer).

    Returns
    -------
    dict
        ``fev1_pef_ml_per_l_min``, ``fev1_fev0_5``, ``fif50_l_min``, ``fef50_fif50``, ``flags``
        (thresholds met, each naming its source) and ``from`` (``"curve"`` or ``"values"``);
        ``None`` when no index could be computed.
    """
    if curve_indices:
        return dict(curve_indices) | {"from": "curve"}
    from pftwork.quality.shape import upper_airway_indices as _indices

    m = {p: value(values, "pre", p, "measured") for p in ("FEV1", "PEF", "FEV0_5", "FEF50", "FIF50")}
    ua = _indices(m["FEV1"], m["PEF"], m["FEV0_5"], m["FEF50"], m["FIF50"])
    out = {"fev1_pef_ml_per_l_min": ua.fev1_pef_ml_per_l_min, "fev1_fev0_5": ua.fev1_fev0_5,
           "fif50_l_min": ua.fif50_l_min, "fef50_fif50": ua.fef50_fif50,
           "flags": list(ua.flags), "suggestive": ua.suggestive, "from": "values"}
    computed = [k for k in ("fev1_pef_ml_per_l_min", "fev1_fev0_5", "fif50_l_min", "fef50_fif50")
                if out[k] is not None]
    return out if computed else {"flags": [], "from": None}


def airflow(case: Case, values: dict[str, Any], quality: dict[str, Any],
            validity: Finding, curve_indices: dict[str, Any] | None = None) -> Finding:
    """Classify airflow from the pre-bronchodilator spirometry.

    Parameters
    ----------
    case : Case
        The case (``test.copd`` switches the GOLD label on).
    values : dict
        The values block.
    quality : dict
        The quality block (unused beyond validity; kept for a uniform step signature).
    validity : Finding
        Step 1; a stop there stops this step.
    curve_indices : dict, optional
        Upper-airway indices from raw curves (``{"name": {"value": .., "flag": bool}}``).
    """
    if validity.data.get("stop"):
        return not_assessed("airflow", TITLE, "Not interpreted: the session failed the validity "
                            "step.", _KEYS, status="stopped", rule=RULE, source=SOURCE)
    ratio_z = value(values, "pre", "FEV1/FVC")
    fev1_z, fvc_z = value(values, "pre", "FEV1"), value(values, "pre", "FVC")
    usable = validity.data.get("fev1_usable") is not False and \
        validity.data.get("fvc_usable") is not False
    if ratio_z is None or not usable:
        why = ("FEV1 or FVC unusable (grade F)" if not usable
               else "no pre-bronchodilator FEV1/FVC with a reference value")
        return not_assessed("airflow", TITLE, f"Airflow not assessed: {why}.", _KEYS,
                            rule=RULE, source=SOURCE)
    obstruction = ratio_z < Z_LLN
    sev = (severity(fev1_z) or "mild") if obstruction and fev1_z is not None else None
    fev1_low = None if fev1_z is None else fev1_z < Z_LLN
    fvc_low = None if fvc_z is None else fvc_z < Z_LLN
    data: dict[str, Any] = {"obstruction": obstruction, "severity": sev, "ratio_z": ratio_z,
                            "fev1_z": fev1_z, "fvc_z": fvc_z, "fev1_low": fev1_low,
                            "fvc_low": fvc_low, "gold_grade": None, "upper_airway_flag": None}
    caveats: list[str] = []
    ratio = value(values, "pre", "FEV1/FVC", "measured")
    if obstruction:
        text = (f"Airflow obstruction: FEV1/FVC {ratio:.2f} is below the LLN (z {ratio_z:.2f}); "
                f"severity {sev} on FEV1 z {fev1_z:.2f}." if fev1_z is not None else
                f"Airflow obstruction: FEV1/FVC {ratio:.2f} is below the LLN (z {ratio_z:.2f}).")
        if fev1_z is not None and fev1_z >= Z_LLN:
            caveats.append("FEV1 itself is within normal limits; graded mild by our convention.")
        status = "obstruction"
    else:
        text = f"No airflow obstruction: FEV1/FVC {ratio:.2f} is at or above the LLN (z {ratio_z:.2f})."
        low = [n for n, flag in (("FEV1", fev1_low), ("FVC", fvc_low)) if flag]
        if low:
            text += f" {' and '.join(low)} below the LLN with a preserved ratio (see lung volumes)."
        status = "normal"
    text += _gold_text(case, values, data, caveats)
    uao = upper_airway_indices(values, curve_indices)
    suggestive = bool(uao.get("suggestive", bool(uao["flags"])))
    data["upper_airway_flag"] = suggestive if uao["from"] else None
    if suggestive:
        text += (" Consider upper-airway obstruction (" + "; ".join(uao["flags"]) + "): "
                 "confirm with the flow-volume loop shape, imaging or endoscopy.")
    elif uao["flags"]:
        caveats.append("A single upper-airway index beyond its threshold (" + "; ".join(
            uao["flags"]) + ") is not suggestive on its own (pftwork's rule: Empey > 10, or two "
            "of Rotman's criteria); look at the loop shape.")
    evidence = {"FEV1/FVC": ratio, "FEV1/FVC_z": ratio_z, "FEV1_z": fev1_z, "FVC_z": fvc_z,
                "FEV1_percent_predicted": value(values, "pre", "FEV1", "percent_predicted"),
                "FEV1/FVC_lln": value(values, "pre", "FEV1/FVC", "lln"),
                "upper_airway": uao}
    thresholds = {"FEV1/FVC_z_lln": Z_LLN, "severity_z": {"mild": [-2.5, Z_LLN],
                  "moderate": [-4.0, -2.5], "severe": [None, -4.0]},
                  "gold_ratio": GOLD_RATIO, "gold_fev1_percent": [80, 50, 30],
                  "empey": EMPEY_LIMIT}
    return Finding("airflow", TITLE, text, status, evidence, thresholds, RULE, SOURCE,
                   tuple(caveats), data)


def _gold_text(case: Case, values: dict[str, Any], data: dict[str, Any],
               caveats: list[str]) -> str:
    if not case.test.copd:
        return ""
    post_ratio = value(values, "post", "FEV1/FVC", "measured")
    post_pct = value(values, "post", "FEV1", "percent_predicted")
    if post_ratio is None or post_pct is None:
        return " GOLD grade not given: it needs post-bronchodilator FEV1 and FVC."
    grade = gold_grade(post_ratio, post_pct)
    data["gold_grade"] = grade
    caveats.append("The GOLD grade uses the fixed 0.70 ratio, not the LLN; it is a secondary "
                   "label and may disagree with the z-score classification.")
    if grade is None:
        return (f" Post-bronchodilator FEV1/FVC {post_ratio:.2f} is not below 0.70: the GOLD "
                "spirometric criterion is not met.")
    return (f" Secondary label (COPD context): GOLD {grade} (post-bronchodilator FEV1 "
            f"{post_pct:.0f} % predicted, FEV1/FVC {post_ratio:.2f}).")
