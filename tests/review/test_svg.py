"""The page pictures: control chart numbers and rose plot directions."""

from __future__ import annotations

import re

from surfinspect.qualify.spc import individuals_chart
from surfinspect.review.svg import control_chart_svg, rose_svg


def test_control_chart_prints_the_individuals_limits():
    # Individuals chart by hand (Montgomery, Introduction to SQC, 7th ed., 6.4): x = 1, 3, 2, 4;
    # mean 2.5, moving ranges 2, 1, 2 (mean 5/3), limits 2.5 +- 2.66 * 5/3 = 6.933 and -1.933
    svg = control_chart_svg("t", individuals_chart([1, 3, 2, 4]), ["accept", "reject", "review", "accept"], tolerance=3)
    assert "UCL 6.933°" in svg and "LCL -1.933°" in svg and "mean 2.500°" in svg
    assert "tolerance +3°" in svg and "tolerance -3°" in svg
    assert svg.count("<circle") == 2 and svg.count("<rect") == 1  # frame only; the reject is a cross path


def test_control_chart_leaves_a_gap_for_a_missing_value():
    svg = control_chart_svg("t", individuals_chart([1, 2, None, 2, 3]), ["accept"] * 5)
    assert svg.count("<polyline") == 2


def test_rose_draws_each_bin_both_ways_along_its_axis():
    edges = [0.0, 90.0, 95.0, 180.0]
    svg = rose_svg(edges, [0.0, 1.0, 0.0], size=200)
    paths = re.findall(r'<path d="M100.0,100.0 L([\d.]+),([\d.]+)', svg)
    assert len(paths) == 2  # the 90-95 deg bin, drawn at 90 and at 270 deg
    ys = sorted(float(y) for _, y in paths)
    assert ys[0] < 20 and ys[1] > 180  # +Y is up on the page: 90 deg points to the top


def test_a_spectrum_rose_draws_decibels_below_the_top_bin():
    # radius = r_max * (1 + 10 log10(w / top) / range): the top bin reaches the rim, a bin 10 dB
    # down two thirds of it at a 30 dB range, one 30 dB down (or lower) is not drawn
    edges = [0.0, 10.0, 50.0, 90.0, 130.0, 180.0]
    svg = rose_svg(edges, [1.0, 0.1, 1e-3, 1e-4, 0.0], size=200, range_db=30.0, measured_deg=[5.0])
    r_max = 100.0 - 14.0
    radii = sorted(
        {
            round(((float(x) - 100.0) ** 2 + (float(y) - 100.0) ** 2) ** 0.5, 0)
            for x, y in re.findall(r'<path d="M100.0,100.0 L([\d.]+),([\d.]+)', svg)
        }
    )
    assert radii == [round(r_max * 2 / 3, 0), round(r_max, 0)]
    assert svg.count('class="rose-measured"') == 1
