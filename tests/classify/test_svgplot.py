"""Tests of classify.svgplot: well-formed, escaped, plain SVG charts."""

from __future__ import annotations

import xml.etree.ElementTree as ET

import numpy as np
import pytest
from numpy.testing import assert_allclose

from classify import svgplot

NS = {"s": "http://www.w3.org/2000/svg"}


def _parse(svg):
    return ET.fromstring(svg)


def test_every_chart_is_well_formed_svg_with_no_script():
    """Each chart type parses as XML, is an <svg> element and holds no script or link."""
    rng = np.random.default_rng(0)
    charts = [
        svgplot.line_chart([(np.arange(10), rng.normal(size=10), "a")], x_label="t (µs)",
                           y_label="E (V/m)"),
        svgplot.scatter_chart(rng.normal(size=5), rng.normal(size=5), x_label="x",
                              y_label="y", colours=[svgplot.time_colour(i / 4)
                                                    for i in range(5)]),
        svgplot.bar_chart(["a", "b"], [0.2, 0.8], y_label="probability"),
        svgplot.histogram_chart([rng.uniform(size=50)], x_label="confidence"),
    ]
    for svg in charts:
        root = _parse(svg)
        assert root.tag == "{http://www.w3.org/2000/svg}svg"
        assert not root.findall(".//s:script", NS)
        assert "href" not in svg and "<script" not in svg


def test_text_is_escaped():
    """Labels with markup characters are escaped, so they stay text."""
    svg = svgplot.bar_chart(["<script>alert(1)</script>", "a&b"], [1, 2],
                            y_label="n \"quoted\"", title="<b>t</b>")
    assert "<script>" not in svg and "<b>" not in svg
    texts = [t.text for t in _parse(svg).iter("{http://www.w3.org/2000/svg}text")]
    assert "<script>alert(1)</script>" in texts and "a&b" in texts and "<b>t</b>" in texts


def test_nice_ticks_are_round_and_cover_the_range():
    """Ticks are multiples of 1, 2, 2.5 or 5 times a power of ten inside the range."""
    assert_allclose(svgplot.nice_ticks(0, 10), [0, 2, 4, 6, 8, 10], atol=1e-12)
    assert_allclose(svgplot.nice_ticks(-3.2, 0.4), [-3, -2, -1, 0], atol=1e-12)
    assert svgplot.nice_ticks(float("nan"), 1) == []


def test_markers_get_their_own_text_rows():
    """Two close vertical markers have labels on different rows (no overlap)."""
    svg = svgplot.line_chart([([0, 1, 2], [0, 1, 0], "E")], x_label="t", y_label="E",
                             markers=[(1.0, "field peak", "#D55E00"),
                                      (1.02, "VHF peak", "#009E73")])
    rows = {t.text: float(t.get("y")) for t in _parse(svg).iter(
        "{http://www.w3.org/2000/svg}text") if t.text in ("field peak", "VHF peak")}
    assert rows["VHF peak"] - rows["field peak"] == pytest.approx(12.0)


def test_decimation_keeps_the_extremes():
    """A long trace is thinned to min/max pairs: its peak and trough survive."""
    x = np.arange(100_000, dtype=float)
    y = np.zeros_like(x)
    y[54_321], y[7_777] = 5.0, -3.0
    xs, ys = svgplot._decimate(x, y)
    assert len(xs) <= 1600
    assert ys.max() == 5.0 and ys.min() == -3.0
    assert 54_321.0 in xs and 7_777.0 in xs


def test_time_colour_runs_from_blue_to_yellow():
    """0 gives the dark-blue end, 1 the yellow end; out-of-range values are clamped."""
    assert svgplot.time_colour(0.0) == "#0d0887"
    assert svgplot.time_colour(1.0) == "#f0c81e"
    assert svgplot.time_colour(-1) == svgplot.time_colour(0)
    assert svgplot.time_colour(float("nan")) == svgplot.time_colour(0)


def test_hbar_chart_bar_lengths_are_proportional_to_the_values():
    """Horizontal bars on a fixed (0, 1) axis: lengths in the ratio of the values."""
    svg = svgplot.hbar_chart(["energetic_in_cloud", "<x>"], [0.25, 0.75],
                             x_label="probability", xlim=(0, 1))
    root = _parse(svg)
    widths = [float(r.get("width")) for r in root.iter("{http://www.w3.org/2000/svg}rect")]
    assert widths[1] == pytest.approx(3 * widths[0], rel=1e-2)
    texts = [t.text for t in root.iter("{http://www.w3.org/2000/svg}text")]
    assert "energetic_in_cloud" in texts and "<x>" in texts and "0.75" in texts


def test_stacked_bar_chart_heights_add_up():
    """Two stacked segments: their heights add to the bar total, empty ones are not drawn."""
    svg = svgplot.stacked_bar_chart([0, 1, 2], [([1, 0, 2], "a"), ([3, 0, 0], "b")],
                                    x_label="hours", y_label="pulses")
    rects = [r for r in _parse(svg).iter("{http://www.w3.org/2000/svg}rect")
             if r.get("height") != "3"]                    # legend swatches are 3 px high
    heights = [float(r.get("height")) for r in rects]
    assert len(heights) == 3                                # a@0, a@2, b@0
    assert heights[0] + heights[2] == pytest.approx(2 * heights[1], rel=1e-2)
    assert heights[0] * 3 == pytest.approx(heights[2], rel=1e-2)


def test_y_tick_labels_leave_room_for_the_axis_label():
    """Long tick labels (1.0e-05) widen the left margin instead of running into the y label."""
    svg = svgplot.histogram_chart([np.array([1e-5, 2e-5, 3e-5, 9e-5])], x_label="x",
                                  y_label="density", density=True)
    root = _parse(svg)
    ticks = [t for t in root.iter("{http://www.w3.org/2000/svg}text")
             if t.get("text-anchor") == "end"]
    assert ticks and any("e" in t.text for t in ticks)
    for t in ticks:  # right-aligned at x: starts about 6.6 px per character to its left
        assert float(t.get("x")) - 6.6 * len(t.text) >= 20, t.text
    plain = svgplot.line_chart([([0, 1], [0, 1], "a")], x_label="t", y_label="E")
    assert 'x1="58"' in plain                      # short labels keep the usual margin
