"""Tests of the plotly figures (pure functions returning ``go.Figure``).

External references: the normal band edges are the 5th and 95th centiles of the standard
normal distribution (ERS/ATS 2022 interpretation standard §3.1: LLN at z = −1.645), checked
against ``scipy.stats.norm.ppf`` (SciPy 1.17); the curve checks use the analytically known
values of pftwork's synthetic manoeuvres (closed forms, see pftwork/quality/synthetic.py), and
the curve shown is the one with the largest FEV1 + FVC (SPIRO-2019, Graham et al., AJRCCM
2019;200:e70, "reporting").
"""

from __future__ import annotations

import copy

import plotly.graph_objects as go
import pytest
from scipy.stats import norm
from worksheet_util import example_case

from pftwork.case import load_case
from pftwork.interpret import interpret
from pftwork.quality.synthetic import synthetic_manoeuvre
from pftwork.ui import plots


@pytest.fixture(scope="module")
def values():
    """The values block of the example case."""
    return interpret(example_case()).to_dict()["values"]


def _curve_raw(m):
    return {"time_s": [float(t) for t in m.curve.time_s],
            "volume_l": [float(v) for v in m.curve.volume_l]}


@pytest.fixture(scope="module")
def curve_case():
    """Example case with three synthetic pre-BD trials (one with a knee) and one post-BD."""
    small = synthetic_manoeuvre(vc_l=2.3, pef_l_s=4.0, rate_hz=200.0)
    best = synthetic_manoeuvre(vc_l=2.6, pef_l_s=4.5, rate_hz=200.0, knee_at=0.3)
    post = synthetic_manoeuvre(vc_l=2.8, pef_l_s=5.0, rate_hz=200.0)
    raw = example_case()
    raw["spirometry"]["pre"] = {"trials": [
        {"curve": _curve_raw(small)}, {"curve": _curve_raw(best)}, {"curve": _curve_raw(small)}]}
    raw["spirometry"]["post"] = {"trials": [{"curve": _curve_raw(post)}]}
    return load_case(raw), best, post


class TestZscoreFigure:
    """Tests for `zscore_figure`."""

    def test_band_is_5th_to_95th_centile(self, values):
        """The shaded band spans z = norm.ppf(0.05) to norm.ppf(0.95) (LLN/ULN)."""
        fig = plots.zscore_figure(values)
        band = [s for s in fig.layout.shapes if s.type == "rect"][0]

        assert round(norm.ppf(0.05), 3) == pytest.approx(band.x0, abs=5e-4)
        assert round(norm.ppf(0.95), 3) == pytest.approx(band.x1, abs=5e-4)

    def test_every_z_is_plotted_on_its_row(self, values):
        """Each parameter with a z appears once at its z (pre trace), labelled by name."""
        fig = plots.zscore_figure(values)
        pre = fig.data[0]
        expected = {r["row"]: r["pre"]["z"] for r in plots.zscore_rows(values)
                    if r["pre"] and r["pre"].get("z") is not None}

        assert expected == pytest.approx(dict(zip(pre.y, pre.x, strict=True)))
        assert "FEV1/FVC" in expected and "DLCO" in expected

    def test_post_values_share_the_row(self, values):
        """Post-BD FEV1 is drawn on the FEV1 row with its own z."""
        post = [t for t in plots.zscore_figure(values).data if t.name == "post-BD"][0]

        assert values["post"]["FEV1"]["z"] == pytest.approx(dict(zip(post.y, post.x, strict=True))["FEV1"])

    def test_extreme_z_is_clipped_to_the_axis(self, values):
        """A z beyond the axis is drawn inside it, and the label keeps the true value."""
        v = copy.deepcopy(values)
        v["pre"]["FEV1"]["z"] = -9.3
        pre = plots.zscore_figure(v).data[0]
        x = dict(zip(pre.y, pre.x, strict=True))["FEV1"]

        assert plots.Z_RANGE[0] < x < -5.5
        assert "-9.3" in list(pre.text)

    def test_no_values_gives_message(self):
        """Without reference values the figure says so instead of failing."""
        fig = plots.zscore_figure({"pre": {}})

        assert "No parameter" in fig.layout.annotations[0].text

    def test_reproducible_json(self, values):
        """The same input gives identical JSON (no random uid)."""
        a, b = plots.zscore_figure(values).to_json(), plots.zscore_figure(values).to_json()

        assert a == b
        assert '"uid"' not in a


class TestCurves:
    """Tests for `select_curves`, `flow_volume_figure`, `volume_time_figure`."""

    def test_selects_largest_fev1_plus_fvc(self, curve_case):
        """The pre-BD curve shown is trial 2, the one with the largest FEV1 + FVC."""
        case, _, _ = curve_case
        curves = plots.select_curves(case)

        assert (1, ["pre", "post"]) == (curves["pre"].trial_index, list(curves))

    def test_flow_volume_peak_and_fvc(self, curve_case):
        """The loop peaks near the synthetic PEF and ends at its FVC (2 % tolerance)."""
        case, best, _ = curve_case
        fig = plots.flow_volume_figure(plots.select_curves(case))
        loop = fig.data[0]

        assert best.truth["PEF"] == pytest.approx(max(loop.y), rel=0.02)
        assert best.truth["FVC"] == pytest.approx(max(loop.x), rel=0.02)
        assert min(loop.y) < 0  # inspiratory limb below zero flow

    def test_fef_markers_at_quarter_volumes(self, curve_case):
        """FEF25/50/75 markers sit at 25/50/75 % of FVC with the synthetic flows (5 %)."""
        case, best, _ = curve_case
        fig = plots.flow_volume_figure(plots.select_curves(case))
        fef = [t for t in fig.data if t.name == "FEF pre-BD"][0]
        fvc = best.truth["FVC"]

        assert [0.25 * fvc, 0.5 * fvc, 0.75 * fvc] == pytest.approx(list(fef.x), rel=0.02)
        assert [best.truth[k] for k in ("FEF25", "FEF50", "FEF75")] == pytest.approx(
            list(fef.y), rel=0.05)

    def test_knee_is_marked(self, curve_case):
        """The synthetic knee is marked near its known volume (within 0.1 L)."""
        case, best, _ = curve_case
        fig = plots.flow_volume_figure(plots.select_curves(case))
        knee = [t for t in fig.data if t.name == "knee pre-BD"]

        assert 1 == len(knee)
        assert best.truth["knee_volume_l"] == pytest.approx(knee[0].x[0], abs=0.1)

    def test_volume_time_marks_fev1(self, curve_case):
        """The volume-time figure marks FEV1 at 1 s with the synthetic FEV1 (2 %)."""
        case, best, post = curve_case
        fig = plots.volume_time_figure(plots.select_curves(case))
        marks = [t for t in fig.data if t.name == "marks pre-BD"][0]

        assert 1.0 == marks.x[0]
        assert best.truth["FEV1"] == pytest.approx(marks.y[0], rel=0.02)
        assert {"pre-BD (trial 2)", "post-BD (trial 1)"} <= {t.name for t in fig.data}

    def test_no_curves(self):
        """Without curves both figures carry a message."""
        for make in (plots.flow_volume_figure, plots.volume_time_figure):
            fig = make({})
            assert isinstance(fig, go.Figure)
            assert "No raw curves" in fig.layout.annotations[0].text


class TestTrend:
    """Tests for `trend_figure`."""

    def test_sorted_by_date_and_gaps_skipped(self):
        """Points are drawn in date order; a missing z leaves that series out at that date."""
        fig = plots.trend_figure([
            {"date": "2026-10-14", "FEV1": -2.1, "FVC": -0.6, "DLCO": -1.5},
            {"date": "2024-01-02", "FEV1": -1.2, "FVC": -0.2, "DLCO": None},
            {"date": "2025-09-30", "FEV1": -1.8, "FVC": -0.4, "DLCO": None}])
        series = {t.name: t for t in fig.data}

        assert ("2024-01-02", "2025-09-30", "2026-10-14") == tuple(series["FEV1"].x)
        assert (-1.2, -1.8, -2.1) == tuple(series["FEV1"].y)
        assert ("2026-10-14",) == tuple(series["DLCO"].x)

    def test_empty(self):
        """No dated z values gives a message."""
        fig = plots.trend_figure([{"date": None, "FEV1": -1.0}])

        assert "No earlier tests" in fig.layout.annotations[0].text
