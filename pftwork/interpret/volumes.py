"""Step 3 — lung volumes: restriction, mixed defect, hyperinflation, air trapping, PRISm."""

from __future__ import annotations

from typing import Any

from pftwork.case_model import Case
from pftwork.interpret.finding import Z_LLN, Z_ULN, Finding, level, not_assessed, severity, value

__all__ = ["COMPLEX_LIMIT", "complex_class", "volumes"]

TITLE = "Lung volumes"
SOURCE = ("INTERP-2022 Table 8 (restriction: TLC < 5th percentile; mixed: FEV1/FVC and TLC < "
          "5th percentile; a low FVC does not prove restriction); hyperinflation TLC > ULN, air "
          "trapping RV/TLC > ULN, non-specific pattern and PRISm (INTERP-2022, wording from "
          "memory); complex restriction: Clay et al., Chest 2017;152:1258 (TLC%pred - FVC%pred > 10)")
RULE = ("Restriction needs a measured TLC below the LLN; with airflow obstruction as well the "
        "defect is mixed. TLC above the ULN is hyperinflation and RV/TLC above the ULN is air "
        "trapping (a high RV supports it); these are reported separately. FEV1 or FVC below the "
        "LLN with a preserved FEV1/FVC is a non-specific pattern when TLC is normal, and PRISm "
        "when TLC was not measured. In restriction, TLC%pred - FVC%pred > 10 marks complex "
        "restriction, classes 1-4 for > 10, > 15, > 20, > 25 points.")
#: Clay et al. 2017: complex restriction when TLC%pred − FVC%pred exceeds this (strict).
COMPLEX_LIMIT = 10.0
_KEYS = ("restriction", "mixed", "hyperinflation", "air_trapping", "rv_high", "nonspecific",
         "prism", "complex_restriction", "complex_class", "restriction_severity", "tlc_z",
         "rv_tlc_z", "rv_z", "trapping_uncertain")


def complex_class(tlc_pct: float | None, fvc_pct: float | None) -> int | None:
    """Complex-restriction class (Clay et al., Chest 2017): 0 = simple, 1-4 = complex.

    Class 1 for a difference in (10, 15], 2 in (15, 20], 3 in (20, 25], 4 above 25
    (standards.md §3.3, VERIFIED [S22]); ``None`` when either % predicted is missing.
    """
    if tlc_pct is None or fvc_pct is None:
        return None
    diff = round(tlc_pct - fvc_pct, 6)  # guard against 10.000000001 from float arithmetic
    if diff <= COMPLEX_LIMIT:
        return 0
    if diff <= 15.0:
        return 1
    if diff <= 20.0:
        return 2
    if diff <= 25.0:
        return 3
    return 4


def volumes(case: Case, values: dict[str, Any], quality: dict[str, Any], validity: Finding,
            airflow: Finding) -> Finding:
    """Interpret static lung volumes against the spirometric pattern.

    Parameters
    ----------
    case, values, quality
        As for every step.
    validity, airflow : Finding
        Steps 1 and 2 (stop flag, obstruction and low FEV1/FVC flags).
    """
    if validity.data.get("stop"):
        return not_assessed("volumes", TITLE, "Not interpreted: the session failed the validity "
                            "step.", _KEYS, status="stopped", rule=RULE, source=SOURCE)
    tlc_z, rvtlc_z, rv_z = (value(values, "volumes", p) for p in ("TLC", "RV/TLC", "RV"))
    obstruction = airflow.data.get("obstruction")
    spiro_low = _any_true(airflow.data.get("fev1_low"), airflow.data.get("fvc_low"))
    preserved = None if obstruction is None else not obstruction
    data: dict[str, Any] = dict.fromkeys(_KEYS)
    data.update(tlc_z=tlc_z, rv_tlc_z=rvtlc_z, rv_z=rv_z)
    caveats: list[str] = []
    parts: list[str] = []
    if tlc_z is None:
        data["prism"] = None if preserved is None or spiro_low is None else preserved and spiro_low
        if data["prism"]:
            parts.append("Preserved FEV1/FVC with a low FEV1 or FVC and no TLC measured (PRISm): "
                         "restriction is possible but unproven; measure lung volumes.")
            status = "PRISm"
        elif preserved is None and spiro_low is None:
            return not_assessed("volumes", TITLE, "Lung volumes not assessed: no TLC and no "
                                "spirometric pattern to judge.", _KEYS, rule=RULE, source=SOURCE)
        else:
            parts.append("TLC not measured: restriction and hyperinflation cannot be judged.")
            status = "not_measured"
        if value(values, "diffusion", "VA", "measured") is not None:
            caveats.append("VA from the single-breath test is not a substitute for TLC "
                           "(INTERP-2022), least of all with a low FEV1/FVC.")
    else:
        status = _classify_tlc(tlc_z, obstruction, preserved, spiro_low, values, data, parts)
    _trapping(rvtlc_z, rv_z, data, parts, level(tlc_z))
    if status == "normal" and data["air_trapping"]:
        status = "air_trapping"
    evidence = {p: value(values, "volumes", p, "measured") for p in ("TLC", "RV", "RV/TLC", "FRC")}
    evidence.update({"TLC_z": tlc_z, "RV/TLC_z": rvtlc_z, "RV_z": rv_z,
                     "TLC_percent_predicted": value(values, "volumes", "TLC", "percent_predicted"),
                     "FVC_percent_predicted": value(values, "pre", "FVC", "percent_predicted"),
                     "obstruction": obstruction, "spirometry_low": spiro_low})
    thresholds = {"TLC_z_lln": Z_LLN, "TLC_z_uln": Z_ULN, "RV/TLC_z_uln": Z_ULN,
                  "RV_z_uln": Z_ULN, "complex_restriction_difference": COMPLEX_LIMIT,
                  "complex_classes": {"1": "(10, 15]", "2": "(15, 20]", "3": "(20, 25]", "4": "> 25"}}
    return Finding("volumes", TITLE, " ".join(parts), status, evidence, thresholds, RULE, SOURCE,
                   tuple(caveats), data)


def _any_true(*flags: bool | None) -> bool | None:
    if any(f is True for f in flags):
        return True
    if any(f is None for f in flags):
        return None
    return False


def _classify_tlc(tlc_z: float, obstruction: bool | None, preserved: bool | None,
                  spiro_low: bool | None, values: dict[str, Any], data: dict[str, Any],
                  parts: list[str]) -> str:
    tlc_level = level(tlc_z)
    data["restriction"] = tlc_level == "low"
    data["hyperinflation"] = tlc_level == "high"
    data["prism"] = False
    data["mixed"] = None if obstruction is None else bool(data["restriction"] and obstruction)
    data["nonspecific"] = (None if preserved is None or spiro_low is None
                           else preserved and spiro_low and tlc_level == "normal")
    tlc = value(values, "volumes", "TLC", "measured")
    if data["restriction"]:
        data["restriction_severity"] = severity(tlc_z)
        kind = "Mixed obstructive and restrictive defect" if data["mixed"] else "Restriction"
        parts.append(f"{kind}: TLC {tlc:.2f} L is below the LLN (z {tlc_z:.2f}; "
                     f"{data['restriction_severity']} on TLC z).")
        if data["mixed"]:
            parts.append("Simple/complex restriction (Clay et al. 2017) is not graded in a mixed "
                         "defect: the obstruction itself lowers FVC relative to TLC.")
        else:
            _complex(values, data, parts)
        status = "mixed" if data["mixed"] else "restriction"
    elif data["nonspecific"]:
        parts.append(f"Non-specific pattern: FEV1 or FVC below the LLN with a preserved FEV1/FVC "
                     f"and a normal TLC ({tlc:.2f} L, z {tlc_z:.2f}).")
        status = "non-specific"
    else:
        parts.append(f"TLC {tlc:.2f} L (z {tlc_z:.2f}) is not below the LLN: no restriction.")
        status = "normal"
    if data["hyperinflation"]:
        parts.append(f"Hyperinflation: TLC above the ULN (z {tlc_z:.2f}).")
        status = "hyperinflation" if status == "normal" else status
    return status


def _complex(values: dict[str, Any], data: dict[str, Any], parts: list[str]) -> None:
    tlc_pct = value(values, "volumes", "TLC", "percent_predicted")
    fvc_pct = value(values, "pre", "FVC", "percent_predicted")
    cls = complex_class(tlc_pct, fvc_pct)
    data["complex_class"] = cls
    data["complex_restriction"] = None if cls is None else cls > 0
    if cls:
        parts.append(f"Complex restriction class {cls}: TLC {tlc_pct:.0f} % predicted minus FVC "
                     f"{fvc_pct:.0f} % predicted = {tlc_pct - fvc_pct:.1f} points (> 10); "
                     "consider neuromuscular, chest-wall or small-airway causes.")
    elif cls == 0:
        parts.append("Simple restriction (TLC%pred - FVC%pred <= 10).")


def _trapping(rvtlc_z: float | None, rv_z: float | None, data: dict[str, Any],
              parts: list[str], tlc_level: str | None = None) -> None:
    data["rv_high"] = None if rv_z is None else rv_z > Z_ULN
    if rvtlc_z is None:
        if data["rv_high"]:
            parts.append(f"RV above the ULN (z {rv_z:.2f}); RV/TLC not available.")
        return
    data["air_trapping"] = rvtlc_z > Z_ULN
    # A ratio raised by a low TLC while RV itself is not raised (e.g. expiratory muscle weakness
    # in restriction) is not good evidence of air trapping (common practice).
    data["trapping_uncertain"] = bool(data["air_trapping"] and tlc_level == "low"
                                      and data["rv_high"] is False)
    if data["trapping_uncertain"]:
        parts.append(f"RV/TLC above the ULN (z {rvtlc_z:.2f}) with a low TLC and RV not raised "
                     f"(z {rv_z:.2f}): the high ratio comes from the reduced TLC with a preserved RV "
                     "(e.g. expiratory muscle weakness) rather than from established air "
                     "trapping.")
    elif data["air_trapping"]:
        support = " with RV also above the ULN" if data["rv_high"] else ""
        parts.append(f"Air trapping: RV/TLC above the ULN (z {rvtlc_z:.2f}){support}.")
    elif data["rv_high"]:
        parts.append(f"RV above the ULN (z {rv_z:.2f}) with RV/TLC within limits.")
