"""Tests of pftwork.lms, the generic LMS (Box-Cox Cole-Green) functions.

Vectors come from standards.md §1.1.1 (Cole & Green 1992 via S1, and DERIVED arithmetic
from the formulas in §1.1) and from the GLI-2021 equations in standards.md §1.6.1 (S9b).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import norm

from pftwork import lms

# standards.md §1.1.1 (Cole & Green 1992 via S1)
L1, M1, S1 = -0.1600954, 9.476500305, 0.11218624


class TestZScore:
    """Tests for `z_score`."""

    def test_published_vector(self):
        """y = 8.2 gives z = -1.304701 (standards.md §1.1.1, Cole & Green 1992 via S1)."""
        assert pytest.approx(lms.z_score(8.2, L1, M1, S1), abs=5e-7) == -1.304701

    def test_l_zero_uses_log_form(self):
        """With L = 0, z = ln(y/M)/S (standards.md §1.1 table, L = 0 column)."""
        expected = math.log(3.0 / 3.5) / 0.12
        assert expected == pytest.approx(lms.z_score(3.0, 0.0, 3.5, 0.12), rel=1e-12)

    def test_l_near_zero_is_continuous(self):
        """|L| < 1e-7 is the log form, and L = 1e-6 is already within 1e-6 of it (DERIVED)."""
        at_zero = lms.z_score(3.0, 0.0, 3.5, 0.12)
        tiny = lms.z_score(3.0, 5e-8, 3.5, 0.12)
        small = lms.z_score(3.0, 1e-6, 3.5, 0.12)
        assert at_zero == tiny
        assert at_zero == pytest.approx(small, abs=1e-6)

    def test_vectorised_matches_scalar(self):
        """Arrays broadcast and give the scalar result element by element."""
        y = np.array([7.0, 8.2, 11.0])
        expected = [lms.z_score(v, L1, M1, S1) for v in y]
        np.testing.assert_allclose(lms.z_score(y, L1, M1, S1), expected, rtol=1e-14)

    def test_missing_value_gives_nan(self):
        """A nan measurement gives a nan z."""
        assert np.isnan(lms.z_score(np.nan, L1, M1, S1))


class TestValueAtZ:
    """Tests for `value_at_z`, `lower_limit` and `upper_limit`."""

    def test_exact_fifth_centile(self):
        """The exact 5th-centile quantile gives 7.900755 (standards.md §1.1.1, via S1)."""
        z05 = norm.ppf(0.05)
        assert pytest.approx(lms.value_at_z(z05, L1, M1, S1), abs=5e-7) == 7.900755

    def test_lln_with_1645(self):
        """LLN with the GLI constant 1.645 is 7.900629 (standards.md §1.1.1, DERIVED)."""
        assert pytest.approx(lms.lower_limit(L1, M1, S1), abs=5e-7) == 7.900629

    def test_positive_l_limits(self):
        """L=0.8, M=3.5, S=0.12: LLN 2.823318, ULN 4.204034 (standards.md §1.1.1, DERIVED)."""
        assert pytest.approx(lms.lower_limit(0.8, 3.5, 0.12), abs=5e-7) == 2.823318
        assert pytest.approx(lms.upper_limit(0.8, 3.5, 0.12), abs=5e-7) == 4.204034

    def test_l_zero_lln(self):
        """L=0, M=3.5, S=0.12: LLN 2.873018 (standards.md §1.1.1, DERIVED)."""
        assert pytest.approx(lms.lower_limit(0.0, 3.5, 0.12), abs=5e-7) == 2.873018

    def test_round_trip(self):
        """z of the LLN is -1.645 and z of the ULN +1.645 (standards.md §1.1.1 round trip)."""
        L = np.array([0.8, 0.0, -0.16, 1.9])
        M = np.array([3.5, 3.5, 9.4, 0.8])
        S = np.array([0.12, 0.12, 0.11, 0.07])
        np.testing.assert_allclose(lms.z_score(lms.lower_limit(L, M, S), L, M, S), -1.645, rtol=1e-12)
        np.testing.assert_allclose(lms.z_score(lms.upper_limit(L, M, S), L, M, S), 1.645, rtol=1e-12)

    def test_undefined_centile_is_nan(self):
        """1 + L*S*z <= 0 has no centile: nan (standards.md §1.1 implementation notes)."""
        # L*S*z = 2 * 0.5 * -1 = -1  -> base 0; and -1.2 -> base < 0
        values = lms.value_at_z(np.array([-1.0, -1.2, 0.0]), 2.0, 3.5, 0.5)
        assert np.isnan(values[0]) and np.isnan(values[1])
        assert values[2] == 3.5

    def test_other_z(self):
        """A custom z (2.5th centile, z = 1.96) is supported for stricter limits."""
        assert lms.value_at_z(-1.96, 0.8, 3.5, 0.12) == lms.lower_limit(0.8, 3.5, 0.12, z=1.96)


class TestPercentile:
    """Tests for `percentile`."""

    def test_published_vector(self):
        """Φ(z) for y = 8.2 is 0.09599727 (standards.md §1.1.1, via S1), i.e. 9.599727 %."""
        z = lms.z_score(8.2, L1, M1, S1)
        assert pytest.approx(lms.percentile(z), abs=5e-6) == 9.599727

    def test_lln_is_fifth_percentile(self):
        """z = -1.645 is the 4.998 % point (standard normal table)."""
        assert pytest.approx(lms.percentile(-1.645), abs=1e-4) == 4.9985


class TestPercentPredicted:
    """Tests for `percent_predicted`."""

    def test_at_median(self):
        """A value equal to M is 100 % predicted (definition, standards.md §1.1)."""
        np.testing.assert_array_equal(lms.percent_predicted([2.0, 3.5], [2.0, 3.5]), [100.0, 100.0])

    def test_ratio(self):
        """2.8 of 3.5 is 80 % predicted."""
        assert pytest.approx(lms.percent_predicted(2.8, 3.5), rel=1e-15) == 80.0


class TestGli2021SWithoutSpline:
    """S of the GLI-2021 parameters without an S spline (standards.md §1.6.1 notes, DERIVED)."""

    @pytest.mark.parametrize(
        ("parameter", "sex", "expected"),
        [("VC", "male", 0.122545), ("ERV", "male", 0.390419), ("IC", "male", 0.169276),
         ("VC", "female", 0.122209)],
    )
    def test_s_at_40(self, parameter, sex, expected):
        """pftwork's S at 40 y equals the printed equation's value (Hall 2021 via S9b)."""
        from pftwork.reference import lms as reference_lms

        result = reference_lms("gli-2021", parameter, sex, 40.0, 175.0)
        assert expected == pytest.approx(float(result.S), abs=5e-7)
