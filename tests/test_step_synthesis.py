"""Step 8 (synthesis): overall pattern, severity, statement, summary keys.

Pattern rules follow INTERP-2022 Table 8 (standards.md §3.2, §3.10); summary keys are fixed by
design.md §5. Trade facts used as check values are common practice (marked).
"""

from __future__ import annotations

import pytest

from pftwork.interpret import interpret
from pftwork.interpret.cautions import CAUTIONS
from pftwork.interpret.synthesis import PATTERNS, SUMMARY_KEYS, pattern_of
from pftwork.interpret.values import value_at_z

SEX, AGE, HEIGHT = "female", 60.0, 160.0


def at(set_id: str, param: str, z: float) -> float:
    """Measured value at z for the test subject."""
    return value_at_z(set_id, param, SEX, AGE, HEIGHT, z)


def case(ratio_z: float, fvc_z: float, tlc_z: float | None = None) -> dict:
    """Spirometry at the given z-scores, TLC optional."""
    fvc = round(at("gli-global-2022", "FVC", fvc_z), 4)
    out = {"format": "pftwork-case/1",
           "subject": {"id": "s-01", "sex": SEX, "age_years": AGE, "height_cm": HEIGHT},
           "spirometry": {"pre": {"FEV1": round(fvc * at("gli-global-2022", "FEV1/FVC", ratio_z), 4),
                                  "FVC": fvc}}}
    if tlc_z is not None:
        out["volumes"] = {"TLC": round(at("gli-2021", "TLC", tlc_z), 4)}
    return out


class TestPatternOf:
    """Tests for `pattern_of` (INTERP-2022 Table 8)."""

    @pytest.mark.parametrize(("obs", "restr", "nonspec", "prism", "expected"), [
        (True, True, None, None, "mixed"),
        (True, False, None, None, "obstruction"),
        (True, None, None, None, "obstruction"),      # no TLC: obstruction stands
        (False, True, None, None, "restriction"),
        (None, True, None, None, "restriction"),      # volumes only
        (False, False, True, False, "non-specific"),
        (False, None, None, True, "PRISm"),
        (False, False, False, False, "normal"),
        (None, False, None, None, None),              # TLC normal, no FEV1/FVC: no pattern
        (None, None, None, None, None),               # nothing to judge
    ])
    def test_table(self, obs, restr, nonspec, prism, expected):
        """Each combination of step outputs gives one pattern."""
        assert expected == pattern_of(obs, restr, nonspec, prism)
        assert expected is None or expected in PATTERNS


class TestSynthesis:
    """Tests for the synthesis step through `interpret`."""

    @pytest.mark.parametrize(("ratio_z", "fvc_z", "tlc_z", "pattern", "severity"), [
        (0.0, 0.0, 0.0, "normal", None),
        (-3.0, -0.5, 0.5, "obstruction", None),   # severity from FEV1 z, checked below
        (0.0, -3.0, -3.0, "restriction", "moderate"),  # severity from TLC z
        (-2.5, -2.5, -2.0, "mixed", None),
        (0.0, -2.0, 0.0, "non-specific", "mild"),
        (0.0, -2.0, None, "PRISm", "mild"),
    ])
    def test_patterns(self, ratio_z, fvc_z, tlc_z, pattern, severity):
        """Common practice check values for each pattern (obstruction keeps TLC normal;
        restriction lowers TLC and VC with a normal ratio; mixed lowers ratio and TLC)."""
        result = interpret(case(ratio_z, fvc_z, tlc_z))

        assert pattern == result.summary["pattern"]
        if severity is not None:
            assert severity == result.summary["severity"]

    def test_obstruction_severity_matches_airflow(self):
        """The summary severity of an obstruction is the airflow step's FEV1-z grade."""
        result = interpret(case(-3.0, -1.5, 0.5))

        assert result.step("airflow").data["severity"] == result.summary["obstruction_severity"]
        assert result.summary["obstruction_severity"] == result.summary["severity"]

    def test_summary_keys(self):
        """The summary carries every design.md §5 key."""
        summary = interpret(case(0.0, 0.0)).summary

        assert set(SUMMARY_KEYS) <= set(summary)

    def test_nulls_when_absent(self):
        """Booleans are null when their data are absent (no volumes, no DLCO, no post)."""
        s = interpret(case(0.0, 0.0)).summary

        assert [s["restriction"], s["hyperinflation"], s["air_trapping"], s["dlco"],
                              s["kco"], s["bdr"]] == [None] * 6

    def test_statement_and_cautions(self):
        """The statement names the pattern; the cautions travel with the finding."""
        f = interpret(case(-3.0, -0.5, 0.5)).step("synthesis")

        assert "airflow obstruction" in f.conclusion
        assert f.caveats == CAUTIONS
        assert any("signing physician" in c for c in f.caveats)


class TestStatementWithVolumeFindings:
    """The statement never calls lung volumes normal while reporting hyperinflation or air
    trapping (INTERP-2022 Table 8 / standards.md §3.2: TLC > ULN and RV/TLC > ULN are
    abnormal lung-volume findings; from memory)."""

    def test_hyperinflation_not_called_normal_volumes(self):
        """Normal spirometry with TLC above the ULN: no 'lung volumes within normal limits'."""
        result = interpret(case(0.0, 0.0, 2.5))
        text = result.step("synthesis").conclusion

        assert result.summary["hyperinflation"] is True
        assert "lung volumes within normal limits" not in text
        assert "Hyperinflation" in text

    def test_plain_normal_still_says_so(self):
        """All normal: spirometry and lung volumes within normal limits."""
        text = interpret(case(0.0, 0.0, 0.0)).step("synthesis").conclusion

        assert "Spirometry and lung volumes within normal limits." in text

    def test_low_fvc_with_high_tlc_not_called_normal_spirometry(self):
        """FVC below the LLN (z < -1.645, INTERP-2022 §3.1) is never 'spirometry within normal
        limits', even when TLC is high and no named pattern applies."""
        result = interpret(case(0.0, -2.3, 2.0))
        text = result.step("synthesis").conclusion

        assert result.step("airflow").data["fvc_low"] is True
        assert "within normal limits" not in text
        assert "below the LLN" in text


class TestNoPatternWithoutSpirometry:
    """The pattern needs FEV1/FVC unless TLC itself is low (INTERP-2022 Table 8: obstruction is
    defined on FEV1/FVC; design.md §5: undecidable outputs are null, not guessed)."""

    def test_volumes_only_normal_tlc(self):
        """TLC normal and no spirometry: pattern null, restriction false, text says why."""
        data = case(0.0, 0.0, 0.0)
        del data["spirometry"]
        result = interpret(data)

        assert (result.summary["pattern"], result.summary["restriction"]) == (None, False)
        assert "without FEV1/FVC" in result.step("synthesis").conclusion

    def test_volumes_only_low_tlc_is_restriction(self):
        """TLC below the LLN is restriction even without spirometry."""
        data = case(0.0, 0.0, -2.5)
        del data["spirometry"]

        assert interpret(data).summary["pattern"] == "restriction"
