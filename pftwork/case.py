"""Load and validate a case (``format: "pftwork-case/1"``) into :mod:`pftwork.case_model` objects.

Every field is checked against the unit and range the case format declares (design.md §2).
Impossible values and combinations raise :class:`~pftwork.errors.CaseError` naming the field
path, the value and what was expected; unusual but possible ones become warnings carried in
``Case.warnings``. Units are never guessed: a value that looks like the wrong unit is rejected
with a hint, not converted.

Only :func:`read_case_file` touches the file system.
"""

from __future__ import annotations

import copy
import datetime as dt
import json
import math
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from .case_model import (
    AirwayResistance,
    Bronchodilator,
    Case,
    Curve,
    Diffusion,
    DiffusionTrial,
    HistoryEntry,
    Spirometry,
    SpirometrySet,
    SpiroTrial,
    Subject,
    TestInfo,
    Volumes,
    VolumeTrial,
)
from .errors import CaseError
from .units import CMH2O_PER_KPA, diffusion_to_si, inches_to_cm

__all__ = ["CASE_FORMAT", "ANCESTRIES", "load_case", "read_case_file"]

CASE_FORMAT = "pftwork-case/1"
ANCESTRIES = ("european", "african_american", "north_east_asian", "south_east_asian", "other")
SEXES = ("male", "female", "both")
EQUATION_KINDS = {
    "spirometry": ("gli-global-2022", "gli-2012"),
    "volumes": ("gli-2021",),
    "diffusion": ("gli-2017",),
}
DEFAULT_EQUATIONS = {"spirometry": "gli-global-2022", "volumes": "gli-2021",
                     "diffusion": "gli-2017"}

# (low, high, unit text, hint when above high) — hard limits: outside them is an error.
_L = "litres BTPS"
_FLOW = "L/s"
_MULTI = "was this entered in mL?"
SPIRO_LIMITS: dict[str, tuple[float, float, str, str | None]] = {
    "FEV1": (0.1, 10.0, _L, _MULTI), "FVC": (0.1, 10.0, _L, _MULTI),
    "FEV0_5": (0.05, 10.0, _L, _MULTI), "FEV0_75": (0.05, 10.0, _L, _MULTI),
    "FEV6": (0.1, 10.0, _L, _MULTI), "FIVC": (0.1, 10.0, _L, _MULTI), "VC": (0.1, 10.0, _L, _MULTI),
    "PEF": (0.2, 20.0, _FLOW, "was this entered in L/min?"),
    "PIF": (0.2, 20.0, _FLOW, "was this entered in L/min?"),
    "FEF25_75": (0.01, 15.0, _FLOW, "was this entered in L/min?"),
    "FEF75": (0.005, 15.0, _FLOW, "was this entered in L/min?"),
    "FEF25": (0.01, 20.0, _FLOW, "was this entered in L/min?"),
    "FEF50": (0.01, 20.0, _FLOW, "was this entered in L/min?"),
    "FIF50": (0.01, 20.0, _FLOW, "was this entered in L/min?"),
    "BEV": (0.0, 2.0, _L, _MULTI), "FET": (0.0, 60.0, "seconds", None),
    "hesitation_s": (0.0, 30.0, "seconds", None),
}
VOLUME_LIMITS: dict[str, tuple[float, float, str, str | None]] = {
    "TLC": (0.5, 16.0, _L, _MULTI), "RV": (0.1, 12.0, _L, _MULTI), "FRC": (0.2, 14.0, _L, _MULTI),
    "ERV": (0.0, 8.0, _L, _MULTI), "IC": (0.1, 10.0, _L, _MULTI), "VC": (0.1, 10.0, _L, _MULTI),
}
# Diffusion limits are in SI after conversion; the message shows the case's own unit.
DIFFUSION_LIMITS_SI: dict[str, tuple[float, float]] = {"DLCO": (0.2, 25.0), "KCO": (0.1, 5.0)}
DIFFUSION_UNITS = {
    "SI": {"DLCO": "mmol/min/kPa", "KCO": "mmol/min/kPa/L"},
    "traditional": {"DLCO": "mL/min/mmHg", "KCO": "mL/min/mmHg/L"},
}


def read_case_file(path: str | Path) -> dict[str, Any]:
    """Read a JSON case file into a dictionary (``CaseError`` if it is not readable JSON)."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")  # a byte-order mark is skipped
    except OSError as exc:
        raise CaseError(str(path), "<file>", "a readable case file",
                        exc.strerror or type(exc).__name__) from None
    except UnicodeDecodeError as exc:
        raise CaseError(str(path), f"byte {exc.start}", "a UTF-8 text file (JSON)",
                        "is this a binary or differently encoded file?") from None
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise CaseError(str(path), f"line {exc.lineno}", "valid JSON", exc.msg) from None
    except (ValueError, RecursionError) as exc:  # a number too long to read; nesting too deep
        raise CaseError(str(path), "<file>", "a JSON case file of ordinary size and depth",
                        str(exc)[:120]) from None
    if not isinstance(data, dict):
        raise CaseError(str(path), type(data).__name__, "a JSON object (pftwork-case/1)")
    return data


def load_case(source: str | Path | Mapping[str, Any]) -> Case:
    """Build a validated :class:`~pftwork.case_model.Case` from a file path or a dictionary.

    Raises
    ------
    CaseError
        When any field is missing, of the wrong type, outside its unit's range, or when
        values are physiologically impossible together (FEV1 > FVC, RV > TLC …).
    """
    raw = read_case_file(source) if isinstance(source, (str, Path)) else source
    if not isinstance(raw, Mapping):
        raise CaseError("case", type(raw).__name__, "a dictionary or a path to a JSON case file")
    return _Loader(_copy_json(raw)).case()


class _Loader:
    """Walks one case dictionary, collecting warnings; one instance per load."""

    def __init__(self, raw: dict[str, Any]) -> None:
        self.raw = raw
        self.warnings: list[str] = []

    def warn(self, field: str, message: str) -> None:
        self.warnings.append(f"{field}: {message}")

    # -- top level -------------------------------------------------------------------------
    def case(self) -> Case:
        raw = self.raw
        fmt = raw.get("format")
        if fmt is None and "nbformat" in raw and "cells" in raw:
            raise CaseError("format", fmt, f'"{CASE_FORMAT}"',
                            "this is a Jupyter notebook, not a case file (worksheet notebooks "
                            "are read by pftwork verify and pftwork present)")
        if fmt is None:
            self.warn("format", f"missing; read as {CASE_FORMAT}")
        elif fmt != CASE_FORMAT:
            raise CaseError("format", fmt, f'"{CASE_FORMAT}"')
        _known(raw, "", {"format", "subject", "test", "reference", "spirometry", "volumes",
                         "diffusion", "airway_resistance", "lab_reference", "history", "meta"})
        if "subject" not in raw:
            raise CaseError("subject", None, "an object with sex, age_years and height_cm")
        subject = self.subject(raw["subject"], "subject")
        test = self.test(raw.get("test"), "test")
        case = Case(
            subject=subject,
            test=test,
            reference=self.reference(raw.get("reference"), subject),
            spirometry=self.spirometry(raw.get("spirometry"), "spirometry"),
            volumes=self.volumes(raw.get("volumes"), "volumes"),
            diffusion=self.diffusion(raw.get("diffusion"), "diffusion"),
            airway_resistance=self.resistance(raw.get("airway_resistance"), "airway_resistance"),
            lab_reference=self.lab_reference(raw.get("lab_reference"), "lab_reference"),
            history=self.history(raw.get("history"), "history", subject, test),
            raw=raw,
        )
        self.cross_checks(case)
        return Case(**{**case.__dict__, "warnings": tuple(self.warnings)})

    def subject(self, block: Any, path: str) -> Subject:
        block = _mapping(block, path)
        _known(block, path, {"id", "sex", "age_years", "height_cm", "height_in", "weight_kg",
                             "ancestry", "name", "birth_date", "record_number"})
        sex = block.get("sex")
        if not isinstance(sex, str) or sex.lower() not in SEXES:
            raise CaseError(f"{path}.sex", sex, 'one of "male", "female", "both" (sex at birth)')
        age = _number(block.get("age_years"), f"{path}.age_years", 3.0, 100.0, "years",
                      required=True, hint="GLI equations cover 3-95 years")
        height = self.height(block, path)
        weight = _number(block.get("weight_kg"), f"{path}.weight_kg", 2.0, 400.0, "kg")
        ancestry = block.get("ancestry")
        if ancestry is not None and ancestry not in ANCESTRIES:
            raise CaseError(f"{path}.ancestry", ancestry, f"null or one of {', '.join(ANCESTRIES)}")
        if age > 95:
            self.warn(f"{path}.age_years", f"{age:g} is above the GLI range (95 y); "
                      "reference values are extrapolated")
        if weight is not None:
            bmi = weight / (height / 100.0) ** 2
            if bmi < 15 or bmi > 50:
                self.warn(f"{path}.weight_kg", f"BMI {bmi:.1f} kg/m2 is unusual; check weight and height")
        for key in ("id", "name", "birth_date", "record_number"):
            if block.get(key) is not None and not isinstance(block[key], str):
                raise CaseError(f"{path}.{key}", block[key], "a string or null")
        return Subject(id=block.get("id") or "unnamed", sex=sex.lower(), age_years=age,
                       height_cm=height, weight_kg=weight, ancestry=ancestry,
                       name=block.get("name"), birth_date=block.get("birth_date"),
                       record_number=block.get("record_number"))

    def height(self, block: Mapping[str, Any], path: str) -> float:
        if block.get("height_in") is not None:
            if block.get("height_cm") is not None:
                raise CaseError(f"{path}.height_in", block["height_in"],
                                "either height_cm or height_in, not both")
            inches = _number(block["height_in"], f"{path}.height_in", 20.0, 100.0, "inches",
                             required=True)
            return inches_to_cm(inches)
        value = block.get("height_cm")
        hint = None
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            if 0.5 < value < 2.6:
                hint = "was this entered in metres?"
            elif 25 < value < 90:
                hint = "was this entered in inches? then use height_in"
        return _number(value, f"{path}.height_cm", 80.0, 250.0, "cm", required=True, hint=hint)

    def test(self, block: Any, path: str) -> TestInfo:
        if block is None:
            return TestInfo()
        block = _mapping(block, path)
        _known(block, path, {"date", "altitude_m", "barometric_kpa", "question", "copd",
                             "operator_comments"})
        copd = block.get("copd")
        if copd is not None and not isinstance(copd, bool):
            raise CaseError(f"{path}.copd", copd, "true, false or null")
        return TestInfo(
            date=_date(block.get("date"), f"{path}.date"),
            altitude_m=_number(block.get("altitude_m"), f"{path}.altitude_m", -500.0, 6000.0, "m"),
            barometric_kpa=_number(block.get("barometric_kpa"), f"{path}.barometric_kpa", 40.0,
                                   110.0, "kPa", hint="was this entered in mmHg?"),
            question=_text(block.get("question"), f"{path}.question"),
            copd=copd,
            operator_comments=_text(block.get("operator_comments"), f"{path}.operator_comments"),
        )

    def reference(self, block: Any, subject: Subject) -> dict[str, str]:
        chosen = dict(DEFAULT_EQUATIONS)
        if block is None:
            return chosen
        block = _mapping(block, "reference")
        _known(block, "reference", set(EQUATION_KINDS))
        for kind, value in block.items():
            if value is None:
                continue
            if value not in EQUATION_KINDS[kind]:
                raise CaseError(f"reference.{kind}", value,
                                f"one of {', '.join(EQUATION_KINDS[kind])}")
            chosen[kind] = value
        if chosen["spirometry"] == "gli-2012" and subject.ancestry is None:
            self.warn("subject.ancestry", "gli-2012 needs an ancestry; the 'other' (mixed) "
                      "equation is used")
        return chosen

    # -- spirometry ------------------------------------------------------------------------
    def spirometry(self, block: Any, path: str) -> Spirometry | None:
        if block is None:
            return None
        block = _mapping(block, path)
        _known(block, path, {"pre", "post", "bronchodilator"})
        bd = None
        if block.get("bronchodilator") is not None:
            b = _mapping(block["bronchodilator"], f"{path}.bronchodilator")
            _known(b, f"{path}.bronchodilator", {"agent", "dose", "minutes_after"})
            bd = Bronchodilator(
                agent=_text(b.get("agent"), f"{path}.bronchodilator.agent"),
                dose=_text(b.get("dose"), f"{path}.bronchodilator.dose"),
                minutes_after=_number(b.get("minutes_after"), f"{path}.bronchodilator.minutes_after",
                                      0.0, 240.0, "minutes"))
        return Spirometry(pre=self.spiro_set(block.get("pre"), f"{path}.pre"),
                          post=self.spiro_set(block.get("post"), f"{path}.post"),
                          bronchodilator=bd)

    def spiro_set(self, block: Any, path: str) -> SpirometrySet | None:
        if block is None:
            return None
        block = _mapping(block, path)
        _known(block, path, {"trials", *SPIRO_LIMITS})
        reported = {k: _number(v, f"{path}.{k}", *SPIRO_LIMITS[k][:3], hint=SPIRO_LIMITS[k][3])
                    for k, v in block.items() if k != "trials" and v is not None}
        _check_fev1_fvc(reported, path)
        trials_raw = block.get("trials") or []
        if not isinstance(trials_raw, list):
            raise CaseError(f"{path}.trials", trials_raw, "a list of manoeuvres")
        trials = tuple(self.spiro_trial(t, f"{path}.trials[{i}]") for i, t in enumerate(trials_raw))
        if not reported and not trials:
            raise CaseError(path, block, "reported values (FEV1, FVC …) or a list of trials")
        return SpirometrySet(reported=reported, trials=trials)

    def spiro_trial(self, block: Any, path: str) -> SpiroTrial:
        block = _mapping(block, path)
        flags = ("plateau", "cough", "glottic_closure", "leak", "early_termination")
        _known(block, path, {*SPIRO_LIMITS, *flags, "curve", "label"})
        values: dict[str, Any] = {}
        for key, value in block.items():
            if value is None:
                continue
            if key in SPIRO_LIMITS:
                lo, hi, unit, hint = SPIRO_LIMITS[key]
                values[key] = _number(value, f"{path}.{key}", lo, hi, unit, hint=hint)
            elif key in flags:
                if not isinstance(value, bool):
                    raise CaseError(f"{path}.{key}", value, "true, false or null")
                values[key] = value
            elif key == "label":
                values[key] = _text(value, f"{path}.label")
        _check_fev1_fvc(values, path)
        if block.get("curve") is not None:
            values["curve"] = _curve(block["curve"], f"{path}.curve")
        if not any(k in values for k in ("FEV1", "FVC", "curve")):
            raise CaseError(path, block, "a manoeuvre with FEV1/FVC values or a raw curve")
        fields = set(SpiroTrial.__dataclass_fields__)
        return SpiroTrial(**{k: v for k, v in values.items() if k in fields})

    # -- volumes ---------------------------------------------------------------------------
    def volumes(self, block: Any, path: str) -> Volumes | None:
        if block is None:
            return None
        block = _mapping(block, path)
        _known(block, path, {"method", "trials", *VOLUME_LIMITS})
        method = block.get("method")
        allowed = ("plethysmography", "nitrogen_washout", "helium_dilution", "imaging")
        if method is not None and method not in allowed:
            raise CaseError(f"{path}.method", method, f"null or one of {', '.join(allowed)}")
        reported = {k: _number(v, f"{path}.{k}", *VOLUME_LIMITS[k][:3], hint=VOLUME_LIMITS[k][3])
                    for k, v in block.items() if k in VOLUME_LIMITS and v is not None}
        trials_raw = block.get("trials") or []
        if not isinstance(trials_raw, list):
            raise CaseError(f"{path}.trials", trials_raw, "a list of manoeuvres")
        trials = []
        for i, t in enumerate(trials_raw):
            tp = f"{path}.trials[{i}]"
            t = _mapping(t, tp)
            _known(t, tp, {"FRC", "ERV", "IC", "VC"})
            trials.append(VolumeTrial(**{k: _number(v, f"{tp}.{k}", *VOLUME_LIMITS[k][:3],
                                                    hint=VOLUME_LIMITS[k][3])
                                         for k, v in t.items() if v is not None}))
        if not reported and not trials:
            raise CaseError(path, block, "reported volumes (TLC, RV, FRC …) or a list of trials")
        tlc = reported.get("TLC")
        for part in ("RV", "FRC", "VC", "IC", "ERV"):
            if tlc is not None and reported.get(part) is not None and reported[part] > tlc:
                raise CaseError(f"{path}.{part}", reported[part],
                                f"at most TLC ({tlc:g} L): {part} cannot exceed total lung capacity")
        rv, frc = reported.get("RV"), reported.get("FRC")
        if rv is not None and frc is not None and rv > frc:
            raise CaseError(f"{path}.RV", rv, f"at most FRC ({frc:g} L): RV = FRC - ERV")
        return Volumes(method=method, reported=reported, trials=tuple(trials))

    # -- diffusion -------------------------------------------------------------------------
    def diffusion(self, block: Any, path: str) -> Diffusion | None:
        if block is None:
            return None
        block = _mapping(block, path)
        _known(block, path, {"unit", "DLCO", "VA", "KCO", "hemoglobin_g_dl", "cohb_percent",
                             "trials"})
        unit = block.get("unit")
        if not isinstance(unit, str) or unit not in DIFFUSION_UNITS:
            raise CaseError(f"{path}.unit", unit, '"SI" (mmol/min/kPa) or "traditional" '
                            "(mL/min/mmHg): pftwork never guesses the diffusion unit")
        reported = self.diffusion_values(block, path, unit, ("DLCO", "VA", "KCO"))
        trials_raw = block.get("trials") or []
        if not isinstance(trials_raw, list):
            raise CaseError(f"{path}.trials", trials_raw, "a list of manoeuvres")
        trials = []
        for i, t in enumerate(trials_raw):
            tp = f"{path}.trials[{i}]"
            t = _mapping(t, tp)
            _known(t, tp, {"DLCO", "VA", "KCO", "IVC", "breath_hold_s", "inspiration_time_s",
                           "sample_time_s"})
            values = self.diffusion_values(t, tp, unit, ("DLCO", "VA", "KCO"))
            values["IVC"] = _number(t.get("IVC"), f"{tp}.IVC", 0.1, 10.0, _L, hint=_MULTI)
            values["breath_hold_s"] = _number(t.get("breath_hold_s"), f"{tp}.breath_hold_s",
                                              0.0, 30.0, "seconds")
            values["inspiration_time_s"] = _number(t.get("inspiration_time_s"),
                                                   f"{tp}.inspiration_time_s", 0.0, 20.0, "seconds")
            values["sample_time_s"] = _number(t.get("sample_time_s"), f"{tp}.sample_time_s",
                                              0.0, 20.0, "seconds")
            if values.get("DLCO") is None:
                raise CaseError(f"{tp}.DLCO", None, f"a number in {DIFFUSION_UNITS[unit]['DLCO']}")
            trials.append(DiffusionTrial(**values))
        if not reported and not trials:
            raise CaseError(path, block, "reported DLCO/VA/KCO or a list of trials")
        hb = _number(block.get("hemoglobin_g_dl"), f"{path}.hemoglobin_g_dl", 3.0, 25.0, "g/dL",
                     hint="was this entered in g/L? divide by 10")
        cohb = _number(block.get("cohb_percent"), f"{path}.cohb_percent", 0.0, 40.0, "percent")
        return Diffusion(unit=unit, reported=reported, trials=tuple(trials), hemoglobin_g_dl=hb,
                         cohb_percent=cohb)

    def diffusion_values(self, block: Mapping[str, Any], path: str, unit: str,
                         keys: tuple[str, ...]) -> dict[str, float]:
        out: dict[str, float] = {}
        for key in keys:
            value = block.get(key)
            if value is None:
                continue
            if key == "VA":
                out[key] = _number(value, f"{path}.VA", 0.3, 14.0, _L, hint=_MULTI)
                continue
            own = _number(value, f"{path}.{key}", 0.0, 1e6, DIFFUSION_UNITS[unit][key])
            si = diffusion_to_si(own, unit)
            lo, hi = DIFFUSION_LIMITS_SI[key]
            if not lo <= si <= hi:
                f = 1.0 if unit == "SI" else 2.987
                hint = None
                if unit == "SI" and lo * 2.987 <= own <= hi * 2.987:
                    hint = 'was this in mL/min/mmHg? then set unit "traditional"'
                elif unit == "traditional" and lo <= own <= hi:
                    hint = 'was this in mmol/min/kPa? then set unit "SI"'
                raise CaseError(f"{path}.{key}", value,
                                f"{DIFFUSION_UNITS[unit][key]} between {lo * f:.3g} and {hi * f:.3g}",
                                hint)
            out[key] = si
        return out

    # -- others ----------------------------------------------------------------------------
    def resistance(self, block: Any, path: str) -> AirwayResistance | None:
        if block is None:
            return None
        block = _mapping(block, path)
        _known(block, path, {"sRaw", "Raw", "unit"})
        unit = block.get("unit", "kPa*s")
        if unit not in ("kPa*s", "cmH2O*s"):
            raise CaseError(f"{path}.unit", unit, '"kPa*s" (sRaw; Raw in kPa*s/L) or "cmH2O*s"')
        factor = 1.0 if unit == "kPa*s" else 1.0 / CMH2O_PER_KPA
        shown = "kPa*s" if unit == "kPa*s" else "cmH2O*s"
        s = _number(block.get("sRaw"), f"{path}.sRaw", 0.0, 10.0 / factor, shown)
        r = _number(block.get("Raw"), f"{path}.Raw", 0.0, 5.0 / factor, f"{shown}/L")
        if s is None and r is None:
            raise CaseError(path, block, "sRaw and/or Raw")
        return AirwayResistance(sRaw=None if s is None else s * factor,
                                Raw=None if r is None else r * factor, unit=unit)

    def lab_reference(self, block: Any, path: str) -> dict[str, dict[str, float]]:
        if block is None:
            return {}
        block = _mapping(block, path)
        out: dict[str, dict[str, float]] = {}
        for param, entry in block.items():
            ep = f"{path}.{param}"
            entry = _mapping(entry, ep)
            _known(entry, ep, {"predicted", "lln", "uln", "unit", "source"})
            vals = {k: _number(entry.get(k), f"{ep}.{k}", 0.0, 1e4, "the parameter's own unit")
                    for k in ("predicted", "lln", "uln")}
            if all(v is None for v in vals.values()):
                raise CaseError(ep, entry, "at least one of predicted, lln, uln")
            out[param] = {k: v for k, v in vals.items() if v is not None}
            for k in ("unit", "source"):
                if entry.get(k) is not None:
                    out[param][k] = _text(entry[k], f"{ep}.{k}")  # type: ignore[assignment]
        return out

    def history(self, block: Any, path: str, subject: Subject,
                test: TestInfo) -> tuple[HistoryEntry, ...]:
        if block is None:
            return ()
        if not isinstance(block, list):
            raise CaseError(path, block, "a list of earlier tests")
        entries = []
        for i, item in enumerate(block):
            hp = f"{path}[{i}]"
            item = _mapping(item, hp)
            _known(item, hp, {"test", "subject", "spirometry", "volumes", "diffusion"})
            t = _mapping(item.get("test") or {}, f"{hp}.test")
            date = _date(t.get("date"), f"{hp}.test.date")
            s = _mapping(item.get("subject") or {}, f"{hp}.subject")
            _known(s, f"{hp}.subject", {"age_years", "height_cm"})
            age = _number(s.get("age_years"), f"{hp}.subject.age_years", 3.0, 100.0, "years")
            if age is None and date is not None and test.date is not None:
                age = subject.age_years - (test.date - date).days / 365.25
                if age < 3:
                    raise CaseError(f"{hp}.test.date", t.get("date"),
                                    "a date when the subject was at least 3 years old "
                                    f"(subject.age_years {subject.age_years:g} on test.date "
                                    f"{test.date.isoformat()})")
            if date is not None and test.date is not None and date > test.date:
                raise CaseError(f"{hp}.test.date", t.get("date"),
                                f"a date before this test (test.date {test.date.isoformat()})")
            height = _number(s.get("height_cm"), f"{hp}.subject.height_cm", 80.0, 250.0, "cm")
            entries.append(HistoryEntry(
                date=date, age_years=age, height_cm=height if height else subject.height_cm,
                spirometry=self.spirometry(item.get("spirometry"), f"{hp}.spirometry"),
                volumes=self.volumes(item.get("volumes"), f"{hp}.volumes"),
                diffusion=self.diffusion(item.get("diffusion"), f"{hp}.diffusion")))
        return tuple(sorted(entries, key=lambda e: (e.date is None, e.date or dt.date.min)))

    def cross_checks(self, case: Case) -> None:
        if case.spirometry and case.volumes:
            tlc = case.volumes.reported.get("TLC")
            for phase in ("pre", "post"):
                s = getattr(case.spirometry, phase)
                fvc = s.reported.get("FVC") if s else None
                if tlc is not None and fvc is not None and fvc > tlc:
                    raise CaseError(f"spirometry.{phase}.FVC", fvc,
                                    f"at most TLC ({tlc:g} L): a vital capacity cannot exceed TLC")
        if case.diffusion and case.volumes:
            va, tlc = case.diffusion.reported.get("VA"), case.volumes.reported.get("TLC")
            if va is not None and tlc is not None and va > tlc * 1.15:
                self.warn("diffusion.VA", f"VA {va:g} L exceeds TLC {tlc:g} L by more than 15 %; "
                          "check the volumes")


def _copy_json(value: Any, path: str = "", depth: int = 0) -> Any:
    """A deep copy of JSON-like data (much faster than ``copy.deepcopy`` for long curves).

    Raises ``CaseError`` naming the path where the nesting passes ``_MAX_DEPTH`` levels (no case
    field is nested that deep; deeper data would exhaust the interpreter's recursion limit).
    """
    if depth > _MAX_DEPTH and isinstance(value, (Mapping, list, tuple)):
        raise CaseError(path or "case", "[…]" if isinstance(value, (list, tuple)) else "{…}",
                        f"JSON nested at most {_MAX_DEPTH} levels deep")
    if isinstance(value, Mapping):
        return {k: _copy_json(v, f"{path}.{k}" if path else str(k), depth + 1)
                for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        if set(map(type, value)) <= _FAST:  # a flat list of numbers or text (raw curves)
            return list(value)
        return [v if isinstance(v, _SCALARS) else _copy_json(v, f"{path}[{i}]", depth + 1)
                for i, v in enumerate(value)]
    return copy.deepcopy(value) if not isinstance(value, _SCALARS) else value


_MAX_DEPTH = 64
_SCALARS = (int, float, str, bool, type(None))
_FAST = frozenset(_SCALARS)


# -- small validators (one message template) ------------------------------------------------
def _mapping(value: Any, path: str) -> Mapping[str, Any]:
    if not isinstance(value, Mapping):
        raise CaseError(path, value, "an object (JSON dictionary)")
    return value


def _known(block: Mapping[str, Any], path: str, allowed: set[str]) -> None:
    for key in block:
        if key not in allowed:
            where = f"{path}.{key}" if path else key
            raise CaseError(where, block[key], "no such field here; allowed: "
                            + ", ".join(sorted(allowed)))


def _number(value: Any, path: str, lo: float, hi: float, unit: str, *, required: bool = False,
            hint: str | None = None) -> float | None:
    if value is None:
        if required:
            raise CaseError(path, None, f"a number in {unit}")
        return None
    if not _is_number(value):  # numpy numbers (from a DataFrame row) are numbers too
        raise CaseError(path, value, f"a number in {unit} between {lo:g} and {hi:g}")
    try:
        value = float(value)
    except OverflowError:  # an integer beyond the float range
        raise CaseError(path, _shown(value), f"a finite number in {unit}") from None
    if not math.isfinite(value):
        raise CaseError(path, value, f"a finite number in {unit}")
    if not lo <= value <= hi:
        use_hint = hint if (hint and (value > hi or "metres" in hint or "inches" in hint)) else None
        raise CaseError(path, value, f"{unit} between {lo:g} and {hi:g}", use_hint)
    return value


def _shown(value: Any) -> Any:
    """``value``, or a short stand-in for an integer too large to print or convert."""
    return "an integer beyond the float range" if isinstance(value, int) and abs(value) > 1e308 else value


def _is_number(value: Any) -> bool:
    """A real number (Python or numpy), not a boolean."""
    return (isinstance(value, (int, float, np.integer, np.floating))
            and not isinstance(value, (bool, np.bool_)))


def _text(value: Any, path: str) -> str | None:
    if value is None:
        return None
    if not isinstance(value, str):
        raise CaseError(path, value, "text")
    return value


def _date(value: Any, path: str) -> dt.date | None:
    if value is None:
        return None
    try:
        return dt.date.fromisoformat(value) if isinstance(value, str) else _bad()
    except ValueError:
        raise CaseError(path, value, "an ISO date YYYY-MM-DD") from None


def _bad() -> dt.date:
    raise ValueError


def _check_fev1_fvc(values: Mapping[str, Any], path: str) -> None:
    fev1, fvc = values.get("FEV1"), values.get("FVC")
    if fev1 is not None and fvc is not None and fev1 > fvc:
        raise CaseError(f"{path}.FEV1", fev1, f"at most FVC ({fvc:g} L): FEV1 cannot exceed FVC")
    if fev1 is not None and fvc is not None and fev1 / fvc < 0.2:
        raise CaseError(f"{path}.FEV1", fev1, f"FEV1/FVC of at least 0.20 (got {fev1 / fvc:.2f})",
                        "check that FEV1 and FVC are both in litres")


def _curve(block: Any, path: str) -> Curve:
    block = _mapping(block, path)
    _known(block, path, {"time_s", "volume_l", "volume_ml"})
    if "volume_ml" in block:
        raise CaseError(f"{path}.volume_ml", "[…]", "volume_l in litres BTPS (convert on export)")
    arrays = {}
    for key in ("time_s", "volume_l"):
        value = block.get(key)
        if not isinstance(value, list) or not value:
            raise CaseError(f"{path}.{key}", value, "a non-empty list of numbers")
        if not set(map(type, value)) <= {int, float}:  # no text, booleans or nested lists
            bad = [i for i, v in enumerate(value) if not _is_number(v)]
            if bad:
                raise CaseError(f"{path}.{key}[{bad[0]}]", value[bad[0]],
                                "a flat list of numbers only")
        try:
            arr = np.asarray(value, dtype=float)
        except OverflowError:  # an integer beyond the float range
            arr = np.array([v if abs(v) < 1e308 else math.inf for v in value], dtype=float)
        if not np.all(np.isfinite(arr)):
            i = int(np.argmin(np.isfinite(arr)))
            raise CaseError(f"{path}.{key}[{i}]", _shown(value[i]), "finite numbers (no NaN or infinity)")
        arrays[key] = arr
    if arrays["time_s"].size != arrays["volume_l"].size:
        raise CaseError(f"{path}.volume_l", f"{arrays['volume_l'].size} samples",
                        f"as many samples as time_s ({arrays['time_s'].size})")
    return Curve(time_s=arrays["time_s"], volume_l=arrays["volume_l"])
