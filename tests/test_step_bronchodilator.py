"""Step 5 (bronchodilator response): INTERP-2022 rule beside the ATS/ERS 2005 rule.

Sources: INTERP-2022 — (post − pre)/predicted > 10 % in FEV1 or FVC (standards.md §3.5, VERIFIED
[S17a]); INTERP-2005 Table 9 — >= 12 % and >= 200 mL from baseline (VERIFIED [S16a]); worked
vectors of standards.md §3.5 (DERIVED), including the strict "> 10 %" edge at 0.32/3.20.
"""

from __future__ import annotations

import pytest

from pftwork.case import load_case
from pftwork.interpret.bronchodilator import bdr_2005, bdr_2022, bronchodilator
from pftwork.interpret.finding import Finding

OK = Finding("validity", "t", "ok", "acceptable", data={"stop": False})
CASE = load_case({"format": "pftwork-case/1",
                  "subject": {"id": "b-01", "sex": "male", "age_years": 40, "height_cm": 175},
                  "spirometry": {"pre": {"FEV1": 2.0, "FVC": 3.0}, "post": {"FEV1": 2.1, "FVC": 3.0},
                                 "bronchodilator": {"agent": "salbutamol", "dose": "400 microgram",
                                                    "minutes_after": 15}}})

#: standards.md §3.5: pre, post, predicted, 2022 % pred, 2022 positive, 2005 %, mL, 2005 positive
VECTORS = [
    (2.00, 2.35, 3.20, 10.94, True, 17.5, 350, True),
    (1.20, 1.45, 3.00, 8.33, False, 20.8, 250, True),    # discordant
    (1.00, 1.15, 3.00, 5.00, False, 15.0, 150, False),   # 2005: volume < 200 mL
    (3.50, 3.85, 4.00, 8.75, False, 10.0, 350, False),   # 2005: % < 12
    (2.00, 2.32, 3.20, 10.00, False, 16.0, 320, True),   # 2022: exactly 10 % is not > 10 %
]


def _values(fev1=(2.0, 2.0, 3.2), fvc=(3.0, 3.0, 4.0), ratio_z=(None, None)) -> dict:
    """Values block from (pre, post, predicted) triples."""
    def block(i):
        return {"FEV1": {"measured": fev1[i], "predicted": fev1[2]},
                "FVC": {"measured": fvc[i], "predicted": fvc[2]},
                "FEV1/FVC": {"measured": fev1[i] / fvc[i], "z": ratio_z[i]}}
    return {"pre": block(0), "post": block(1), "volumes": {}, "diffusion": {}}


class TestRules:
    """Tests for `bdr_2022` and `bdr_2005` on the standards.md §3.5 vectors."""

    @pytest.mark.parametrize(("pre", "post", "pred", "pct22", "pos22", "pct05", "ml", "pos05"),
                             VECTORS)
    def test_vectors(self, pre, post, pred, pct22, pos22, pct05, ml, pos05):
        """Both rules reproduce the worked table, including the strict 10 % edge."""
        got22 = bdr_2022(pre, post, pred)
        got05 = bdr_2005(pre, post)

        assert pytest.approx(pct22, abs=0.005) == got22[0] and pos22 == got22[1]
        assert pytest.approx(pct05, abs=0.05) == got05[0] and ml == got05[1] and pos05 == got05[2]

    def test_float_noise_does_not_decide(self):
        """0.32/3.20 must compare as exactly 10 % (not 10.000000000000002)."""
        assert bdr_2022(2.00, 2.32, 3.20) == (10.0, False)

    @pytest.mark.parametrize(("pre", "post", "expected"), [
        (1.50, 1.70, True),    # +200 mL exactly, +13.3 %: >= both
        (1.00, 1.199, False),  # +199 mL
        (1.70, 1.90, False),   # +200 mL but +11.8 %
        (2.50, 2.80, True),    # +300 mL, +12.0 % exactly
    ])
    def test_2005_edges(self, pre, post, expected):
        """The 2005 thresholds are inclusive (>= 12 % and >= 200 mL)."""
        assert expected == bdr_2005(pre, post)[2]


class TestStep:
    """Tests for `bronchodilator` (the step)."""

    def test_discordance_made_explicit(self):
        """2022 negative, 2005 positive: the disagreement is stated in the conclusion."""
        step = bronchodilator(CASE, _values(fev1=(1.20, 1.45, 3.00)), {}, OK)

        assert (step.data["bdr"], step.data["bdr_2005"],
               step.data["discordant"]) == (False, True, True)
        assert "disagree" in step.conclusion

    def test_fvc_alone_counts(self):
        """A > 10 % of predicted FVC change is a response even when FEV1 does not change."""
        step = bronchodilator(CASE, _values(fvc=(3.0, 3.45, 4.0)), {}, OK)

        assert True is step.data["bdr"]
        assert pytest.approx(11.25) == step.data["fvc_change_pct_pred"]

    def test_ratio_normalisation_reported_separately(self):
        """FEV1/FVC moving from below to within limits is flagged apart from BDR."""
        step = bronchodilator(CASE, _values(ratio_z=(-2.0, -1.0)), {}, OK)

        assert True is step.data["ratio_normalised"]
        assert False is step.data["bdr"]

    def test_not_assessed_without_post(self):
        """Without post-bronchodilator values the outputs are null."""
        values = _values()
        values["post"] = {}
        step = bronchodilator(CASE, values, {}, OK)

        assert (step.status, step.data["bdr"],
               step.data["bdr_2005"]) == ("not_assessed", None, None)

    def test_sources_named(self):
        """The finding names both standards."""
        step = bronchodilator(CASE, _values(), {}, OK)

        assert "INTERP-2022" in step.source and "INTERP-2005" in step.source


class TestPartialJudgement:
    """"No response" needs both FEV1 and FVC judged; a response in either is a response
    (INTERP-2022: FEV1 or FVC > 10 % of predicted; ATS/ERS 2005: FEV1 and/or FVC)."""

    @staticmethod
    def _case(post: dict) -> dict:
        return {"format": "pftwork-case/1",
                "subject": {"id": "bd", "sex": "female", "age_years": 40.0, "height_cm": 165.0},
                "spirometry": {"pre": {"FEV1": 2.40, "FVC": 3.40}, "post": post}}

    def test_fev1_only_without_response_is_undecided(self):
        """Post-BD FEV1 only, +60 mL: no response in FEV1, FVC unknown -> null, not False."""
        from pftwork.interpret import interpret

        step = interpret(self._case({"FEV1": 2.46})).step("bronchodilator")

        assert step.data["bdr"] is None
        assert step.data["bdr_2005"] is None
        assert "cannot be excluded" in step.conclusion

    def test_fev1_only_with_response_is_a_response(self):
        """Post-BD FEV1 only, +500 mL (> 10 % of predicted, >= 12 % and >= 200 mL): positive."""
        from pftwork.interpret import interpret

        step = interpret(self._case({"FEV1": 2.90})).step("bronchodilator")

        assert step.data["bdr"] is True
        assert step.data["bdr_2005"] is True

    def test_both_judged_without_response_is_negative(self):
        """Both judged, both small: False under both rules."""
        from pftwork.interpret import interpret

        step = interpret(self._case({"FEV1": 2.46, "FVC": 3.45})).step("bronchodilator")

        assert step.data["bdr"] is False
        assert step.data["bdr_2005"] is False
