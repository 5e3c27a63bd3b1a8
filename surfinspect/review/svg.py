"""Small SVG pictures for the pages: the rose plot of a region's lay histogram and a control chart.

Drawn as text (no plotting library): a page of 500 parts renders in well
under a second. The control chart is the individuals chart of
:func:`surfinspect.qualify.spc.individuals_chart` (centre line and 3-sigma
limits from the average moving range, Montgomery, *Introduction to
Statistical Quality Control*, 7th ed., section 6.4) - the same numbers the
PDF's batch page prints.
"""

from __future__ import annotations

import math
from typing import Sequence
from xml.sax.saxutils import escape

from ..qualify.spc import IndividualsChart

__all__ = ["rose_svg", "control_chart_svg", "VERDICT_SHAPES"]


def _f(v: float) -> str:
    return f"{v:.1f}"


def rose_svg(
    bin_edges_deg: Sequence[float],
    weights: Sequence[float],
    *,
    expected_deg=None,
    measured_deg=None,
    range_db: float | None = None,
    size: int = 220,
) -> str:
    """A rose plot of an axial histogram: each bin drawn at angle a and a + 180 (lay has no sense of direction).

    Angles counter-clockwise from +X with +Y up (the project's convention),
    so 90 deg points up on the page. A petal's area grows with its weight; with ``range_db`` its
    radius is instead the weight in decibels over that range below the highest bin, as the report
    draws a spectrum. ``measured_deg`` draws solid lines along the measured directions.
    """
    c = size / 2.0
    r_max = c - 14.0
    top = max(weights) if len(weights) and all(math.isfinite(w) for w in weights) else 0.0
    parts = [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {size} {size}" width="{size}" height="{size}" '
        'role="img" class="rose">',
        f'<circle cx="{_f(c)}" cy="{_f(c)}" r="{_f(r_max)}" class="rose-ring"/>',
        f'<circle cx="{_f(c)}" cy="{_f(c)}" r="{_f(r_max / 2)}" class="rose-ring"/>',
    ]
    for a in (0, 45, 90, 135):
        dx, dy = math.cos(math.radians(a)) * r_max, -math.sin(math.radians(a)) * r_max
        parts.append(
            f'<line x1="{_f(c - dx)}" y1="{_f(c - dy)}" x2="{_f(c + dx)}" y2="{_f(c + dy)}" class="rose-axis"/>'
        )
    parts.append(f'<text x="{_f(size - 12)}" y="{_f(c - 3)}" class="rose-label">0°</text>')
    parts.append(f'<text x="{_f(c + 3)}" y="11" class="rose-label">90°</text>')
    if top > 0:
        for lo, hi, w in zip(bin_edges_deg[:-1], bin_edges_deg[1:], weights):
            if w <= 0:
                continue
            if range_db:
                r = r_max * max(0.0, 1.0 + 10.0 * math.log10(w / top) / range_db)
            else:
                r = r_max * math.sqrt(w / top)  # area proportional to weight
            if r < 0.5:
                continue
            for turn in (0.0, 180.0):
                a0, a1 = math.radians(lo + turn), math.radians(hi + turn)
                x0, y0 = c + r * math.cos(a0), c - r * math.sin(a0)
                x1, y1 = c + r * math.cos(a1), c - r * math.sin(a1)
                parts.append(
                    f'<path d="M{_f(c)},{_f(c)} L{_f(x0)},{_f(y0)} A{_f(r)},{_f(r)} 0 0 0 {_f(x1)},{_f(y1)} Z" '
                    'class="rose-bin"/>'
                )
    for angle in [] if expected_deg is None else list(expected_deg):
        dx, dy = math.cos(math.radians(angle)) * r_max, -math.sin(math.radians(angle)) * r_max
        parts.append(
            f'<line x1="{_f(c - dx)}" y1="{_f(c - dy)}" x2="{_f(c + dx)}" y2="{_f(c + dy)}" class="rose-expected"/>'
        )
    for angle in [] if measured_deg is None else list(measured_deg):
        dx, dy = math.cos(math.radians(angle)) * r_max, -math.sin(math.radians(angle)) * r_max
        parts.append(
            f'<line x1="{_f(c - dx)}" y1="{_f(c - dy)}" x2="{_f(c + dx)}" y2="{_f(c + dy)}" class="rose-measured"/>'
        )
    parts.append("</svg>")
    return "".join(parts)


#: Marks of the part verdicts in the charts (the same shapes as the report's badges).
VERDICT_SHAPES = {"accept": "circle", "reject": "cross", "review": "triangle", "not-inspected": "square"}


def mark(shape: str, x: float, y: float, s: float, css: str) -> str:
    """One verdict mark centred on (x, y), ``s`` its half size."""
    if shape == "circle":
        return f'<circle cx="{_f(x)}" cy="{_f(y)}" r="{_f(s)}" class="{css}"/>'
    if shape == "triangle":
        return f'<path d="M{_f(x)},{_f(y - s)} L{_f(x + s)},{_f(y + s)} L{_f(x - s)},{_f(y + s)} Z" class="{css}"/>'
    if shape == "cross":
        return (
            f'<path d="M{_f(x - s)},{_f(y - s)} L{_f(x + s)},{_f(y + s)} M{_f(x - s)},{_f(y + s)} '
            f'L{_f(x + s)},{_f(y - s)}" class="{css} stroke-mark"/>'
        )
    return f'<rect x="{_f(x - s)}" y="{_f(y - s)}" width="{_f(2 * s)}" height="{_f(2 * s)}" class="{css}"/>'


def control_chart_svg(
    title: str,
    chart: IndividualsChart,
    verdicts: Sequence[str],
    *,
    tolerance: float | None = None,
    unit: str = "°",
    width: int = 640,
    height: int = 200,
) -> str:
    """An individuals chart: the values in production order, centre line, control limits, tolerance lines.

    ``verdicts`` holds each plotted value's part verdict (its mark's shape and colour).
    """
    left, right, top, bottom = 104.0, 12.0, 22.0, 24.0
    vals = list(chart.values)
    finite = [v for v in vals if math.isfinite(v)]
    lines = [chart.center, chart.ucl, chart.lcl] + ([tolerance, -tolerance] if tolerance is not None else [])
    lo, hi = min(finite + lines), max(finite + lines)
    span = (hi - lo) or 1.0
    lo, hi = lo - 0.08 * span, hi + 0.08 * span
    n = len(vals)

    def px(i: int) -> float:
        return left + (width - left - right) * (0.5 if n == 1 else i / (n - 1))

    def py(v: float) -> float:
        return top + (height - top - bottom) * (hi - v) / (hi - lo)

    out = [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width} {height}" class="chart" role="img" '
        f'aria-label="{escape(title)}">',
        f'<text x="{_f(left)}" y="14" class="chart-title">{escape(title)}</text>',
        f'<rect x="{_f(left)}" y="{_f(top)}" width="{_f(width - left - right)}" height="{_f(height - top - bottom)}" '
        'class="chart-frame"/>',
    ]
    for value, css, word in (
        (chart.ucl, "chart-limit", "UCL"),
        (chart.center, "chart-centre", "mean"),
        (chart.lcl, "chart-limit", "LCL"),
    ):
        out.append(_hline(left, width - right, py(value), css, f"{word} {value:.3f}{unit}"))
    if tolerance is not None:
        for value in (tolerance, -tolerance):
            out.append(
                _hline(left, width - right, py(value), "chart-tolerance", f"tolerance {value:+g}{unit}", inside=True)
            )
    runs: list[list[str]] = [[]]
    for i, v in enumerate(vals):  # a missing value (no texture) is a gap in the line
        if math.isfinite(v):
            runs[-1].append(f"{_f(px(i))},{_f(py(v))}")
        elif runs[-1]:
            runs.append([])
    out.extend(f'<polyline points="{" ".join(r)}" class="chart-line"/>' for r in runs if len(r) > 1)
    flagged = set(chart.out_of_limits)
    for i, v in enumerate(vals):
        if not math.isfinite(v):
            continue
        verdict = verdicts[i] if i < len(verdicts) else "accept"
        css = f"mark-{verdict}" + (" mark-flagged" if i in flagged else "")
        out.append(mark(VERDICT_SHAPES.get(verdict, "square"), px(i), py(v), 4.0, css))
    out.append(f'<text x="{_f(left)}" y="{_f(height - 6)}" class="chart-axis">1</text>')
    out.append(f'<text x="{_f(width - right)}" y="{_f(height - 6)}" class="chart-axis end">{n}</text>')
    out.append("</svg>")
    return "".join(out)


def _hline(x0: float, x1: float, y: float, css: str, label: str, *, inside: bool = False) -> str:
    """A horizontal line, labelled left of the frame (control lines) or inside it at the right (tolerances)."""
    at = f'x="{_f(x1 - 4)}" y="{_f(y - 3)}"' if inside else f'x="{_f(x0 - 4)}" y="{_f(y + 3)}"'
    return (
        f'<line x1="{_f(x0)}" y1="{_f(y)}" x2="{_f(x1)}" y2="{_f(y)}" class="{css}"/>'
        f'<text {at} class="chart-axis end">{escape(label)}</text>'
    )
