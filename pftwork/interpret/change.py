"""Step 7 — change over time against earlier tests of the same subject.

Published rules used: INTERP-2005 Table 12 (significant change between tests), INTERP-2022
conditional change score (CCS, children) and FEV1Q (adults). The FEV1 slope with its 95 %
confidence interval is ordinary least squares (common practice, not an ERS/ATS rule).
"""

from __future__ import annotations

import math
from typing import Any

from scipy import stats

from pftwork.case_model import Case, HistoryEntry
from pftwork.interpret.finding import Finding, not_assessed, value
from pftwork.interpret.gas_transfer import SI_TO_TRADITIONAL
from pftwork.interpret.values import DEFAULT_EQUATIONS, entry, spirometry_measured

__all__ = ["CHILD_AGE_LIMIT", "FEV1Q_DIVISOR", "THRESHOLDS_2005", "ccs", "change", "fev1q",
           "fev1_slope", "history_values"]

TITLE = "Change over time"
SOURCE = ("INTERP-2005 (Pellegrino et al., ERJ 2005) Table 12: significant year-to-year change "
          "FEV1 >= 15 %, FVC >= 15 %, DLCO > 10 %, week-to-week (healthy) FEV1 >= 12 %, FVC >= 11 %, "
          "DLCO > 6 mL/min/mmHg; INTERP-2022: conditional change score (children) and FEV1Q "
          "(adults); FEV1 slope by least squares compared with the decline of the predicted value "
          "(our own) and with 40 mL/year (common practice, from memory)")
RULE = ("The current test is compared with the most recent earlier one: absolute change, "
        "% change from the earlier value, change in z and in % predicted. The INTERP-2005 "
        "year-to-year limits apply when the interval is at least half a year (our own cut), the "
        "week-to-week limits otherwise. Children (under 18 at the earlier test, our own cut) get "
        "the FEV1 conditional change score (significant outside +/-1.96); adults get FEV1Q. "
        "With three or more tests, the FEV1 slope is given in mL/year with its 95 % CI and set "
        "against the slope of the predicted FEV1 over the same ages (the decline expected from "
        "ageing alone): a CI entirely below it is a decline beyond ageing; a loss faster than "
        "40 mL/year is called rapid.")
#: INTERP-2005 Table 12 (standards.md §3.6, VERIFIED [S16b]); DLCO "units" are mL/min/mmHg.
THRESHOLDS_2005 = {"year": {"FEV1": ("pct_ge", 15.0), "FVC": ("pct_ge", 15.0),
                            "DLCO": ("pct_gt", 10.0)},
                   "week": {"FEV1": ("pct_ge", 12.0), "FVC": ("pct_ge", 11.0),
                            "DLCO": ("units_gt", 6.0)}}
#: FEV1Q divisor (L): sex-specific 1st percentile of FEV1 in adults with lung disease (INTERP-2022).
FEV1Q_DIVISOR = {"male": 0.5, "female": 0.4}
#: Below this age at the earlier test, CCS is used (our own cut: GLI paediatric use).
CHILD_AGE_LIMIT = 18.0
_KEYS = ("compared_with", "interval_years", "significant", "direction", "ccs", "fev1q",
         "fev1q_prior", "slope_ml_per_year", "slope_ci95", "n_tests", "changes",
         "expected_slope_ml_per_year", "excess_decline", "rapid_decline")
#: FEV1 loss per year commonly called "rapid" in adult cohort studies (common practice, value
#: from memory, e.g. COPD cohorts that split "rapid decliners" at 40 mL/year).
RAPID_DECLINE_ML_PER_YEAR = 40.0


def ccs(z1: float, z2: float, years: float, age1: float) -> tuple[float, float]:
    """Conditional change score of FEV1 z and its correlation ``r`` (INTERP-2022).

    ``r = 0.642 − 0.04·years + 0.020·age1``; ``CCS = (z2 − r·z1) / sqrt(1 − r²)``.

    >>> tuple(round(v, 3) for v in ccs(-1.0, -2.0, 1.0, 10.0))
    (-2.006, 0.802)
    """
    r = 0.642 - 0.04 * years + 0.020 * age1
    return (z2 - r * z1) / math.sqrt(1.0 - r * r), r


def fev1q(fev1_l: float, sex: str) -> float:
    """FEV1Q = FEV1 / (0.5 L male, 0.4 L female) (INTERP-2022).

    >>> fev1q(0.9, "female")
    2.25
    """
    return fev1_l / FEV1Q_DIVISOR[sex]


def fev1_slope(ages: list[float], fev1_l: list[float]) -> tuple[float, tuple[float, float]]:
    """Least-squares FEV1 slope (mL/year) and its 95 % confidence interval (t distribution)."""
    fit = stats.linregress(ages, [v * 1000.0 for v in fev1_l])
    half = stats.t.ppf(0.975, len(ages) - 2) * fit.stderr
    return float(fit.slope), (float(fit.slope - half), float(fit.slope + half))


def _prior_age(case: Case, h: HistoryEntry) -> float | None:
    if h.age_years is not None:
        return h.age_years
    if h.date is not None and case.test.date is not None:
        return case.subject.age_years - (case.test.date - h.date).days / 365.25
    return None


def history_values(case: Case, h: HistoryEntry, equations: dict[str, str], sex: str
                   ) -> dict[str, dict[str, Any]]:
    """Values entries (FEV1, FVC pre; DLCO in the case's unit) of one earlier test.

    The earlier test's own age and height are used with the current equations; each entry
    also carries ``age_years``. Empty when the age of the earlier test is unknown.
    """
    age = _prior_age(case, h)
    height = h.height_cm or case.subject.height_cm
    if age is None:
        return {}
    out: dict[str, dict[str, Any]] = {}
    spiro = spirometry_measured(h.spirometry.pre, None) if h.spirometry and h.spirometry.pre else {}
    ancestry = case.subject.ancestry or ("other" if equations["spirometry"] == "gli-2012" else None)
    for p in ("FEV1", "FVC"):
        if spiro.get(p) is not None:
            out[p] = entry(equations["spirometry"], p, sex, age, height, spiro[p],
                           ancestry=ancestry)
    d = h.diffusion
    dl = (d.reported.get("DLCO") if d and d.reported else None)
    if dl is None and d and d.trials:
        vals = [t.DLCO for t in d.trials if t.DLCO is not None]
        dl = sum(vals) / len(vals) if vals else None
    if dl is not None:
        unit = "traditional" if case.diffusion and case.diffusion.unit == "traditional" else "SI"
        m = dl * (SI_TO_TRADITIONAL if unit == "traditional" else 1.0)
        out["DLCO"] = entry(equations["diffusion"], "DLCO", sex, age, height, m, unit=unit,
                            diffusion_unit=unit)
    for item in out.values():
        item["age_years"] = age
    return out


def _compare(p: str, now: dict[str, Any], before: dict[str, Any], years: float) -> dict[str, Any]:
    m1, m2 = before["measured"], now["measured"]
    kind, limit = THRESHOLDS_2005["year" if years >= 0.5 else "week"][p]
    pct = round((m2 - m1) * 100.0 / m1, 4)
    units = (m2 - m1) if now.get("unit") == "mL/min/mmHg" else (m2 - m1) * SI_TO_TRADITIONAL
    if kind == "pct_ge":
        sig = abs(pct) >= limit
    elif kind == "pct_gt":
        sig = abs(pct) > limit
    else:
        sig = abs(units) > limit
    dz = None if now.get("z") is None or before.get("z") is None else now["z"] - before["z"]
    dpp = (None if now.get("percent_predicted") is None or before.get("percent_predicted") is None
           else now["percent_predicted"] - before["percent_predicted"])
    return {"before": m1, "now": m2, "absolute": m2 - m1, "percent": pct, "z_change": dz,
            "percent_predicted_change": dpp, "unit": now.get("unit"), "significant": sig,
            "threshold": {"kind": kind, "limit": limit,
                          "table": "INTERP-2005 Table 12 " + ("year-to-year" if years >= 0.5
                                                              else "week-to-week (healthy)")}}


def change(case: Case, values: dict[str, Any], quality: dict[str, Any], validity: Finding,
           equations: dict[str, str] | None = None, sex: str | None = None) -> Finding:
    """Compare the current test with the subject's earlier tests.

    Parameters
    ----------
    case : Case
        The case; ``case.history`` holds the earlier tests.
    values : dict
        Values block of the current test.
    quality : dict
        Quality block (unused beyond validity).
    validity : Finding
        Step 1.
    equations : dict, optional
        Equation sets (defaults as in design.md §3) used for the earlier tests too.
    sex : str, optional
        ``"male"``/``"female"``; defaults to the subject's sex.
    """
    if validity.data.get("stop"):
        return not_assessed("change", TITLE, "Not interpreted: the session failed the validity "
                            "step.", _KEYS, status="stopped", rule=RULE, source=SOURCE)
    equations = equations or dict(DEFAULT_EQUATIONS)
    sex = sex or case.subject.sex
    priors = [(h, history_values(case, h, equations, sex)) for h in case.history]
    priors = [(h, v) for h, v in priors if v]
    if not priors:
        return not_assessed("change", TITLE, "No earlier test to compare with.", _KEYS,
                            rule=RULE, source=SOURCE)
    priors.sort(key=lambda hv: next(iter(hv[1].values()))["age_years"])
    last_h, last = priors[-1]
    age_now = case.subject.age_years
    years = age_now - next(iter(last.values()))["age_years"]
    now = {"FEV1": (values.get("pre") or {}).get("FEV1"),
           "FVC": (values.get("pre") or {}).get("FVC"),
           "DLCO": (values.get("diffusion") or {}).get("DLCO")}
    changes = {p: _compare(p, now[p], last[p], years) for p in ("FEV1", "FVC", "DLCO")
               if now.get(p) and last.get(p) and now[p].get("measured") is not None}
    if not changes:
        return not_assessed("change", TITLE, "Earlier tests carry no parameter measured today.",
                            _KEYS, rule=RULE, source=SOURCE)
    data: dict[str, Any] = dict.fromkeys(_KEYS)
    data.update(compared_with=last_h.date, interval_years=years, changes=changes,
                significant={p: c["significant"] for p, c in changes.items()})
    parts = [f"Compared with the test of {last_h.date or 'an earlier date'} "
             f"({years:.1f} years earlier):"]
    for p, c in changes.items():
        dz = f", z change {c['z_change']:+.2f}" if c["z_change"] is not None else ""
        parts.append(f"{p} {c['before']:.2f} -> {c['now']:.2f} {c['unit']} ({c['percent']:+.1f} %"
                     f"{dz}){' — significant' if c['significant'] else ''}.")
    sig = [c for c in changes.values() if c["significant"]]
    data["direction"] = ("decline" if any(c["absolute"] < 0 for c in sig) else
                         "increase" if sig else "stable")
    _children_or_adults(case, sex, last, now, years, data, parts)
    _slope(priors, values, age_now, data, parts)
    evidence = {"current": {p: now[p] for p in changes}, "prior": {p: last[p] for p in changes}}
    thresholds = {"interp_2005_table_12": THRESHOLDS_2005, "ccs_abs": 1.96,
                  "fev1q_divisor_l": FEV1Q_DIVISOR, "child_age_limit": CHILD_AGE_LIMIT}
    caveats = ("INTERP-2005 Table 12 limits, CCS and FEV1Q are published; the half-year switch "
               "between Table 12 rows, the age-18 cut for CCS and the least-squares slope are "
               "our own or common practice.",)
    return Finding("change", TITLE, " ".join(parts), data["direction"], evidence, thresholds,
                   RULE, SOURCE, caveats, data)


def _children_or_adults(case: Case, sex: str, last: dict[str, Any], now: dict[str, Any],
                        years: float, data: dict[str, Any], parts: list[str]) -> None:
    fev1_now, fev1_before = now.get("FEV1"), last.get("FEV1")
    if not fev1_now or not fev1_before:
        return
    age1 = fev1_before["age_years"]
    if age1 < CHILD_AGE_LIMIT:
        r = 0.642 - 0.04 * years + 0.020 * age1
        if r >= 1.0:  # late adolescence and a short interval: the formula gives no score
            parts.append(f"FEV1 conditional change score not defined (r {r:.3f} >= 1 at age "
                         f"{age1:.1f} over {years:.2f} years).")
        elif fev1_now.get("z") is not None and fev1_before.get("z") is not None and years > 0:
            score, r = ccs(fev1_before["z"], fev1_now["z"], years, age1)
            data["ccs"] = {"score": score, "r": r, "significant": abs(score) > 1.96}
            parts.append(f"FEV1 conditional change score {score:.2f} (r {r:.3f}): "
                         + ("outside" if abs(score) > 1.96 else "within") + " +/-1.96.")
    elif sex in FEV1Q_DIVISOR:
        data["fev1q"] = fev1q(fev1_now["measured"], sex)
        data["fev1q_prior"] = fev1q(fev1_before["measured"], sex)
        parts.append(f"FEV1Q {data['fev1q']:.2f} (earlier {data['fev1q_prior']:.2f}); values "
                     "near 1 signal little reserve.")


def _slope(priors: list[tuple[HistoryEntry, dict[str, Any]]], values: dict[str, Any],
           age_now: float, data: dict[str, Any], parts: list[str]) -> None:
    points = [(v["FEV1"]["age_years"], v["FEV1"]["measured"]) for _, v in priors if "FEV1" in v]
    fev1 = value(values, "pre", "FEV1", "measured")
    if fev1 is not None:
        points.append((age_now, fev1))
    data["n_tests"] = len(points)
    if len(points) < 3 or len({a for a, _ in points}) < 2:
        return
    slope, ci = fev1_slope([a for a, _ in points], [f for _, f in points])
    data["slope_ml_per_year"], data["slope_ci95"] = slope, list(ci)
    parts.append(f"FEV1 slope over {len(points)} tests: {slope:+.0f} mL/year "
                 f"(95 % CI {ci[0]:+.0f} to {ci[1]:+.0f}).")
    predicted = [(v["FEV1"]["age_years"], v["FEV1"].get("predicted")) for _, v in priors
                 if "FEV1" in v]
    predicted.append((age_now, value(values, "pre", "FEV1", "predicted")))
    if any(p is None for _, p in predicted):
        return
    expected, _ = fev1_slope([a for a, _ in predicted], [p for _, p in predicted])
    data["expected_slope_ml_per_year"] = expected
    data["excess_decline"] = ci[1] < expected
    data["rapid_decline"] = slope < -RAPID_DECLINE_ML_PER_YEAR
    text = f"Ageing alone (predicted FEV1) accounts for {expected:+.0f} mL/year"
    if data["excess_decline"]:
        text += ("; the measured decline is beyond that"
                 + (" and rapid (> 40 mL/year, common practice)" if data["rapid_decline"]
                    else ""))
        data["direction"] = "decline"
    elif data["rapid_decline"]:
        text += ("; the slope's point estimate is a rapid decline (> 40 mL/year, common "
                 "practice) but its interval is too wide to tell it from ageing: repeat testing "
                 "narrows it")
    parts.append(text + ".")
