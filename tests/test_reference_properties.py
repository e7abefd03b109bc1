"""Properties of pftwork.reference that follow from the LMS method and the published equations.

Sources: standards.md §1.1 (LMS, Cole & Green 1992), §1.2 (GLI structure and age ranges),
§1.6.1-1.6.2 (GLI-2021, Hall 2021 via S9b), §4.6 (SI/traditional factor 2.987, VERIFIED-2nd),
and the published tables' provenance (pyspiro 1.0.0 data files, rebuilt by
scripts/build_tables.py).
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from importlib import resources
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from pftwork import lms as pl
from pftwork.errors import CaseError, EquationSetError
from pftwork.reference import (
    ANCESTRIES,
    EQUATION_SETS,
    PLAUSIBLE_HEIGHT_CM,
    get_equation_set,
    lms,
    reference_values,
    table_checksums,
)
from pftwork.tables import content_sha256

ALL = [(s, p, u) for s in EQUATION_SETS for p in get_equation_set(s).parameters
       for u in (("SI", "traditional") if p in ("DLCO", "KCO") else ("SI",))]
ALL_IDS = [f"{s}:{p}:{u}" for s, p, u in ALL]
RATIOS = {"FEV1/FVC", "FEV0_75/FVC", "RV/TLC"}


def _anc(set_id):
    return "european" if set_id == "gli-2012" else None


def _ages(set_id, parameter):
    lo, hi = get_equation_set(set_id).age_range_for(parameter)
    return np.linspace(lo, hi, 57)


class TestLmsIdentities:
    """z, % predicted and percentile behave as the LMS definitions require (standards.md §1.1)."""

    @pytest.mark.parametrize(("set_id", "parameter", "unit"), ALL, ids=ALL_IDS)
    def test_lln_has_z_minus_1645(self, set_id, parameter, unit):
        """A measured value equal to the LLN has z = -1.645; the ULN z = +1.645."""
        ages = _ages(set_id, parameter)
        sex = np.arange(ages.size) % 2
        rv = reference_values(set_id, parameter, sex, ages, 160.0 - 0 * ages, ancestry=_anc(set_id), unit=unit)
        at_lln = reference_values(set_id, parameter, sex, ages, 160.0, measured=rv.lln,
                                  ancestry=_anc(set_id), unit=unit)
        at_uln = reference_values(set_id, parameter, sex, ages, 160.0, measured=rv.uln,
                                  ancestry=_anc(set_id), unit=unit)
        np.testing.assert_allclose(at_lln.z, -1.645, rtol=0, atol=1e-9)
        np.testing.assert_allclose(at_uln.z, 1.645, rtol=0, atol=1e-9)

    @pytest.mark.parametrize(("set_id", "parameter", "unit"), ALL, ids=ALL_IDS)
    def test_predicted_has_z_zero(self, set_id, parameter, unit):
        """At the predicted value (M): z = 0, 100 % predicted, 50th percentile."""
        ages = _ages(set_id, parameter)
        rv = reference_values(set_id, parameter, "female", ages, 150.0, ancestry=_anc(set_id), unit=unit)
        at_m = reference_values(set_id, parameter, "female", ages, 150.0, measured=rv.predicted,
                                ancestry=_anc(set_id), unit=unit)
        np.testing.assert_allclose(at_m.z, 0.0, atol=1e-12)
        np.testing.assert_allclose(at_m.percent_predicted, 100.0, rtol=1e-13)
        np.testing.assert_allclose(at_m.percentile, 50.0, rtol=1e-12)
        assert np.all(rv.lln < rv.predicted) and np.all(rv.predicted < rv.uln)

    @pytest.mark.parametrize(("set_id", "parameter", "unit"), ALL, ids=ALL_IDS)
    def test_engine_equals_generic_lms_functions(self, set_id, parameter, unit):
        """The vectorised engine gives what pftwork.lms gives from the same L, M, S."""
        rng = np.random.default_rng(7)
        lo, hi = get_equation_set(set_id).age_range_for(parameter)
        age = rng.uniform(lo, hi, 300)
        height = rng.uniform(100, 200, 300)
        sex = rng.integers(0, 2, 300)
        r = lms(set_id, parameter, sex, age, height, ancestry=_anc(set_id), unit=unit)
        y = r.M * rng.uniform(0.5, 1.5, 300)
        rv = reference_values(set_id, parameter, sex, age, height, measured=y, ancestry=_anc(set_id), unit=unit)
        np.testing.assert_allclose(rv.predicted, r.M, rtol=0)
        np.testing.assert_allclose(rv.lln, pl.lower_limit(r.L, r.M, r.S), rtol=1e-13)
        np.testing.assert_allclose(rv.uln, pl.upper_limit(r.L, r.M, r.S), rtol=1e-13)
        np.testing.assert_allclose(rv.z, pl.z_score(y, r.L, r.M, r.S), rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(rv.percentile, pl.percentile(rv.z), rtol=1e-13)
        np.testing.assert_allclose(rv.percent_predicted, pl.percent_predicted(y, r.M), rtol=1e-14)


# Parameters whose median rises with height in the published coefficients (height coefficient
# > 0): volumes and flows. Ratios and KCO have negative height coefficients and are excluded.
MONOTONIC = [(s, p, u) for s, p, u in ALL if p not in RATIOS and p != "KCO"]


class TestHeight:
    """Height dependence of the predicted value."""

    @pytest.mark.parametrize(("set_id", "parameter", "unit"), MONOTONIC,
                             ids=[f"{s}:{p}:{u}" for s, p, u in MONOTONIC])
    @settings(max_examples=40, deadline=None)
    @given(data=st.data())
    def test_predicted_increases_with_height(self, set_id, parameter, unit, data):
        """Taller (same sex and age) means a larger predicted volume or flow (coefficient > 0)."""
        lo, hi = get_equation_set(set_id).age_range_for(parameter)
        age = data.draw(st.floats(lo, hi), label="age")
        h1 = data.draw(st.floats(90.0, 219.0), label="h1")
        dh = data.draw(st.floats(0.5, 30.0), label="dh")
        sex = data.draw(st.sampled_from(["male", "female"]), label="sex")
        rv = reference_values(set_id, parameter, sex, age, [h1, h1 + dh], ancestry=_anc(set_id), unit=unit)
        assert rv.predicted[1] > rv.predicted[0]


class TestExtrapolation:
    """Outside the published range values are computed (edge spline, exact age) and flagged."""

    @pytest.mark.parametrize(("set_id", "parameter", "unit"),
                             [a for a in ALL if not a[1].startswith("FEV0_75")],
                             ids=[i for a, i in zip(ALL, ALL_IDS, strict=True)
                                  if not a[1].startswith("FEV0_75")])
    def test_flag_and_not_clamped(self, set_id, parameter, unit):
        """Ages just outside the range are flagged, finite, and differ from the edge value."""
        lo, hi = get_equation_set(set_id).age_range_for(parameter)
        ages = np.array([lo - 1.0, lo, (lo + hi) / 2, hi, hi + 5.0])
        rv = reference_values(set_id, parameter, "male", ages, 170.0, ancestry=_anc(set_id), unit=unit)
        assert rv.extrapolated.tolist() == [True, False, False, False, True]
        assert np.all(np.isfinite(rv.predicted)) and np.all(np.isfinite(rv.lln))
        assert rv.predicted[0] != rv.predicted[1] and rv.predicted[4] != rv.predicted[3]

    def test_beyond_table_uses_edge_spline_with_exact_age(self):
        """GLI-2012 FEV1 at 100 y = value at 95 y x exp(a2 (ln 100 - ln 95)): edge spline row."""
        table = json.loads((resources.files("pftwork.tables") / "gli-2012.json").read_text())
        a2 = next(m for m in table["content"]["models"]
                  if m["parameter"] == "FEV1" and m["sex"] == "female")["m"]["age"]
        rv = reference_values("gli-2012", "FEV1", "female", [95.0, 100.0], 160.0, ancestry="european")
        assert rv.predicted[1] == pytest.approx(rv.predicted[0] * math.exp(a2 * math.log(100 / 95)), rel=1e-12)

    def test_gli_2017_table_beyond_published_range(self):
        """GLI-2017 is published for 5-85 y (standards.md §1.5): 85-90 y is computed but flagged."""
        assert get_equation_set("gli-2017").age_range_for("DLCO") == (5.0, 85.0)
        rv = reference_values("gli-2017", "DLCO", "female", [84.0, 88.0], 160.0)
        assert rv.extrapolated.tolist() == [False, True]

    @pytest.mark.parametrize("height", [PLAUSIBLE_HEIGHT_CM[0] - 1, PLAUSIBLE_HEIGHT_CM[1] + 1])
    def test_implausible_height_flagged(self, height):
        """Heights outside pftwork's plausibility window are flagged (values still computed)."""
        rv = reference_values("gli-global-2022", "FVC", "female", 40.0, height)
        assert bool(rv.extrapolated) and math.isfinite(float(rv.predicted))

    @pytest.mark.parametrize(("age", "height"), [(np.nan, 170.0), (-3.0, 170.0), (40.0, 0.0), (40.0, np.nan)])
    def test_invalid_age_or_height_gives_nan(self, age, height):
        """Missing or non-positive age/height: nan values, flagged."""
        rv = reference_values("gli-global-2022", "FEV1", ["male", "female"], [age, 40.0], [height, 170.0],
                              measured=3.0)
        assert np.isnan(rv.predicted[0]) and np.isnan(rv.z[0]) and bool(rv.extrapolated[0])
        assert np.isfinite(rv.predicted[1]) and not rv.extrapolated[1]

    @pytest.mark.parametrize("parameter", ["FEV0_75", "FEV0_75/FVC"])
    def test_fev0_75_published_restriction(self, parameter):
        """GLI-2012 FEV0.75(/FVC): european 3-7 y only (GLI workbook notes); elsewhere nan, flagged."""
        rv = reference_values("gli-2012", parameter, "female", [5.0, 5.0, 2.5, 8.0], 110.0,
                              ancestry=["european", "north_east_asian", "european", "european"])
        assert rv.extrapolated.tolist() == [False, True, True, True]
        assert np.isfinite(rv.predicted[0]) and np.all(np.isnan(rv.predicted[1:]))


class TestInterpolation:
    """Splines are interpolated between the quarter-year rows (standards.md §1.2)."""

    def test_continuous_across_grid_rows(self):
        """Predicted values are continuous across a grid age (no step at the row)."""
        rv = reference_values("gli-global-2022", "FEV1", "male", [39.999999, 40.0, 40.000001], 175.0)
        assert np.ptp(rv.predicted) < 1e-6

    def test_spline_is_linear_between_rows(self):
        """ln M minus its closed-form part is linear in age between two rows (GLI-2017 VA, male)."""
        table = json.loads((resources.files("pftwork.tables") / "gli-2017.json").read_text())
        c = next(m for m in table["content"]["models"] if m["parameter"] == "VA" and m["sex"] == "male")
        ages = np.array([40.0, 40.05, 40.125, 40.25])
        M = lms("gli-2017", "VA", "male", ages, 180.0).M
        spline = np.log(M) - (c["m"]["intercept"] + c["m"]["height"] * math.log(180.0)
                              + c["m"]["age"] * np.log(ages))
        np.testing.assert_allclose(spline[1:3], np.interp(ages[1:3], ages[[0, 3]], spline[[0, 3]]), atol=1e-13)


class TestInputs:
    """Inputs: codes, broadcasting and the errors a caller can cause."""

    def test_sex_codes_equal_strings(self):
        """1/0 mean male/female, strings are read case-insensitively."""
        a = reference_values("gli-global-2022", "FVC", [1, 0], 40.0, 170.0).predicted
        b = reference_values("gli-global-2022", "FVC", ["MALE", "female"], 40.0, 170.0).predicted
        np.testing.assert_array_equal(a, b)
        assert a[0] > a[1]

    def test_broadcasting_and_to_dict(self):
        """Scalars broadcast against arrays; to_dict gives plain Python values for one subject."""
        rv = reference_values("gli-2021", "RV/TLC", "female", [30.0, 60.0], 165.0, measured=0.35)
        assert rv.z.shape == (2,)
        d = rv.to_dict(1)
        assert isinstance(d["z"], float) and isinstance(d["extrapolated"], bool)
        assert d["parameter"] == "RV/TLC" and 0.1 < d["predicted"] < 0.6  # a fraction, not %

    def test_ancestry_codes_equal_names(self):
        """Integer ancestry codes index ANCESTRIES."""
        a = reference_values("gli-2012", "FEV1", "male", 40.0, 175.0, ancestry=list(ANCESTRIES)).predicted
        b = reference_values("gli-2012", "FEV1", "male", 40.0, 175.0, ancestry=np.arange(5)).predicted
        np.testing.assert_array_equal(a, b)
        assert len(set(a.tolist())) == 5

    def test_unknown_set(self):
        """An unknown set id raises EquationSetError naming it and the valid ids."""
        with pytest.raises(EquationSetError, match=r"gli-2099.*gli-global-2022.*gli-2021"):
            reference_values("gli-2099", "FEV1", "male", 40.0, 175.0)

    def test_unknown_parameter(self):
        """A parameter the set lacks raises EquationSetError naming it and the valid ones."""
        with pytest.raises(EquationSetError, match=r"'FEF75'.*FEV1, FVC, FEV1/FVC"):
            reference_values("gli-global-2022", "FEF75", "male", 40.0, 175.0)
        with pytest.raises(EquationSetError, match="TLC"):
            get_equation_set("gli-2017").age_range_for("TLC")

    def test_sex_both_refused(self):
        """'both' raises CaseError that names the field and says to call once per sex."""
        with pytest.raises(CaseError, match=r"subject\.sex.*'both'.*once per sex"):
            reference_values("gli-global-2022", "FEV1", ["male", "both"], 40.0, 175.0)

    @pytest.mark.parametrize("sex", ["x", 2, 0.5])
    def test_bad_sex(self, sex):
        """Other sex values raise CaseError naming the field and value."""
        with pytest.raises(CaseError, match=r"subject\.sex"):
            reference_values("gli-global-2022", "FEV1", sex, 40.0, 175.0)

    def test_ancestry_required_and_checked(self):
        """gli-2012 needs a known ancestry (CaseError names the field and the valid groups)."""
        with pytest.raises(CaseError, match=r"subject\.ancestry.*european"):
            reference_values("gli-2012", "FEV1", "male", 40.0, 175.0)
        with pytest.raises(CaseError, match=r"subject\.ancestry.*'martian'"):
            reference_values("gli-2012", "FEV1", "male", 40.0, 175.0, ancestry="martian")

    def test_bad_unit_and_age(self):
        """A bad unit or a non-numeric age raises CaseError naming the field."""
        with pytest.raises(CaseError, match="unit"):
            reference_values("gli-2017", "DLCO", "male", 40.0, 175.0, unit="mmHg")
        with pytest.raises(CaseError, match=r"subject\.age_years"):
            reference_values("gli-2017", "DLCO", "male", "forty", 175.0)


class TestPublishedChecks:
    """Checks against published numbers (order-of-magnitude guards where stated)."""

    # standards.md §1.6.2 (DERIVED, male 40 y 175 cm, splines set to 0)
    NO_SPLINE = {"FRC": 3.295, "TLC": 6.697, "RV": 1.574, "RV/TLC": 0.2309, "ERV": 1.468,
                 "IC": 3.434, "VC": 5.179}

    @pytest.mark.parametrize("parameter", list(NO_SPLINE))
    def test_gli_2021_magnitude(self, parameter):
        """Within 0.8-1.25x of the spline-free value (a guard against cm/m or log/linear errors)."""
        rv = reference_values("gli-2021", parameter, "male", 40.0, 175.0)
        assert 0.8 < float(rv.predicted) / self.NO_SPLINE[parameter] < 1.25

    @pytest.mark.parametrize("parameter", ["DLCO", "KCO"])
    def test_si_traditional_factor(self, parameter):
        """Traditional / SI predicted is 2.987 (standards.md §4.6, VERIFIED-2nd) within 0.1 %:
        the two published tables are separate fits, so not exactly the conversion factor."""
        ages = np.linspace(5, 85, 33)
        si = reference_values("gli-2017", parameter, "female", ages, 160.0, unit="SI").predicted
        trad = reference_values("gli-2017", parameter, "female", ages, 160.0, unit="traditional").predicted
        np.testing.assert_allclose(trad / si, 2.987, rtol=1e-3)


class TestTables:
    """Provenance and checksums of the bundled tables."""

    @pytest.mark.parametrize("set_id", list(EQUATION_SETS))
    def test_checksum_matches_content(self, set_id):
        """EquationSet.table_sha256 is the sha256 of the file's canonical content."""
        document = json.loads((resources.files("pftwork.tables") / f"{set_id}.json").read_text())
        assert content_sha256(document["content"]) == get_equation_set(set_id).table_sha256
        assert table_checksums()[set_id] == document["header"]["content_sha256"]
        assert document["header"]["doi"].startswith("10.")
        assert "pyspiro 1.0.0" in get_equation_set(set_id).source

    def test_checksum_sees_one_digit(self):
        """Changing one coefficient changes the checksum."""
        document = json.loads((resources.files("pftwork.tables") / "gli-2021.json").read_text())
        document["content"]["models"][0]["m"]["intercept"] += 1e-4
        assert content_sha256(document["content"]) != get_equation_set("gli-2021").table_sha256

    def test_build_script_reproduces_tables(self):
        """scripts/build_tables.py --check rebuilds identical files from pyspiro 1.0.0's CSVs."""
        script = Path(__file__).resolve().parent.parent / "scripts" / "build_tables.py"
        done = subprocess.run([sys.executable, str(script), "--check"], capture_output=True, text=True)
        assert done.returncode == 0, done.stdout + done.stderr


class TestBlocks:
    """Large calls are evaluated block by block; the blocking must not change any value."""

    @pytest.mark.parametrize(("set_id", "parameter", "unit"),
                             [("gli-2012", "FEV1/FVC", "SI"), ("gli-2012", "FEV0_75", "SI"),
                              ("gli-2017", "KCO", "traditional"), ("gli-2021", "RV/TLC", "SI")])
    def test_small_blocks_give_same_values(self, monkeypatch, set_id, parameter, unit):
        """Blocks of 7 subjects (mixed sexes, ancestries, nan and out-of-range rows) = one block."""
        import pftwork.reference as reference

        rng = np.random.default_rng(11)
        n = 100
        child_only = parameter == "FEV0_75"  # european 3-7 y only: test around that window
        age = rng.uniform(2.0, 8.0, n) if child_only else rng.uniform(1.0, 99.0, n)
        age[[3, 50]] = np.nan
        height = rng.uniform(70.0, 240.0, n)
        sex = rng.integers(0, 2, n)
        ancestry = rng.integers(0, 2 if child_only else 5, n) if set_id == "gli-2012" else None
        y = rng.uniform(0.2, 5.0, n)
        one = reference_values(set_id, parameter, sex, age, height, measured=y, ancestry=ancestry, unit=unit)
        monkeypatch.setattr(reference, "BLOCK", 7)
        many = reference_values(set_id, parameter, sex, age, height, measured=y, ancestry=ancestry, unit=unit)
        for name in ("predicted", "lln", "uln", "z", "percent_predicted", "percentile", "extrapolated"):
            np.testing.assert_array_equal(getattr(one, name), getattr(many, name), err_msg=name)
        r_one = lms(set_id, parameter, sex, age, height, ancestry=ancestry, unit=unit)
        r_many = reference.lms(set_id, parameter, sex, age, height, ancestry=ancestry, unit=unit)
        np.testing.assert_array_equal(r_one.M, r_many.M)
        assert np.isfinite(one.predicted).sum() > 10
