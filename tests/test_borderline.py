"""Borderline awareness: flip probability of LLN/ULN decisions under measurement repeatability.

The model (our own) is Φ(−|m − limit| / sd); Φ values are standard normal table values. The
default FEV1/FVC sd reads the SPIRO-2019 repeatability tolerance 0.150 L (standards.md §2.3) as a
repeatability coefficient 2.77 × sd (our own reading, documented in the module).
"""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from pftwork.interpret import interpret
from pftwork.interpret.borderline import BORDERLINE_P, DEFAULT_SD, flip_probability
from pftwork.interpret.values import value_at_z

SEX, AGE, HEIGHT = "male", 45.0, 178.0


def case_at(ratio_z: float, trials: bool = False) -> dict:
    """FVC at z 0 and FEV1/FVC at ``ratio_z``; optionally as three close trials."""
    fvc = round(value_at_z("gli-global-2022", "FVC", SEX, AGE, HEIGHT, 0.0), 3)
    fev1 = round(fvc * value_at_z("gli-global-2022", "FEV1/FVC", SEX, AGE, HEIGHT, ratio_z), 3)
    pre = ({"trials": [{"FEV1": fev1 - d, "FVC": fvc - d, "BEV": 0.05, "FET": 9.0,
                        "plateau": True, "FIVC": fvc - d} for d in (0.0, 0.02, 0.04)]}
           if trials else {"FEV1": fev1, "FVC": fvc})
    return {"format": "pftwork-case/1",
            "subject": {"id": "bl-01", "sex": SEX, "age_years": AGE, "height_cm": HEIGHT},
            "spirometry": {"pre": pre}}


class TestFlipProbability:
    """Tests for `flip_probability`."""

    @pytest.mark.parametrize(("measured", "limit", "sd", "expected"), [
        (1.0, 1.0, 0.1, 0.5),          # on the limit: a coin toss
        (1.1, 1.0, 0.1, 0.158655),     # 1 sd away: Φ(−1)
        (0.9, 1.0, 0.1, 0.158655),     # symmetric
        (1.1645, 1.0, 0.1, 0.049985),  # 1.645 sd: Φ(−1.645) ≈ 0.05
        (1.3, 1.0, 0.1, 0.001350),     # 3 sd: Φ(−3)
    ])
    def test_normal_table(self, measured, limit, sd, expected):
        """Values match the standard normal table."""
        assert pytest.approx(expected, abs=1e-5) == flip_probability(measured, limit, sd)

    def test_default_sd(self):
        """Default FEV1 sd = 0.150 L / 2.77 (SPIRO-2019 tolerance read as 2.77 sd)."""
        assert pytest.approx(0.05415, abs=1e-5) == DEFAULT_SD["FEV1"][1]


class TestInChain:
    """Borderline decisions listed in the summary."""

    def test_near_limit_listed(self):
        """FEV1/FVC at z -1.66 (just below the LLN) is a borderline obstruction call."""
        result = interpret(case_at(-1.66))
        listed = [b for b in result.summary["borderline"] if b["decision"] == "obstruction"]

        assert result.summary["obstruction"] is True
        assert len(listed) == 1 and listed[0]["p_flip"] >= BORDERLINE_P

    def test_far_from_limit_not_listed(self):
        """FEV1/FVC at z -4 is not borderline."""
        result = interpret(case_at(-4.0))

        assert not [b for b in result.summary["borderline"] if b["decision"] == "obstruction"]
        full = [b for b in result.borderline if b["decision"] == "obstruction"][0]
        assert full["p_flip"] < 0.01

    def test_source_from_trials(self):
        """With three trials the sd comes from the session itself and says so."""
        result = interpret(case_at(-1.66, trials=True))
        fev1 = [b for b in result.borderline if b["decision"] == "fev1_low"][0]

        assert "session trials" in fev1["sd_source"]
        assert pytest.approx(0.02, abs=1e-9) == fev1["sd"]

    def test_default_source_named(self):
        """Without trials the sd source names the documented default."""
        fev1 = [b for b in interpret(case_at(-1.66)).borderline if b["decision"] == "fev1_low"][0]

        assert "default" in fev1["sd_source"]


class TestProperties:
    """Invariants of the flip model (our own model: properties, not published values)."""

    @given(st.floats(-10, 10), st.floats(-10, 10), st.floats(0.001, 5))
    def test_bounded_and_symmetric(self, m, limit, sd):
        """0 <= p <= 0.5 and mirroring the value around the limit gives the same p."""
        p = flip_probability(m, limit, sd)

        assert 0.0 <= p <= 0.5
        assert flip_probability(2 * limit - m, limit, sd) == pytest.approx(p, abs=1e-12)

    @given(st.floats(0.0, 5.0), st.floats(0.0, 5.0), st.floats(0.01, 2))
    def test_decreases_with_distance(self, d1, d2, sd):
        """Further from the limit, less likely to flip."""
        near, far = sorted([d1, d2])

        assert flip_probability(far, 0.0, sd) <= flip_probability(near, 0.0, sd) + 1e-15
