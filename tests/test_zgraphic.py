"""The z-score chart and glyph (pftwork.zgraphic): geometry, clipping, escaping, determinism.

The values below are invented z-scores, not a person's results. SVG is parsed with
``xml.etree.ElementTree`` (Python 3.11 standard library) as an independent check that the text
is well-formed XML.
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET

import pytest

from pftwork.zgraphic import (
    AXIS,
    COLORS,
    PLOT_X,
    chart_rows,
    zscore_chart_svg,
    zscore_glyph_svg,
)

NS = "{http://www.w3.org/2000/svg}"


def _values() -> dict:
    """Invented z-scores: pre and post spirometry, volumes (one beyond +4), diffusion."""
    return {
        "pre": {"FVC": {"z": -0.5}, "FEV1": {"z": -2.6}, "FEV1/FVC": {"z": -3.1},
                "PEF": {"z": None}, "FEF25_75": {"z": -7.25}},
        "post": {"FEV1": {"z": -2.2}, "FVC": {"z": 0.0}},
        "volumes": {"TLC": {"z": 1.2}, "RV": {"z": 5.5}},
        "diffusion": {"DLCO": {"z": -1.645}},
        "resistance": {"sRaw": {"z": 3.0}},
    }


def _parse(svg: str) -> ET.Element:
    return ET.fromstring(svg)


def _marks(root: ET.Element) -> list[ET.Element]:
    return [g for g in root.iter(f"{NS}g") if "pft-zmark" in g.get("class", "").split()]


def _centre_x(mark: ET.Element) -> float:
    """x of a marker: circle centre, or the middle of a diamond's points."""
    shape = next(e for e in mark if e.get("class") == "pft-zmark-shape")
    if shape.tag == f"{NS}circle":
        return float(shape.get("cx"))
    xs = [float(p.split(",")[0]) for p in shape.get("points").split()]
    return (min(xs) + max(xs)) / 2


def _expected_x(z: float) -> float:
    """The axis mapping the chart documents: linear from AXIS to PLOT_X (40 px per z unit)."""
    return 150.0 + (z - (-6.0)) * (550.0 - 150.0) / (4.0 - (-6.0))


class TestChartStructure:
    def test_parses_as_xml_with_accessible_name(self):
        """The chart is well-formed SVG, role="img", with an aria-label equal to its <title>."""
        root = _parse(zscore_chart_svg(_values()))

        assert f"{NS}svg" == root.tag
        assert "img" == root.get("role")
        title = root.find(f"{NS}title").text
        assert title == root.get("aria-label")
        assert "FEV1 -2.60 pre-BD, -2.20 post-BD" in title
        assert "RV +5.50" in title

    def test_rows_follow_the_export_table_order(self):
        """Rows: spirometry in the export tables' order (FEV1, FVC, FEV1/FVC, FEF25-75), then
        volumes, then diffusion; parameters without z (PEF) and other blocks are left out."""
        groups = chart_rows(_values())

        assert [("Spirometry", ["FEV1", "FVC", "FEV1/FVC", "FEF25_75"]),
                ("Lung volumes", ["TLC", "RV"]), ("Diffusing capacity", ["DLCO"])] == \
            [(g, [r[0] for r in rows]) for g, rows in groups]
        assert ("FVC", -0.5, 0.0) == groups[0][1][1]

    def test_pre_filled_post_open(self):
        """Pre-BD markers are filled circles; post-BD markers open diamonds (white fill)."""
        root = _parse(zscore_chart_svg(_values()))
        pre = [m for m in _marks(root) if "pft-pre" in m.get("class")]
        post = [m for m in _marks(root) if "pft-post" in m.get("class")]

        assert (7, 2) == (len(pre), len(post))
        inside_pre = [m for m in pre if m.get("data-clipped") == "0"]
        assert all(m.find(f"{NS}circle").get("fill") == COLORS["pre"] for m in inside_pre)
        assert all(m.find(f"{NS}polygon").get("fill") == "#ffffff" for m in post)

    def test_z_value_printed_beside_each_marker(self):
        """Each marker carries its z printed with sign and two decimals."""
        root = _parse(zscore_chart_svg(_values()))

        texts = sorted(m.find(f"{NS}text").text for m in _marks(root))
        assert sorted(["-2.60", "-0.50", "-3.10", "-7.25", "-2.20", "+0.00", "+1.20", "+5.50",
                       "-1.65"]) == texts

    def test_empty_values_still_a_valid_chart(self):
        """Without any z-score the chart says so and stays valid XML."""
        root = _parse(zscore_chart_svg({"pre": {"FEV1": {"z": None}}}))

        assert [] == _marks(root)
        assert "none available" in root.get("aria-label")

    def test_not_a_mapping_raises(self):
        """A values argument that is not a mapping raises TypeError naming what was expected."""
        with pytest.raises(TypeError, match="values mapping"):
            zscore_chart_svg([1, 2])


class TestAxisMapping:
    @pytest.mark.parametrize(("z", "expected"), [(-6.0, 150.0), (-2.6, 286.0), (0.0, 390.0),
                                                 (1.2, 438.0), (4.0, 550.0)])
    def test_marker_x_is_linear_in_z(self, z, expected):
        """A marker's x equals the documented linear mapping (hand-computed: 150 + 40·(z+6))."""
        root = _parse(zscore_chart_svg({"volumes": {"TLC": {"z": z}}}))

        assert expected == pytest.approx(_centre_x(_marks(root)[0]), abs=0.05)
        assert expected == pytest.approx(_expected_x(z))

    def test_constants_match_the_documented_axis(self):
        """The module's axis constants are the ones the tests assume (-6 … +4 on 150 … 550)."""
        assert ((-6.0, 4.0), (150.0, 550.0)) == (AXIS, PLOT_X)

    def test_gridlines_at_every_integer_z(self):
        """One gridline per integer z from -6 to +4, each at the mapped x."""
        root = _parse(zscore_chart_svg(_values()))
        grid = {int(e.get("data-z")): float(e.get("x1")) for e in root.iter(f"{NS}line")
                if e.get("class") == "pft-grid"}

        assert list(range(-6, 5)) == sorted(grid)
        assert all(_expected_x(z) == pytest.approx(x, abs=0.05) for z, x in grid.items())

    def test_normal_band_spans_5th_to_95th_percentile(self):
        """Band from z = -1.645 to +1.645: LLN/ULN at the 5th/95th percentiles (INTERP-2022,
        REPORT-2017; standards.md §1.8, VERIFIED)."""
        root = _parse(zscore_chart_svg(_values()))
        band = next(e for e in root.iter(f"{NS}rect") if e.get("class") == "pft-normal-band")
        left, width = float(band.get("x")), float(band.get("width"))

        assert _expected_x(-1.645) == pytest.approx(left, abs=0.05)
        assert _expected_x(1.645) == pytest.approx(left + width, abs=0.1)

    def test_lln_line_marked_at_minus_1645(self):
        """A line marks the LLN at z = -1.645 and is labelled "LLN"."""
        svg = zscore_chart_svg(_values())
        root = _parse(svg)
        lln = next(e for e in root.iter(f"{NS}line") if e.get("class") == "pft-lln")

        assert _expected_x(-1.645) == pytest.approx(float(lln.get("x1")), abs=0.05)
        assert "LLN -1.645" in svg


class TestClipping:
    def test_values_beyond_axis_clipped_and_flagged(self):
        """z = -7.25 and +5.5 sit at the axis edges as arrows, flagged and still printed."""
        root = _parse(zscore_chart_svg(_values()))
        beyond = {m.get("data-z"): m for m in _marks(root) if m.get("data-clipped") == "1"}

        assert {"-7.25", "+5.50"} == set(beyond)
        tips = {z: [float(p.split(",")[0]) for p in m.find(f"{NS}polygon").get("points").split()]
                for z, m in beyond.items()}
        assert min(tips["-7.25"]) < 150.0 < max(tips["-7.25"])  # arrow at the left edge, out
        assert min(tips["+5.50"]) < 550.0 < max(tips["+5.50"])
        assert all("pft-beyond" in m.get("class") for m in beyond.values())
        assert "beyond the axis" in beyond["-7.25"].find(f"{NS}title").text

    def test_edge_values_are_not_flagged(self):
        """z exactly at an axis end is drawn normally (closed interval)."""
        root = _parse(zscore_chart_svg({"volumes": {"TLC": {"z": -6.0}, "RV": {"z": 4.0}}}))

        assert ["0", "0"] == [m.get("data-clipped") for m in _marks(root)]

    def test_nan_left_out_infinity_clipped(self):
        """NaN has no position (left out); +inf is beyond the axis (clipped)."""
        groups = chart_rows({"volumes": {"TLC": {"z": float("nan")}, "RV": {"z": float("inf")}}})

        assert [("Lung volumes", [("RV", float("inf"), None)])] == groups


class TestTextSafety:
    def test_parameter_names_and_title_escaped(self):
        """Markup in a parameter name or title is escaped text, never elements."""
        evil = '<script>alert("x")</script>&'
        svg = zscore_chart_svg({"volumes": {evil: {"z": 1.0}}}, title="<b>t</b>")
        root = _parse(svg)

        assert "<script" not in svg and "<b>" not in svg
        assert not [e for e in root.iter() if e.tag in (f"{NS}script", f"{NS}b", "script")]
        assert any(e.text == evil for e in root.iter(f"{NS}text"))

    def test_deterministic_and_id_free(self):
        """The same values give identical text; no id attribute anywhere."""
        a, b = zscore_chart_svg(_values()), zscore_chart_svg(_values())

        assert a == b
        assert not re.search(r"\sid=", a)

    def test_inline_variant_has_no_namespace_url(self):
        """``standalone=False`` (inline HTML) writes no xmlns URL; otherwise the same SVG."""
        inline = zscore_chart_svg(_values(), standalone=False)

        assert "http" not in inline
        assert zscore_chart_svg(_values()) == inline.replace(
            "<svg ", '<svg xmlns="http://www.w3.org/2000/svg" ', 1)


class TestGlyph:
    def test_parses_and_is_labelled(self):
        """The glyph is well-formed, role="img", and its label gives the z."""
        root = _parse(zscore_glyph_svg(-2.5))

        assert ("img", "z-score -2.50") == (root.get("role"), root.get("aria-label"))

    @pytest.mark.parametrize(("z", "expected"), [(-5.0, 4.0), (-1.0, 66.0), (3.0, 128.0)])
    def test_dot_position_linear(self, z, expected):
        """Scale -5 … +3 on x = 4 … 128 (hand-computed: 4 + (z+5)·124/8)."""
        root = _parse(zscore_glyph_svg(z))

        assert expected == pytest.approx(float(root.find("circle").get("cx")), abs=0.05)

    def test_band_is_normal_range(self):
        """The shaded band spans z = -1.645 … +1.645 on the glyph scale."""
        rect = _parse(zscore_glyph_svg(0.0)).find("rect")
        left, width = float(rect.get("x")), float(rect.get("width"))

        assert 4 + 3.355 * 124 / 8 == pytest.approx(left, abs=0.06)
        assert 4 + 6.645 * 124 / 8 == pytest.approx(left + width, abs=0.11)

    def test_beyond_scale_is_an_arrow(self):
        """z = -6.1 is drawn as an arrowhead at the left edge, labelled beyond the scale."""
        root = _parse(zscore_glyph_svg(-6.1))

        assert root.find("circle") is None
        xs = [float(p.split(",")[0]) for p in root.find("polygon").get("points").split()]
        assert min(xs) < 4.0 < max(xs)
        assert "beyond the scale" in root.get("aria-label")

    def test_missing_z(self):
        """``None`` draws the empty scale, labelled not available."""
        root = _parse(zscore_glyph_svg(None))

        assert (None, "z-score not available") == (root.find("circle"), root.get("aria-label"))

    def test_palette_matches_the_ui_style(self):
        """The graphics use the worksheet's colours (pftwork.ui.style.COLORS)."""
        from pftwork.ui.style import COLORS as UI

        assert {k: UI[k] for k in COLORS} == COLORS


def test_module_imports_only_stdlib_and_case_model():
    """pftwork.zgraphic is pure: standard library and pftwork.case_model only (no numpy,
    plotting, widget or notebook import), checked on its source with ``ast``."""
    import ast
    from pathlib import Path

    import pftwork.zgraphic as module

    tree = ast.parse(Path(module.__file__).read_text(encoding="utf-8"))
    imported = {a.name for n in ast.walk(tree) if isinstance(n, ast.Import) for a in n.names}
    imported |= {n.module for n in ast.walk(tree) if isinstance(n, ast.ImportFrom)}

    assert {"__future__", "html", "math", "collections.abc", "typing",
            "pftwork.case_model"} == imported
