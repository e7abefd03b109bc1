"""Lung-volume repeatability and derived TLC/RV (pftwork.quality.plethysmography).

Sources (through standards.md §5): LV-2005 = Wanger et al., Eur Respir J 2005;26:511 — FRCpleth
repeatability (max - min)/mean <= 5 % over >= 3 values ("±5 %" VERIFIED-2nd [S33]; formula FROM
MEMORY); He dilution within 10 % (FROM MEMORY); FRC = ERV + RV, TLC = VC + RV = FRC + IC
(VERIFIED-2nd [S33, S45]); derivation methods A and B (FROM MEMORY). Invented values.
"""

from __future__ import annotations

import json

import pytest

from pftwork.case_model import Volumes, VolumeTrial
from pftwork.quality import quality_block
from pftwork.quality.plethysmography import assess_plethysmography


def _frc(*values: float, method: str = "plethysmography", **kw: float) -> Volumes:
    return Volumes(method=method, trials=tuple(VolumeTrial(FRC=v, **kw) for v in values))


class TestRepeatability:
    """LV-2005 FRC repeatability."""

    @pytest.mark.parametrize(("values", "repeatable"), [
        ((3.90, 4.10, 4.00), True),    # 0.20 / 4.00 = 5.0 % exactly
        ((3.90, 4.11, 4.00), False),   # 0.21 / 4.003 = 5.2 %
        ((3.61, 3.55, 3.64), True),    # design.md example, 2.5 %
    ])
    def test_pleth_5_percent(self, values: tuple[float, ...], repeatable: bool) -> None:
        """(max - min)/mean <= 5 % with three values, boundary included."""
        q = assess_plethysmography(_frc(*values))

        assert q.repeatable == repeatable
        assert q.derived["FRC"] == pytest.approx(sum(values) / 3)

    def test_fewer_than_three(self) -> None:
        """Two plethysmographic values: spread given, repeatability not assessable (None)."""
        q = assess_plethysmography(_frc(3.0, 3.05))

        assert q.repeatable is None
        assert q.spread == pytest.approx(0.0165, abs=1e-4)
        assert any("needs 3" in n for n in q.notes)

    @pytest.mark.parametrize(("values", "repeatable"), [((2.85, 3.15), True),
                                                        ((2.80, 3.15), False)])
    def test_dilution_10_percent(self, values: tuple[float, float], repeatable: bool) -> None:
        """Helium dilution: two values within 10 % (0.30 / 3.00 exactly; FROM MEMORY)."""
        q = assess_plethysmography(_frc(*values, method="helium dilution"))

        assert q.repeatable == repeatable

    def test_no_frc(self) -> None:
        """No FRC trials: nothing derived, not assessable."""
        q = assess_plethysmography(Volumes(method="plethysmography"))

        assert (q.repeatable, q.derived) == (None, {})


class TestDerivation:
    """Derived TLC and RV, method named."""

    def test_method_a(self) -> None:
        """ERV and VC: RV = mean FRC - mean ERV = 2.0; TLC = RV + largest VC = 6.0."""
        trials = (VolumeTrial(FRC=3.0, ERV=1.0, VC=3.9), VolumeTrial(FRC=3.05, ERV=1.1, VC=4.0),
                  VolumeTrial(FRC=2.95, ERV=0.9))
        q = assess_plethysmography(Volumes(method="plethysmography", trials=trials))

        assert q.derived["RV"] == pytest.approx(2.0)
        assert q.derived["TLC"] == pytest.approx(6.0)
        assert q.derived["RV/TLC"] == pytest.approx(2.0 / 6.0)
        assert q.derivation.startswith("method A")

    def test_method_b(self) -> None:
        """IC and VC: TLC = mean FRC + mean IC = 5.5; RV = TLC - largest VC = 1.5."""
        q = assess_plethysmography(_frc(3.0, 3.0, 3.0, IC=2.5, VC=4.0))

        assert q.derived["TLC"] == pytest.approx(5.5)
        assert q.derived["RV"] == pytest.approx(1.5)
        assert q.derivation.startswith("method B")

    def test_method_b_external_vc(self) -> None:
        """A larger VC from elsewhere in the session (e.g. FVC) is used for RV."""
        q = assess_plethysmography(_frc(3.0, 3.0, 3.0, IC=2.5), largest_vc_l=4.2)

        assert q.derived["RV"] == pytest.approx(1.3)

    def test_tlc_only(self) -> None:
        """IC without any VC gives TLC only."""
        q = assess_plethysmography(_frc(3.0, 3.0, 3.0, IC=2.5))

        assert "RV" not in q.derived and q.derived["TLC"] == pytest.approx(5.5)

    def test_quality_block(self) -> None:
        """volumes_repeatable and notes reach the quality block; JSON-serialisable."""
        q = assess_plethysmography(_frc(3.90, 4.11, 4.00))
        block = quality_block(volumes=q)

        assert block["volumes_repeatable"] is False
        assert block["FEV1_grade"] is None
        json.dumps(block)
        json.dumps(q.to_dict())
