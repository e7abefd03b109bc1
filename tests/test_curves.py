"""Raw forced-manoeuvre analysis (pftwork.quality.curves) on synthetic curves of known truth.

Truth comes from the closed-form model in pftwork.quality.synthetic (our own model; its
documented formulas give time zero, BEV, FEV1, FVC, FET, PEF, FIVC exactly). Definitions checked
are those of SPIRO-2019 (time zero by back-extrapolation, BEV, EOFE plateau < 0.025 L in the last
1 s, FET >= 15 s; standards.md §2.1) and ATS/ERS 2005 Table 6 (time zero by back-extrapolation).
Tolerances are ours: volumes 0.010 L, FET 0.1 s, PEF 5 % (the model's peak is a corner that any
smoothing filter rounds off), flows max(0.2 L/s, 5 %).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from pftwork.case_model import Curve
from pftwork.errors import CurveError
from pftwork.quality.curves import PLOT_POINTS, analyse_curve
from pftwork.quality.synthetic import synthetic_manoeuvre

SCENARIOS = {
    "normal": {},
    "obstructive": {"curvature": 2.5, "vc_l": 3.5, "pef_l_s": 5.0, "expiration_time_s": 12.0},
    "hesitant": {"hesitation_volume_l": 0.2, "hesitation_time_s": 0.3},
    "short": {"expiration_time_s": 2.0},
    "restrictive": {"curvature": 0.6, "vc_l": 2.4, "pef_l_s": 6.0, "expiration_time_s": 4.0},
}
RATES = (100.0, 137.0, 1000.0)


def _check_recovery(scenario: dict, rate: float, noise: float, seed: int = 0) -> None:
    m = synthetic_manoeuvre(rate_hz=rate, noise_l=noise, seed=seed, **scenario)
    a = analyse_curve(m.curve)
    truth = m.truth
    for name in ("BEV", "FEV1", "FVC", "FEV0_5", "FIVC"):
        assert abs(getattr(a, name) - truth[name]) <= 0.010, (name, getattr(a, name), truth[name])
    assert abs(a.FET - truth["FET"]) <= 0.1
    assert abs(a.PEF - truth["PEF"]) <= 0.05 * truth["PEF"]
    for name in ("FEF25", "FEF50", "FEF75", "PIF", "FIF50"):
        assert abs(getattr(a, name) - truth[name]) <= max(0.2, 0.05 * truth[name]), name
    assert abs(a.time_zero_s - truth["time_zero_s"]) <= 0.01
    if abs(truth["last_second_volume_l"] - 0.025) > 0.005:  # not a knife-edge plateau
        assert truth["plateau"] == a.plateau


class TestRecovery:
    """analyse_curve recovers the synthetic model's known values."""

    @pytest.mark.parametrize("rate", RATES)
    @pytest.mark.parametrize("name", sorted(SCENARIOS))
    def test_noise_free(self, name: str, rate: float) -> None:
        """Noise-free curves at 100, 137 and 1000 Hz: every value within tolerance."""
        _check_recovery(SCENARIOS[name], rate, 0.0)

    @pytest.mark.parametrize("seed", range(3))
    @pytest.mark.parametrize("rate", RATES)
    @pytest.mark.parametrize("name", ["normal", "obstructive", "short"])
    def test_noisy(self, name: str, rate: float, seed: int) -> None:
        """With 2 mL of white volume noise, including the odd 137 Hz rate, still within tolerance."""
        _check_recovery(SCENARIOS[name], rate, 0.002, seed)

    def test_jittered_time_stamps(self) -> None:
        """Irregular time stamps (jitter 20 % of a step) are resampled and give the same values."""
        m = synthetic_manoeuvre(rate_hz=500)
        t = m.curve.time_s + np.random.default_rng(1).uniform(-0.0004, 0.0004, m.curve.time_s.size)
        t[0] = 0.0
        v = np.interp(t, m.curve.time_s, m.curve.volume_l)
        a = analyse_curve(Curve(t, v))

        assert abs(a.FEV1 - m.truth["FEV1"]) <= 0.010
        assert abs(a.FVC - m.truth["FVC"]) <= 0.010

    def test_fev6_absent_when_fet_short(self) -> None:
        """FEV6 is None when expiration ends before 6 s (it cannot be read off the curve)."""
        a = analyse_curve(synthetic_manoeuvre(expiration_time_s=4.0).curve)

        assert a.FEV6 is None
        assert a.FEV1 is not None

    def test_no_inspiratory_limb(self) -> None:
        """Without an inspiratory limb FIVC, PIF and FIF50 are None and no plot limb is given."""
        m = synthetic_manoeuvre()
        keep = m.curve.time_s <= m.truth["time_zero_s"] + m.truth["FET"]
        a = analyse_curve(Curve(m.curve.time_s[keep], m.curve.volume_l[keep]))

        assert (a.FIVC, a.PIF, a.FIF50, a.fivc_excess_l) == (None, None, None, None)
        assert a.insp_volume_l.size == 0


class TestEndOfForcedExpiration:
    """SPIRO-2019 EOFE criteria 1 and 2 as read from the curve (standards.md §2.1)."""

    def test_plateau_reached(self) -> None:
        """A long blow whose last second adds < 0.025 L has a plateau (SPIRO-2019 EOFE 1)."""
        a = analyse_curve(synthetic_manoeuvre().curve)

        assert a.plateau
        assert a.last_second_volume_l < 0.025
        assert not a.early_termination

    def test_short_blow_has_no_plateau(self) -> None:
        """A 1.2-s blow stops with flow still high: no plateau, FET < 15 s, abrupt end (SPIRO-2019)."""
        a = analyse_curve(synthetic_manoeuvre(expiration_time_s=1.2).curve)

        assert not a.plateau
        assert a.early_termination
        assert a.abrupt_end

    def test_fet_15_s(self) -> None:
        """A 16-s obstructive blow without plateau still meets EOFE by FET >= 15 s (SPIRO-2019 EOFE 2)."""
        m = synthetic_manoeuvre(curvature=3.0, vc_l=6.0, pef_l_s=4.0, expiration_time_s=16.0)
        a = analyse_curve(m.curve)

        assert a.FET >= 15.0
        assert not m.truth["plateau"]
        assert not a.plateau
        assert not a.early_termination

    @pytest.mark.parametrize(("tail_l_s", "expected"), [(0.015, True), (0.035, False)])
    def test_plateau_threshold(self, tail_l_s: float, expected: bool) -> None:
        """A constant-flow tail of 0.015 L/s is a plateau, of 0.035 L/s is not (< 0.025 L in 1 s)."""
        rate = 200.0
        t = np.arange(0, 10.0, 1 / rate)
        v = np.where(t < 0.5, 0.0, 3.0 * (1 - np.exp(-3.0 * (t - 0.5))))
        v = v + np.where(t > 3.0, tail_l_s * (t - 3.0), 0.0)
        v = np.where(t > 8.0, v[int(8.0 * rate)] - 3.0 * (t - 8.0), v)
        a = analyse_curve(Curve(t, v))

        assert expected == a.plateau
        assert abs(a.last_second_volume_l - tail_l_s) < 0.005


class TestArtefacts:
    """Our own artefact detectors: flow interruption, hesitation (BEV), FIVC excess."""

    @pytest.mark.parametrize("rate", RATES)
    def test_cough_in_first_second(self, rate: float) -> None:
        """An 80-ms flow stop 0.35 s after time zero is flagged near that time."""
        a = analyse_curve(synthetic_manoeuvre(cough_at_s=0.35, rate_hz=rate).curve)

        assert a.flow_interruption
        assert 0.25 <= a.interruption_time_s <= 0.5

    @pytest.mark.parametrize("seed", range(5))
    @pytest.mark.parametrize("name", ["normal", "obstructive", "restrictive"])
    def test_no_false_interruption(self, name: str, seed: int) -> None:
        """Smooth curves with noise at 137 Hz are not flagged."""
        m = synthetic_manoeuvre(rate_hz=137, noise_l=0.002, seed=seed, **SCENARIOS[name])

        assert not analyse_curve(m.curve).flow_interruption

    def test_cough_after_first_second_not_flagged(self) -> None:
        """A flow stop 1.5 s after time zero is outside the first-second window."""
        assert not analyse_curve(synthetic_manoeuvre(cough_at_s=1.5).curve).flow_interruption

    def test_hesitant_start_large_bev(self) -> None:
        """A slow 0.25 L leak before the blow gives BEV ~ 0.25 L (above 0.100 L / 5 % FVC)."""
        m = synthetic_manoeuvre(hesitation_volume_l=0.25, hesitation_time_s=0.4)
        a = analyse_curve(m.curve)

        assert abs(a.BEV - m.truth["BEV"]) <= 0.010
        assert a.BEV > 0.225
        assert a.hesitant_start
        assert not analyse_curve(synthetic_manoeuvre().curve).hesitant_start

    def test_fivc_excess(self) -> None:
        """An inspiration 0.3 L larger than the FVC shows as FIVC - FVC ~ 0.3 L."""
        a = analyse_curve(synthetic_manoeuvre(fivc_extra_l=0.3).curve)

        assert abs(a.fivc_excess_l - 0.3) <= 0.010
        assert a.fivc_excess_too_large               # 0.3 > max(0.100, 5 % of 4.5 = 0.225)
        assert not analyse_curve(synthetic_manoeuvre(fivc_extra_l=0.15).curve).fivc_excess_too_large


class TestSmoothing:
    """The filter matches scipy.signal.savgol_filter (scipy >= 1.10, mode="interp")."""

    @pytest.mark.parametrize(("window", "deriv", "order"), [(51, 0, 2), (81, 1, 4), (7, 1, 4)])
    def test_matches_scipy(self, window: int, deriv: int, order: int) -> None:
        """Our cached kernel plus edge fits equal scipy's Savitzky-Golay with polynomial edges."""
        from scipy.signal import savgol_filter

        from pftwork.quality.curves import _smooth

        x = np.cumsum(np.random.default_rng(3).random(400))
        ours = _smooth(x, window, deriv, 0.01, order)
        ref = savgol_filter(x, window, order, deriv=deriv, delta=0.01, mode="interp")

        assert np.max(np.abs(ours - ref)) < 1e-6


class TestOutputs:
    """Plot arrays and dictionary form."""

    def test_plot_arrays(self) -> None:
        """Plot arrays have <= 400 points, time zero at 0 s, inspiratory flow negative."""
        a = analyse_curve(synthetic_manoeuvre(expiration_time_s=15.0).curve)

        for arr in (a.exp_volume_l, a.exp_flow_l_s, a.insp_volume_l, a.vt_time_s):
            assert 2 <= arr.size <= PLOT_POINTS
        assert a.exp_volume_l.size == a.exp_flow_l_s.size
        assert a.vt_time_s.size == a.vt_volume_l.size
        assert a.vt_time_s[0] < 0 < a.vt_time_s[-1]
        assert np.interp(0.0, a.vt_time_s, a.vt_volume_l) == pytest.approx(a.BEV, abs=0.05)
        assert np.min(a.insp_flow_l_s) < -1.0

    def test_to_dict_is_json(self) -> None:
        """to_dict() is JSON-serialisable and carries the trade-named values."""
        d = analyse_curve(synthetic_manoeuvre().curve).to_dict()
        text = json.dumps(d)

        assert "FEV1" in d and "exp_flow_l_s" in d
        assert isinstance(json.loads(text)["plateau"], bool)


class TestRejection:
    """Bad curves raise CurveError naming the field, the value and what was expected."""

    @staticmethod
    def _good() -> Curve:
        return synthetic_manoeuvre(rate_hz=200).curve

    def test_non_monotonic_time(self) -> None:
        """Time going backwards is rejected with the index of the offending sample."""
        c = self._good()
        t = c.time_s.copy()
        t[10] = t[9]
        with pytest.raises(CurveError, match=r"trials\[0\]\.curve\.time_s\[10\]"):
            analyse_curve(Curve(t, c.volume_l))

    @pytest.mark.parametrize("which", ["time_s", "volume_l"])
    def test_nan(self, which: str) -> None:
        """NaN in either array is rejected."""
        c = self._good()
        arrays = {"time_s": c.time_s.copy(), "volume_l": c.volume_l.copy()}
        arrays[which][5] = np.nan
        with pytest.raises(CurveError, match=which):
            analyse_curve(Curve(**arrays))

    def test_too_few_samples(self) -> None:
        """Fewer than 50 samples are rejected."""
        with pytest.raises(CurveError, match="at least 50 samples"):
            analyse_curve(Curve(np.arange(40) / 100.0, np.linspace(0, 1, 40)))

    def test_too_short(self) -> None:
        """A 0.3-s recording at 1 kHz (300 samples) is rejected as shorter than 0.5 s."""
        with pytest.raises(CurveError, match="0.5 s"):
            analyse_curve(Curve(np.arange(300) / 1000.0, np.linspace(0, 1, 300)))

    def test_low_rate(self) -> None:
        """50 Hz sampling is rejected (>= 100 Hz required)."""
        m = synthetic_manoeuvre(rate_hz=50)
        with pytest.raises(CurveError, match="100 Hz"):
            analyse_curve(m.curve, field="spirometry.post.trials[2].curve")

    def test_millilitres(self) -> None:
        """Volumes in mL (max > 15) are rejected with a hint."""
        c = self._good()
        with pytest.raises(CurveError, match="millilitres"):
            analyse_curve(Curve(c.time_s, c.volume_l * 1000))

    def test_negative_fvc(self) -> None:
        """An inverted volume signal (negative FVC) is rejected."""
        c = self._good()
        with pytest.raises(CurveError, match="negative FVC"):
            analyse_curve(Curve(c.time_s, -c.volume_l))

    def test_mismatched_lengths(self) -> None:
        """time_s and volume_l of different lengths are rejected."""
        c = self._good()
        with pytest.raises(CurveError, match="as many samples"):
            analyse_curve(Curve(c.time_s, c.volume_l[:-3]))

    def test_error_is_value_error_with_field(self) -> None:
        """CurveError is a ValueError and carries the field path given by the caller."""
        m = synthetic_manoeuvre(rate_hz=50)
        with pytest.raises(ValueError) as info:
            analyse_curve(m.curve, field="spirometry.post.trials[2].curve")

        assert info.value.field == "spirometry.post.trials[2].curve.time_s"


class TestRecentResults:
    """analyse_curve reuses the result for identical samples (a pure function; our own cache)."""

    def test_same_samples_same_result(self):
        """Equal samples (even in new arrays) give the very same frozen result object."""
        m = synthetic_manoeuvre(rate_hz=500.0, seed=3)
        copy = Curve(m.curve.time_s.copy(), m.curve.volume_l.copy())

        assert analyse_curve(m.curve) is analyse_curve(copy)

    def test_changed_samples_recomputed(self):
        """A changed sample gives a fresh analysis with the changed value."""
        m = synthetic_manoeuvre(rate_hz=500.0, seed=4)
        first = analyse_curve(m.curve)
        volume = m.curve.volume_l.copy()
        volume[volume.argmax():] += 0.05  # 50 mL more at the end of expiration
        second = analyse_curve(Curve(m.curve.time_s, volume))

        assert second is not first
        assert pytest.approx(first.FVC + 0.05, abs=0.01) == second.FVC
