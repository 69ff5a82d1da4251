"""The SVG chart module: self-contained markup, escaped labels, our own palette."""

import math
import re

import pytest

from toolkit.report import charts


def test_line_chart_is_plain_svg_with_title_and_escaped_labels():
    chart = charts.line_chart([charts.Series("<b>treated</b>", [0, 1, 2], [0.1, 0.2, 0.15], [0.05, 0.1, 0.1],
                                             [0.15, 0.3, 0.2])],
                              title="a & b", caption="n = 3; 95% intervals", x_label="x", y_label="y")
    assert chart.svg.startswith("<svg") and chart.svg.endswith("</svg>")
    assert "<script" not in chart.svg and "href" not in chart.svg
    assert "&lt;b&gt;treated&lt;/b&gt;" in chart.svg and "a &amp; b" in chart.svg
    assert re.search(r'viewBox="0 0 \d+ \d+"', chart.svg)
    assert chart.points == 3


def test_interval_chart_log_scale_puts_the_reference_at_one():
    chart = charts.interval_chart([charts.Interval("dip", 0.5, 0.4, 0.6), charts.Interval("none", math.nan)],
                                  title="t", caption="c", x_label="hazard ratio", reference=1.0, log_scale=True)
    assert "not estimable" in chart.svg
    assert ">1<" in chart.svg  # a tick at the reference value


def test_empty_charts_raise_instead_of_drawing_nothing():
    with pytest.raises(ValueError):
        charts.line_chart([charts.Series("x", [], [])], title="t", caption="c", x_label="x", y_label="y")
    with pytest.raises(ValueError):
        charts.bar_chart(["a"], [math.nan], title="t", caption="c", x_label="x", y_label="y")


def test_palette_is_our_own_not_a_plotting_library_default():
    """matplotlib's default cycle ('tab10') starts #1f77b4, #ff7f0e, #2ca02c (from memory)."""
    tab10 = {"#1f77b4", "#ff7f0e", "#2ca02c", "#d62728", "#9467bd"}
    assert not tab10 & {c.lower() for c in charts.PALETTE.values()}
    # the two main series differ in lightness too (so they stay apart in greyscale and for
    # red-green colour blindness): relative luminance, WCAG 2 formula (common practice, no source)

    def luminance(hex_colour):
        rgb = [int(hex_colour[i:i + 2], 16) / 255 for i in (1, 3, 5)]
        lin = [c / 12.92 if c <= 0.03928 else ((c + 0.055) / 1.055) ** 2.4 for c in rgb]
        return 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]

    first, second = luminance(charts.PALETTE["blue"]), luminance(charts.PALETTE["amber"])
    assert (max(first, second) + 0.05) / (min(first, second) + 0.05) > 3
