"""Step 6 — airway resistance (sRaw, Raw), described against the lab's own limits when given."""

from __future__ import annotations

from typing import Any

from pftwork.case_model import Case
from pftwork.interpret.finding import Finding, not_assessed

__all__ = ["resistance"]

TITLE = "Airway resistance"
SOURCE = ("INTERP-2022 (airway resistance may support the assessment of obstruction; no GLI "
          "reference equation exists for sRaw or Raw)")
RULE = ("sRaw and Raw are compared with the laboratory's own upper limit when the case "
        "provides one (labelled as the lab's); otherwise they are reported without a normal "
        "range. Resistance is described, never used on its own to call a pattern.")
_KEYS = ("sraw", "raw", "elevated", "reference")


def resistance(case: Case, values: dict[str, Any], quality: dict[str, Any],
               validity: Finding) -> Finding:
    """Describe plethysmographic airway resistance.

    Parameters
    ----------
    case, values, quality
        As for every step (``values["resistance"]`` holds sRaw/Raw with any ``lab`` limits).
    validity : Finding
        Step 1.
    """
    if validity.data.get("stop"):
        return not_assessed("resistance", TITLE, "Not interpreted: the session failed the "
                            "validity step.", _KEYS, status="stopped", rule=RULE, source=SOURCE)
    block = values.get("resistance") or {}
    if not block:
        return not_assessed("resistance", TITLE, "Airway resistance not measured.", _KEYS,
                            rule=RULE, source=SOURCE)
    data: dict[str, Any] = dict.fromkeys(_KEYS)
    parts: list[str] = []
    elevated: list[bool] = []
    evidence: dict[str, Any] = {}
    for name in ("sRaw", "Raw"):
        item = block.get(name)
        if item is None:
            continue
        m, unit = item["measured"], item.get("unit")
        data[name.lower()] = m
        lab = item.get("lab") or {}
        uln = lab.get("uln")
        evidence[name] = {"measured": m, "unit": unit, "lab": lab or None}
        if uln is not None:
            high = m > uln
            elevated.append(high)
            parts.append(f"{name} {m:.2f} {unit} is {'above' if high else 'within'} the "
                         f"laboratory's upper limit ({uln:.2f}).")
        else:
            parts.append(f"{name} {m:.2f} {unit}: no reference range available, reported "
                         "without a judgement of normality.")
    data["elevated"] = any(elevated) if elevated else None
    data["reference"] = "lab" if elevated else None
    status = ("elevated" if data["elevated"] else "within_lab_limits") if elevated \
        else "no_reference"
    caveats = ("Limits are the laboratory's own, not pftwork's." if elevated else
               "No normal range: the value is descriptive only.",)
    return Finding("resistance", TITLE, " ".join(parts), status, evidence,
                   {"uln": "laboratory's own (case.lab_reference)"}, RULE, SOURCE, caveats, data)
