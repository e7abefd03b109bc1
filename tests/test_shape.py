"""Flow-volume shape descriptors (pftwork.quality.shape).

Published indices and thresholds: Empey, BMJ 1972 (FEV1 mL / PEF L/min > 10); Rotman et al.,
Chest 1975 (FEV1/PEF >= 10, FEV1/FEV0.5 >= 1.5, FIF50 <= 100 L/min, FEF50/FIF50 >= 1), as listed
in standards.md §3.8 and check value §6 #22. The concavity index, knee criteria and flat fraction
are our own definitions; they are checked against their closed forms on exact arrays and against
the synthetic model (pftwork.quality.synthetic, our own) whose knee position is known.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from pftwork.quality.curves import analyse_curve
from pftwork.quality.shape import (
    concavity_index,
    find_knee,
    flat_fraction,
    shape_descriptors,
    upper_airway_indices,
)
from pftwork.quality.synthetic import synthetic_manoeuvre


def _power_limb(k: float, pef: float = 8.0, fvc: float = 4.0) -> tuple[np.ndarray, np.ndarray]:
    """Exact descending limb F = PEF * x**k, x the remaining fraction of the volume."""
    v = np.linspace(0.0, fvc, 4001)
    return v, pef * ((fvc - v) / fvc) ** k


class TestConcavityIndex:
    """Our own concavity index: area between chord and curve over area under the chord."""

    @pytest.mark.parametrize("k", [0.5, 1.0, 2.0, 3.0])
    def test_closed_form(self, k: float) -> None:
        """For F = PEF x**k the index equals (k - 1)/(k + 1) (our definition, integrated exactly)."""
        v, f = _power_limb(k)

        assert (k - 1) / (k + 1) == pytest.approx(concavity_index(v, f, 4.0), abs=1e-3)

    def test_synthetic_ordering(self) -> None:
        """On analysed synthetic curves the index rises with the model's curvature."""
        values = []
        for k in (0.6, 1.0, 2.0, 3.0):
            m = synthetic_manoeuvre(curvature=k, vc_l=4.0, pef_l_s=7.0, expiration_time_s=25.0)
            values.append(shape_descriptors(analyse_curve(m.curve)).concavity_index)

        assert values == sorted(values)
        assert abs(values[1]) < 0.05
        assert values[0] == pytest.approx(-0.25, abs=0.05)
        assert values[2] == pytest.approx(1 / 3, abs=0.06)


class TestKnee:
    """Two-segment fit for an abrupt flow drop after PEF (our own criteria)."""

    @pytest.mark.parametrize("rate", [100.0, 1000.0])
    @pytest.mark.parametrize(("knee_at", "fraction"), [(0.15, 0.35), (0.1, 0.25), (0.25, 0.4)])
    def test_knee_found(self, knee_at: float, fraction: float, rate: float) -> None:
        """A modelled collapse knee is found near its true volume and flow."""
        m = synthetic_manoeuvre(knee_at=knee_at, knee_flow_fraction=fraction, rate_hz=rate,
                                noise_l=0.001)
        knee = shape_descriptors(analyse_curve(m.curve)).knee

        assert knee is not None and knee.present
        assert abs(knee.volume_l - m.truth["knee_volume_l"]) <= 0.15
        assert abs(knee.flow_l_s - m.truth["knee_flow_l_s"]) <= 0.6
        assert knee.sharpness >= 3.0

    @pytest.mark.parametrize("k", [0.6, 1.0, 2.0, 3.0])
    def test_smooth_limbs_have_no_knee(self, k: float) -> None:
        """Smoothly curved limbs (any curvature) are not called a knee."""
        m = synthetic_manoeuvre(curvature=k, vc_l=4.0, pef_l_s=7.0, expiration_time_s=14.0,
                                noise_l=0.001)
        knee = shape_descriptors(analyse_curve(m.curve)).knee

        assert knee is not None and not knee.present

    def test_short_limb(self) -> None:
        """A limb with < 0.2 L after PEF cannot be fitted."""
        v = np.linspace(0, 0.2, 50)

        assert find_knee(v, 5.0 - 20 * v, 0.2) is None


class TestFlatFraction:
    """Our own flattening measure: share of the limb's volume at >= 90 % of peak flow."""

    def test_half_sine(self) -> None:
        """A half-sine limb scores cos(pi*a) with sin(pi*a) = 0.9 (closed form, ~0.436)."""
        s = np.linspace(0, 1, 20001)
        flow = np.sin(np.pi * s)
        vol = (1 - np.cos(np.pi * s)) / 2
        a = math.asin(0.9) / math.pi

        assert math.cos(math.pi * a) == pytest.approx(flat_fraction(vol, -flow), abs=2e-3)

    def test_flattened_inspiration(self) -> None:
        """Clipping the inspiratory flow at 40 % of its peak raises the inspiratory score > 0.8."""
        normal = shape_descriptors(analyse_curve(synthetic_manoeuvre().curve))
        flat = shape_descriptors(analyse_curve(
            synthetic_manoeuvre(inspiratory_cap_fraction=0.4).curve))

        assert normal.inspiratory_flat_fraction == pytest.approx(0.436, abs=0.03)
        assert flat.inspiratory_flat_fraction > 0.8


class TestUpperAirwayIndices:
    """Published upper-airway obstruction indices (standards.md §3.8)."""

    def test_empey_check_value(self) -> None:
        """standards.md §6 #22: FEV1 2000 mL, PEF 180 L/min -> 11.1, flagged (Empey 1972 > 10)."""
        ua = upper_airway_indices(FEV1=2.0, PEF=3.0)

        assert round(ua.fev1_pef_ml_per_l_min, 1) == 11.1
        assert any("Empey" in f for f in ua.flags)

    def test_empey_boundary(self) -> None:
        """Exactly 10: not > 10 (Empey 1972) but >= 10 (Rotman 1975)."""
        ua = upper_airway_indices(FEV1=1.5, PEF=2.5)

        assert not any("Empey" in f for f in ua.flags)
        assert any("FEV1/PEF" in f and "Rotman" in f for f in ua.flags)

    @pytest.mark.parametrize(("fev05", "flagged"), [(2.0, True), (2.01, False)])
    def test_fev1_fev05(self, fev05: float, flagged: bool) -> None:
        """FEV1/FEV0.5 >= 1.5 is flagged (Rotman 1975); 3.0/2.0 is exactly 1.5."""
        ua = upper_airway_indices(FEV1=3.0, PEF=9.0, FEV0_5=fev05)

        assert flagged == any("FEV0.5" in f for f in ua.flags)

    @pytest.mark.parametrize(("fif50_l_min", "flagged"), [(100.0, True), (100.5, False)])
    def test_fif50(self, fif50_l_min: float, flagged: bool) -> None:
        """FIF50 <= 100 L/min is flagged (Rotman 1975), boundary included."""
        ua = upper_airway_indices(FEV1=3.0, PEF=9.0, FIF50=fif50_l_min / 60.0)

        assert flagged == any("FIF50 " in f for f in ua.flags)

    @pytest.mark.parametrize(("fef50", "flagged"), [(4.0, True), (3.96, False)])
    def test_fef50_fif50(self, fef50: float, flagged: bool) -> None:
        """FEF50/FIF50 >= 1 is flagged (Rotman 1975)."""
        ua = upper_airway_indices(FEV1=3.0, PEF=9.0, FEF50=fef50, FIF50=4.0)

        assert flagged == any("FEF50/FIF50" in f for f in ua.flags)

    def test_missing_inputs(self) -> None:
        """Missing inputs give None, never a division error."""
        ua = upper_airway_indices(FEV1=None, PEF=None)

        assert (ua.fev1_pef_ml_per_l_min, ua.fev1_fev0_5,
                                                ua.fif50_l_min, ua.fef50_fif50, ua.flags) == (None, None, None, None, ())

    def test_variable_extrathoracic_pattern(self) -> None:
        """A clipped inspiratory limb lowers FIF50 so FEF50/FIF50 > 1 (INTERP-2005/2022 Table 3)."""
        normal = shape_descriptors(analyse_curve(synthetic_manoeuvre().curve)).upper_airway
        clipped = shape_descriptors(analyse_curve(synthetic_manoeuvre(
            inspiratory_cap_fraction=0.25, inspiratory_time_s=1.5).curve)).upper_airway

        assert normal.fef50_fif50 < 1.0
        assert clipped.fef50_fif50 > 1.0
        assert any("FEF50/FIF50" in f for f in clipped.flags)

    def test_to_dict(self) -> None:
        """ShapeDescriptors.to_dict() nests the knee and indices as plain dictionaries."""
        d = shape_descriptors(analyse_curve(synthetic_manoeuvre(knee_at=0.15).curve)).to_dict()

        assert d["knee"]["present"] is True
        assert "flags" in d["upper_airway"]


class TestSuggestiveCombination:
    """pftwork's own combination rule over the published indices (Empey, BMJ 1972: FEV1 mL /
    PEF L/min > 10; Rotman et al., Chest 1975: four criteria, standards.md §3.8)."""

    def test_empey_alone_is_suggestive(self):
        """Empey > 10 on its own suggests upper-airway obstruction."""
        assert upper_airway_indices(2.0, 3.0).suggestive  # 2000 mL / 180 L/min = 11.1

    def test_single_rotman_criterion_is_not(self):
        """FEV1/FEV0.5 = 1.6 (>= 1.5) with a normal Empey index is one criterion only."""
        ua = upper_airway_indices(3.2, 8.0, FEV0_5=2.0)  # Empey 6.7

        assert any("FEV0.5" in f for f in ua.flags)
        assert not ua.suggestive

    def test_two_rotman_criteria_are(self):
        """FEV1/FEV0.5 >= 1.5 and FIF50 <= 100 L/min together suggest it."""
        ua = upper_airway_indices(3.2, 8.0, FEV0_5=2.0, FEF50=1.5, FIF50=1.6)  # 96 L/min

        assert ua.suggestive
