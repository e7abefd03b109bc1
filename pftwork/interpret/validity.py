"""Step 1 — validity: can the session be interpreted, and how far should it be trusted?"""

from __future__ import annotations

from typing import Any

from pftwork.case_model import Case
from pftwork.interpret.finding import Finding

__all__ = ["GOOD_GRADES", "LOW_GRADES", "validity"]

TITLE = "Test quality and validity"
SOURCE = ("ATS/ERS 2019 spirometry standard (SPIRO-2019) quality grades A-F/U; ERS/ATS 2017 "
          "DLCO standard grades; ERS/ATS 2022 interpretive strategies (INTERP-2022): interpret "
          "in the light of test quality")
RULE = ("Grades A-C are interpreted as usual; grades D, E and U are still reported but every "
        "conclusion is flagged as resting on low-quality data; a session whose FEV1 and FVC are "
        "both grade F, or which has no measured value at all, is not interpreted.")
#: Grades that need no quality flag.
GOOD_GRADES = frozenset("ABC")
#: Grades reported with a quality flag.
LOW_GRADES = frozenset("DEU")


def _has_measured(values: dict[str, Any]) -> bool:
    return any(item.get("measured") is not None
               for block in ("pre", "post", "volumes", "diffusion", "resistance")
               for item in (values.get(block) or {}).values())


def validity(case: Case, values: dict[str, Any], quality: dict[str, Any]) -> Finding:
    """Judge whether the session supports interpretation.

    Parameters
    ----------
    case : Case
        The case (its warnings become caveats).
    values : dict
        The values block.
    quality : dict
        The design.md §5 quality block (``FEV1_grade``, ``FVC_grade``, ``DLCO_grade``, ``notes``).

    Returns
    -------
    Finding
        ``status`` is ``"stop"`` (chain stops), ``"low_quality"``, ``"acceptable"`` or
        ``"not_graded"``; ``data["stop"]`` tells later steps whether to proceed.
    """
    fev1_g, fvc_g = quality.get("FEV1_grade"), quality.get("FVC_grade")
    dlco_g = quality.get("DLCO_grade")
    post = ((quality.get("spirometry") or {}).get("post") or {}) if quality.get("spirometry") else {}
    post_grades = [g for g in (post.get("FEV1_grade"), post.get("FVC_grade")) if g]
    graded = [g for g in (fev1_g, fvc_g, dlco_g) if g]
    low = sorted({g for g in graded if g in LOW_GRADES})
    caveats = list(case.warnings) + [str(n) for n in quality.get("notes") or []]
    data: dict[str, Any] = {
        "stop": False, "fev1_grade": fev1_g, "fvc_grade": fvc_g, "dlco_grade": dlco_g,
        "graded": bool(graded), "low_quality": bool(low) or "F" in graded,
        "fev1_usable": None if fev1_g is None else fev1_g != "F",
        "fvc_usable": None if fvc_g is None else fvc_g != "F",
        "diffusion_usable": None if dlco_g is None else dlco_g != "F",
    }
    extrapolated = sorted(f"{blk}.{p}" for blk in ("pre", "post", "volumes", "diffusion")
                          for p, item in (values.get(blk) or {}).items() if item.get("extrapolated"))
    evidence = {"FEV1_grade": fev1_g, "FVC_grade": fvc_g, "DLCO_grade": dlco_g,
                "post_grades": post or None, "has_measured_values": _has_measured(values),
                "extrapolated": extrapolated}
    data["post_low_quality"] = any(g in LOW_GRADES or g == "F" for g in post_grades)
    data["extrapolated"] = extrapolated
    thresholds = {"interpret": "A, B, C", "report_with_flag": "D, E, U", "not_usable": "F"}
    if not evidence["has_measured_values"]:
        data["stop"] = True
        return Finding("validity", TITLE, "No usable measured value was supplied; the "
                       "interpretation stops here.", "stop", evidence, thresholds, RULE, SOURCE,
                       tuple(caveats), data)
    if fev1_g == "F" and fvc_g == "F":
        data["stop"] = True
        return Finding("validity", TITLE, "Spirometry is unusable (FEV1 and FVC both grade F): "
                       "the session cannot be interpreted; repeat the test.", "stop", evidence,
                       thresholds, RULE, SOURCE, tuple(caveats), data)
    parts: list[str] = []
    if fev1_g or fvc_g:
        parts.append(f"Spirometry quality: FEV1 grade {fev1_g or '–'}, FVC grade {fvc_g or '–'}.")
    else:
        parts.append("Spirometry quality not assessable (reported values only, no trials).")
    if post_grades:
        parts.append(f"Post-bronchodilator grades: FEV1 {post.get('FEV1_grade') or '–'}, "
                     f"FVC {post.get('FVC_grade') or '–'}"
                     + (" (low: read the bronchodilator response with caution)."
                        if data["post_low_quality"] else "."))
    if dlco_g:
        parts.append(f"Gas transfer quality grade {dlco_g}.")
    for name, grade in (("FEV1", fev1_g), ("FVC", fvc_g)):
        if grade == "F":
            parts.append(f"{name} is not usable (grade F) and is not interpreted.")
    if dlco_g == "F":
        parts.append("Gas transfer is not usable (grade F) and is not interpreted.")
    if extrapolated:
        parts.append("Outside the published range of the reference equations (extrapolated): "
                     + ", ".join(extrapolated) + "; their z-scores are less reliable.")
    unusable = [g for g in (fev1_g, fvc_g, dlco_g) if g == "F"]
    if low:
        parts.append(f"Low-quality data (grade {', '.join(low)}): conclusions below are "
                     "reported but should be read with caution.")
    if low or unusable:
        status = "low_quality"
    elif graded:
        status = "acceptable"
    else:
        status = "not_graded"
    return Finding("validity", TITLE, " ".join(parts), status, evidence, thresholds, RULE,
                   SOURCE, tuple(caveats), data)
