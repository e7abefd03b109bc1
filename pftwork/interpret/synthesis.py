"""Step 8 — synthesis: the overall pattern, its severity and a composed interpretation statement."""

from __future__ import annotations

from typing import Any

from pftwork.case_model import Case
from pftwork.interpret.cautions import CAUTIONS
from pftwork.interpret.finding import Finding, severity

__all__ = ["PATTERNS", "SUMMARY_KEYS", "pattern_of", "synthesis"]

TITLE = "Overall interpretation"
SOURCE = ("INTERP-2022 Table 8 (obstruction, restriction, mixed; non-specific pattern, PRISm) "
          "and severity by z-score; the statement itself is composed by pftwork")
RULE = ("Mixed when obstruction and a TLC below the LLN coexist; otherwise obstruction, or "
        "restriction (TLC below the LLN); with a preserved ratio and a low FEV1 or FVC, "
        "non-specific when TLC is normal and PRISm when TLC was not measured; otherwise normal "
        "(no pattern without FEV1/FVC unless TLC shows restriction). "
        "Severity is taken from the z-score of the variable that defines the pattern: FEV1 for "
        "obstruction and mixed, TLC for restriction, the lower of FEV1 and FVC otherwise.")
#: The values ``pattern`` may take (design.md §5).
PATTERNS = ("normal", "obstruction", "restriction", "mixed", "non-specific", "PRISm")
#: Summary keys fixed by design.md §5 (extras follow them).
SUMMARY_KEYS = ("pattern", "obstruction", "obstruction_severity", "restriction",
                "hyperinflation", "air_trapping", "dlco", "kco", "bdr", "bdr_2005", "borderline")
_PHRASE = {"normal": "Spirometry{vol} within normal limits.",
           "obstruction": "{sev}airflow obstruction.",
           "restriction": "{sev}restrictive ventilatory defect.",
           "mixed": "{sev}mixed obstructive and restrictive defect.",
           "non-specific": "{sev}non-specific pattern: reduced FEV1 and/or FVC with a preserved "
                           "FEV1/FVC and a normal TLC.",
           "PRISm": "{sev}preserved-ratio impaired spirometry (PRISm); lung volumes are needed to "
                    "look for restriction."}


def pattern_of(obstruction: bool | None, restriction: bool | None, nonspecific: bool | None,
               prism: bool | None) -> str | None:
    """Overall ventilatory pattern, or ``None`` when neither spirometry nor TLC was assessable.

    >>> pattern_of(True, True, None, None), pattern_of(False, None, None, True)
    ('mixed', 'PRISm')
    """
    if obstruction and restriction:
        return "mixed"
    if obstruction:
        return "obstruction"
    if restriction:
        return "restriction"
    if nonspecific:
        return "non-specific"
    if prism:
        return "PRISm"
    if obstruction is None:  # without FEV1/FVC a normal TLC does not make the pattern normal
        return None
    return "normal"


def _severity(pattern: str | None, air: dict[str, Any], vol: dict[str, Any]) -> str | None:
    if pattern in ("obstruction", "mixed"):
        return air.get("severity")
    if pattern == "restriction":
        return vol.get("restriction_severity")
    if pattern in ("non-specific", "PRISm"):
        zs = [z for z in (air.get("fev1_z"), air.get("fvc_z")) if z is not None]
        return severity(min(zs)) if zs else None
    return None


def synthesis(case: Case, values: dict[str, Any], quality: dict[str, Any],
              findings: dict[str, Finding]) -> Finding:
    """Combine the earlier steps into the summary and the interpretation statement.

    Parameters
    ----------
    case, values, quality
        As for every step.
    findings : dict
        Step id -> Finding for the seven earlier steps.

    Returns
    -------
    Finding
        ``data`` holds the design.md §5 summary (``borderline`` left empty for the caller).
    """
    val, air, vol = (findings[k].data for k in ("validity", "airflow", "volumes"))
    gas, bd = findings["gas_transfer"].data, findings["bronchodilator"].data
    res, chg = findings["resistance"].data, findings["change"].data
    stop = bool(val.get("stop"))
    pattern = None if stop else pattern_of(air.get("obstruction"), vol.get("restriction"),
                                           vol.get("nonspecific"), vol.get("prism"))
    sev = _severity(pattern, air, vol)
    data: dict[str, Any] = {
        "pattern": pattern, "obstruction": air.get("obstruction"),
        "obstruction_severity": air.get("severity"), "restriction": vol.get("restriction"),
        "hyperinflation": vol.get("hyperinflation"), "air_trapping": vol.get("air_trapping"),
        "dlco": gas.get("dlco"), "kco": gas.get("kco"), "bdr": bd.get("bdr"),
        "bdr_2005": bd.get("bdr_2005"), "borderline": [],
        "severity": sev, "mixed": vol.get("mixed"), "nonspecific": vol.get("nonspecific"),
        "prism": vol.get("prism"), "complex_restriction": vol.get("complex_restriction"),
        "complex_class": vol.get("complex_class"), "va": gas.get("va"),
        "dlco_severity": gas.get("dlco_severity"), "gold_grade": air.get("gold_grade"),
        "upper_airway_flag": air.get("upper_airway_flag"),
        "resistance_elevated": res.get("elevated"), "change": chg.get("direction"),
        "low_quality": val.get("low_quality"), "stopped": stop,
    }
    text = _statement(data, findings) if not stop else findings["validity"].conclusion
    evidence = {k: findings[k].status for k in findings}
    return Finding("synthesis", TITLE, text, pattern or ("stop" if stop else "not_assessed"),
                   evidence, {}, RULE, SOURCE, CAUTIONS, data)


def _statement(d: dict[str, Any], findings: dict[str, Finding]) -> str:
    parts: list[str] = []
    pattern = d["pattern"]
    if pattern is None and d["restriction"] is False:
        parts.append("No restriction (TLC not below the LLN); no ventilatory pattern can be "
                     "given without FEV1/FVC.")
    elif pattern is None:
        parts.append("No ventilatory pattern can be given (neither FEV1/FVC nor TLC available).")
    else:
        vol = (" and lung volumes" if d["restriction"] is False and pattern == "normal"
               and not (d["hyperinflation"] or d["air_trapping"]) else "")
        sev = f"{d['severity'].capitalize()} " if d["severity"] else ""
        phrase = _PHRASE[pattern].format(sev=sev, vol=vol)
        air = findings["airflow"].data
        if pattern == "normal" and (air.get("fev1_low") or air.get("fvc_low")):
            # e.g. TLC above the ULN: no named pattern, but spirometry is not normal
            phrase = ("No obstruction or restriction, but FEV1 and/or FVC below the LLN with a "
                      "preserved FEV1/FVC and a TLC that is not reduced.")
        parts.append(phrase[0].upper() + phrase[1:])
    if d["complex_restriction"]:
        parts.append(f"Complex restriction (class {d['complex_class']}).")
    uncertain = bool(findings["volumes"].data.get("trapping_uncertain"))
    extra = [w for w, flag in (("hyperinflation", d["hyperinflation"]),
                               ("air trapping", d["air_trapping"] and not uncertain)) if flag]
    if extra:
        parts.append(" and ".join(extra).capitalize() + ".")
    if d["air_trapping"] and uncertain:
        parts.append("Raised RV/TLC with a low TLC and RV not raised (air trapping not "
                     "established).")
    if d["dlco"]:
        sev = f" ({d['dlco_severity']})" if d["dlco_severity"] else ""
        parts.append(f"Gas transfer {d['dlco']}{sev}" + (f", KCO {d['kco']}" if d["kco"] else "")
                     + ".")
    if d["bdr"] is not None or d["bdr_2005"] is not None:
        bdr = {True: "significant", False: "no significant", None: "unassessable"}[d["bdr"]]
        parts.append(f"{bdr.capitalize()} bronchodilator response (ERS/ATS 2022).")
    if d["upper_airway_flag"]:
        parts.append("Screening indices suggest considering upper-airway obstruction.")
    if d["resistance_elevated"]:
        parts.append("Airway resistance above the laboratory's limit.")
    if d["change"] in ("decline", "increase"):
        parts.append(f"Significant {d['change']} since the previous test.")
    if d["gold_grade"]:
        parts.append(f"GOLD {d['gold_grade']} (secondary label).")
    if d["low_quality"]:
        parts.append("Interpret with caution: test quality is low.")
    return " ".join(parts)
