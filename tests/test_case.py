"""Tests for the case loader (design.md §2 case format; units and ranges as documented there)."""

from __future__ import annotations

import copy
import json

import pytest

from pftwork.case import load_case
from pftwork.errors import CaseError

BASE = {
    "format": "pftwork-case/1",
    "subject": {"id": "t-1", "sex": "female", "age_years": 61.4, "height_cm": 159.0,
                "weight_kg": 77.0},
    "test": {"date": "2026-10-14", "altitude_m": 240},
    "spirometry": {
        "pre": {"trials": [{"FEV1": 1.42, "FVC": 2.51, "BEV": 0.05, "FET": 11.2,
                            "plateau": True, "FIVC": 2.49}]},
        "post": {"FEV1": 1.66, "FVC": 2.70},
    },
    "volumes": {"method": "plethysmography", "TLC": 5.6, "RV": 3.0, "FRC": 3.6,
                "trials": [{"FRC": 3.61}, {"FRC": 3.55}]},
    "diffusion": {"unit": "SI", "hemoglobin_g_dl": 12.4,
                  "trials": [{"DLCO": 4.9, "VA": 4.3, "IVC": 2.4, "breath_hold_s": 10.2}]},
    "history": [{"test": {"date": "2025-09-30"}, "spirometry": {"pre": {"FEV1": 1.58, "FVC": 2.62}}}],
}


def with_change(path: str, value):
    """A deep copy of BASE with the dotted ``path`` set to ``value`` (list indices as [i])."""
    case = copy.deepcopy(BASE)
    keys = path.replace("]", "").replace("[", ".").split(".")
    node = case
    for key in keys[:-1]:
        node = node[int(key)] if key.isdigit() else node[key]
    last = keys[-1]
    if last.isdigit():
        node[int(last)] = value
    else:
        node[last] = value
    return case


class TestLoadValid:
    """Valid cases load into typed objects in pftwork's internal units."""

    def test_design_example_loads(self):
        """The example of design.md §2 loads without warnings."""
        case = load_case(BASE)

        assert case.subject.sex == "female"
        assert case.spirometry.pre.trials[0].FVC == 2.51
        assert case.spirometry.post.reported == {"FEV1": 1.66, "FVC": 2.70}
        assert case.volumes.reported["TLC"] == 5.6
        assert case.reference["spirometry"] == "gli-global-2022"
        assert () == case.warnings

    def test_load_from_file(self, tmp_path):
        """A JSON file path loads the same case as the dictionary."""
        path = tmp_path / "c.json"
        path.write_text(json.dumps(BASE))

        assert load_case(path).subject == load_case(BASE).subject

    def test_traditional_diffusion_is_converted_to_si(self):
        """1 mmol/min/kPa = 2.987 mL/min/mmHg (standards.md §4.6, VERIFIED-2nd)."""
        case = load_case(with_change("diffusion", {"unit": "traditional", "DLCO": 23.90,
                                                   "VA": 5.0, "KCO": 4.78}))

        assert case.diffusion.unit == "traditional"
        assert case.diffusion.reported["DLCO"] == pytest.approx(8.0, abs=0.002)
        assert case.diffusion.reported["KCO"] == pytest.approx(1.6, abs=0.001)

    def test_height_in_inches_only_when_explicit(self):
        """height_in converts at 2.54 cm per inch; height_cm is never reinterpreted."""
        raw = copy.deepcopy(BASE)
        del raw["subject"]["height_cm"]
        raw["subject"]["height_in"] = 62.6

        assert load_case(raw).subject.height_cm == pytest.approx(159.004)

    def test_history_age_from_dates(self):
        """A history entry without an age gets it from the date difference (365.25-day years)."""
        case = load_case(BASE)

        assert case.history[0].age_years == pytest.approx(61.4 - 379 / 365.25)

    def test_cmh2o_resistance_converted(self):
        """sRaw in cmH2O*s is held in kPa*s (1 kPa = 10.197 cmH2O, SI definition)."""
        case = load_case(with_change("airway_resistance", {"sRaw": 10.197, "unit": "cmH2O*s"}))

        assert case.airway_resistance.sRaw == pytest.approx(1.0, abs=1e-4)

    def test_unusual_value_is_a_warning(self):
        """A BMI far outside the usual range loads, with a warning naming the field."""
        case = load_case(with_change("subject.weight_kg", 160.0))

        assert any(w.startswith("subject.weight_kg") for w in case.warnings)


BAD = [
    # (path, value, field named in the message, words the message must contain)
    ("spirometry.post.FVC", 2600, "spirometry.post.FVC = 2600",
     "expected litres BTPS between 0.1 and 10 — was this entered in mL?"),
    ("spirometry.pre.trials[0].FEV1", 2.9, "spirometry.pre.trials[0].FEV1", "cannot exceed FVC"),
    ("volumes.RV", 6.1, "volumes.RV", "cannot exceed total lung capacity"),
    ("subject.age_years", 2.5, "subject.age_years", "between 3 and 100"),
    ("subject.age_years", 101, "subject.age_years", "between 3 and 100"),
    ("subject.sex", "F", "subject.sex", '"male", "female", "both"'),
    ("subject.height_cm", 1.59, "subject.height_cm", "metres"),
    ("subject.height_cm", 62.6, "subject.height_cm", "inches"),
    ("subject.ancestry", "caucasian", "subject.ancestry", "european"),
    ("diffusion.unit", None, "diffusion.unit", "never guesses"),
    ("diffusion.trials[0].DLCO", 24.0 * 2.987, "diffusion.trials[0].DLCO", "mmol/min/kPa"),
    ("diffusion.hemoglobin_g_dl", 124, "diffusion.hemoglobin_g_dl", "g/L"),
    ("test.date", "14/10/2026", "test.date", "ISO date"),
    ("spirometry.pre.trials[0].plateau", "yes", "spirometry.pre.trials[0].plateau", "true, false"),
    ("spirometry.pre.trials[0].PEF", 420, "spirometry.pre.trials[0].PEF", "L/min"),
    ("subject.weight_kg", "77", "subject.weight_kg", "a number in kg"),
    ("format", "pftwork-case/2", "format", "pftwork-case/1"),
    ("history[0].test.date", "2027-01-01", "history[0].test.date", "before this test"),
    ("spirometry.pre.trials[0].FVC", float("nan"), "spirometry.pre.trials[0].FVC", "finite"),
]


class TestLoadInvalid:
    """Each rejected case says which field, what value and what was expected (issue #2)."""

    @pytest.mark.parametrize(("path", "value", "field", "words"), BAD,
                             ids=[f"{b[0]}={b[1]!r}" for b in BAD])
    def test_rejected_with_field_and_reason(self, path, value, field, words):
        """The CaseError message names the field and the expectation."""
        with pytest.raises(CaseError) as info:
            load_case(with_change(path, value))

        message = str(info.value)
        assert field in message
        assert words in message

    def test_unknown_field_is_named(self):
        """A misspelt key is an error listing the allowed keys, never silently ignored."""
        raw = with_change("spirometry.pre.FEV_1", 1.2)

        with pytest.raises(CaseError, match=r"spirometry\.pre\.FEV_1 .*allowed: .*FEV1"):
            load_case(raw)

    def test_missing_subject(self):
        """A case without a subject is rejected naming 'subject'."""
        raw = copy.deepcopy(BASE)
        del raw["subject"]

        with pytest.raises(CaseError, match="^subject"):
            load_case(raw)

    def test_fvc_above_tlc(self):
        """A vital capacity larger than TLC is physiologically impossible."""
        with pytest.raises(CaseError, match="spirometry.post.FVC"):
            load_case(with_change("volumes", {"TLC": 2.6, "RV": 1.0}))

    def test_error_is_also_a_value_error(self):
        """CaseError subclasses ValueError so generic handlers catch it too."""
        with pytest.raises(ValueError):
            load_case(with_change("subject.age_years", -1))

    def test_unreadable_file(self, tmp_path):
        """A file that is not JSON names the file and the line."""
        bad = tmp_path / "bad.json"
        bad.write_text("{not json")

        with pytest.raises(CaseError, match="bad.json .*valid JSON"):
            load_case(bad)
