"""Step 5 — bronchodilator response: INTERP-2022 rule, with the ATS/ERS 2005 rule beside it."""

from __future__ import annotations

from typing import Any

from pftwork.case_model import Case
from pftwork.interpret.finding import Z_LLN, Finding, not_assessed, value

__all__ = ["PRECISION", "bdr_2005", "bdr_2022", "bronchodilator"]

TITLE = "Bronchodilator response"
SOURCE = ("INTERP-2022 (ERS/ATS 2022): change > 10 % of the predicted value in FEV1 or FVC; "
          "INTERP-2005 Table 9 (ATS/ERS 2005): >= 12 % and >= 200 mL from baseline in FEV1 or FVC")
RULE = ("For FEV1 and FVC separately, the change (post - pre) is expressed as % of the "
        "predicted value; a response is significant when it exceeds 10 % (strictly) in either. "
        "The 2005 rule (>= 12 % of the pre value and >= 200 mL, in either) is shown beside it "
        "and never merged. Percentages are rounded to 4 decimal places and volumes to 1 mL "
        "before the comparison, so float noise (9.99999 for 10) cannot decide.")
#: Decimal places of a percentage kept before the threshold comparison (our own choice).
PRECISION = 4
_KEYS = ("bdr", "bdr_2005", "discordant", "fev1_change_pct_pred", "fvc_change_pct_pred",
         "fev1_change_pct_baseline", "fvc_change_pct_baseline", "fev1_change_ml",
         "fvc_change_ml", "ratio_normalised")


def bdr_2022(pre: float, post: float, predicted: float) -> tuple[float, bool]:
    """Change as % of predicted and whether it exceeds 10 % (INTERP-2022).

    >>> bdr_2022(2.00, 2.32, 3.20)
    (10.0, False)
    """
    pct = round((post - pre) * 100.0 / predicted, PRECISION)
    return pct, pct > 10.0


def bdr_2005(pre: float, post: float) -> tuple[float, float, bool]:
    """Change as % of baseline, in mL, and whether both >= 12 % and >= 200 mL (INTERP-2005).

    >>> bdr_2005(1.20, 1.45)
    (20.8333, 250.0, True)
    """
    pct = round((post - pre) * 100.0 / pre, PRECISION)
    ml = float(round((post - pre) * 1000.0))
    return pct, ml, pct >= 12.0 and ml >= 200.0


def bronchodilator(case: Case, values: dict[str, Any], quality: dict[str, Any],
                   validity: Finding) -> Finding:
    """Assess the bronchodilator response of FEV1 and FVC.

    Parameters
    ----------
    case : Case
        The case (agent, dose and timing are quoted when present).
    values : dict
        Values block with ``pre`` and ``post`` FEV1/FVC (predicted from ``pre``).
    quality : dict
        Quality block (unused beyond validity).
    validity : Finding
        Step 1.
    """
    if validity.data.get("stop"):
        return not_assessed("bronchodilator", TITLE, "Not interpreted: the session failed the "
                            "validity step.", _KEYS, status="stopped", rule=RULE, source=SOURCE)
    data: dict[str, Any] = dict.fromkeys(_KEYS)
    evidence: dict[str, Any] = {}
    flags22: list[bool] = []
    flags05: list[bool] = []
    parts: list[str] = []
    grades = (quality.get("spirometry") or {}) if quality else {}
    unusable = [p for p in ("FEV1", "FVC")
                if any(((grades.get(phase) or {}).get(f"{p}_grade")) == "F"
                       for phase in ("pre", "post"))]
    for p in ("FEV1", "FVC"):
        pre, post = value(values, "pre", p, "measured"), value(values, "post", p, "measured")
        pred = value(values, "pre", p, "predicted")
        if pre is None or post is None or p in unusable:
            continue
        key = p.lower()
        pct_b, ml, pos05 = bdr_2005(pre, post)
        data[f"{key}_change_pct_baseline"], data[f"{key}_change_ml"] = pct_b, ml
        flags05.append(pos05)
        evidence[p] = {"pre": pre, "post": post, "predicted": pred}
        text = f"{p} {pre:.2f} -> {post:.2f} L ({ml:+.0f} mL, {pct_b:+.1f} % of baseline"
        if pred:
            pct_p, pos22 = bdr_2022(pre, post, pred)
            data[f"{key}_change_pct_pred"] = pct_p
            flags22.append(pos22)
            text += f", {pct_p:+.1f} % of predicted"
        parts.append(text + ").")
    if not flags05:
        why = (f"{' and '.join(unusable)} unusable (grade F) before or after bronchodilator"
               if unusable else "pre- and post-bronchodilator FEV1 or FVC are not both available")
        return not_assessed("bronchodilator", TITLE, f"Bronchodilator response not assessed: "
                            f"{why}.", _KEYS, rule=RULE, source=SOURCE)
    # A response in either parameter is a response; "no response" needs both FEV1 and FVC judged.
    data["bdr"] = _either(flags22)
    data["bdr_2005"] = _either(flags05)
    data["discordant"] = None if data["bdr"] is None else data["bdr"] != data["bdr_2005"]
    pre_rz, post_rz = value(values, "pre", "FEV1/FVC"), value(values, "post", "FEV1/FVC")
    if pre_rz is not None and post_rz is not None and pre_rz < Z_LLN:
        data["ratio_normalised"] = post_rz >= Z_LLN
    parts.insert(0, _headline(data, judged_2022=len(flags22)))
    if data["discordant"]:
        parts.append("The 2022 and 2005 rules disagree here: the 2022 rule (% of predicted) is "
                     "the primary result; the 2005 rule (% of baseline and mL) is shown for "
                     "comparison.")
    if data["ratio_normalised"]:
        parts.append("FEV1/FVC returns to within normal limits after bronchodilator; this "
                     "reversibility of the ratio is reported separately from the response.")
    caveats = _caveats(case)
    thresholds = {"interp_2022_pct_predicted_gt": 10.0, "interp_2005_pct_baseline_ge": 12.0,
                  "interp_2005_ml_ge": 200.0, "precision_decimals": PRECISION}
    status = "response" if data["bdr"] else ("no_response" if data["bdr"] is False
                                             else "not_assessed")
    return Finding("bronchodilator", TITLE, " ".join(parts), status, evidence, thresholds, RULE,
                   SOURCE, tuple(caveats), data)


def _either(flags: list[bool]) -> bool | None:
    """True if any parameter responded; False only when FEV1 and FVC were both judged."""
    if any(flags):
        return True
    return False if len(flags) == 2 else None


def _headline(data: dict[str, Any], judged_2022: int) -> str:
    if data["bdr"] is None and judged_2022 == 0:
        head = "Significant response not assessable under INTERP-2022 (no predicted value)"
    elif data["bdr"] is None:
        head = ("No significant response in the one parameter that could be judged; a response "
                "cannot be excluded without both FEV1 and FVC (INTERP-2022)")
    elif data["bdr"]:
        head = "Significant bronchodilator response (INTERP-2022, > 10 % of predicted)"
    else:
        head = "No significant bronchodilator response (INTERP-2022, > 10 % of predicted)"
    rule05 = {True: "positive", False: "negative", None: "not decidable"}[data["bdr_2005"]]
    return head + f"; 2005 rule: {rule05}."


def _caveats(case: Case) -> list[str]:
    bd = case.spirometry.bronchodilator if case.spirometry else None
    out = ["A negative response does not exclude asthma or benefit from bronchodilator treatment."]
    if bd is None or bd.agent is None:
        out.append("Bronchodilator agent, dose and timing not recorded.")
    else:
        out.append(f"Bronchodilator: {bd.agent} {bd.dose or ''}, "
                   f"{bd.minutes_after if bd.minutes_after is not None else '?'} min.".replace("  ", " "))
    return out
