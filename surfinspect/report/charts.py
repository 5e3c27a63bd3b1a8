"""Control charts (individuals and moving range) drawn as vector graphics."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from reportlab.lib import colors
from reportlab.pdfgen.canvas import Canvas

from ..formatting import format_fixed
from ..pdfa.fonts import SANS, SANS_BOLD
from .layout import _MARGIN, _rl
from .scene import PALETTE


def _chart(
    c: Canvas,
    x,
    y_top,
    w,
    h,
    title,
    values,
    *,
    centre,
    ucl,
    lcl,
    flagged,
    beyond=(),
    spec=None,
    unit="",
    decimals=2,
    lower_zero=False,
) -> None:
    """One control chart over part positions 1..n: points, centre line, limits, tolerance.

    A point outside the control limits is a filled square, one beyond the
    tolerance a cross, both numbered with the part's #; a missing value
    leaves a gap.
    """
    vals = np.asarray(values, dtype=float)
    lines = [("CL", centre), ("UCL", ucl)] + ([] if lcl is None else [("LCL", lcl)])
    ax = _ChartAxes.fit(x, y_top, w, h, vals, [v for _, v in lines] + list(spec or ()), lower_zero, len(vals))
    c.saveState()
    c.setFillColor(colors.black)
    c.setFont(SANS_BOLD, 7.5)
    c.drawString(x, y_top - 8, title)
    c.setStrokeColor(colors.black)
    c.setLineWidth(0.5)
    c.rect(ax.left, ax.bottom, ax.width, ax.height, stroke=1, fill=0)
    c.setFont(SANS, 6)
    _limit_lines(c, ax, lines, spec, unit, decimals, lower_zero)
    _points(c, ax, vals, set(flagged), set(beyond))
    c.restoreState()


@dataclass(frozen=True)
class _ChartAxes:
    """The plot area of a chart in points and the value range it spans; part i sits at the middle of slot i."""

    left: float
    bottom: float
    width: float
    height: float
    n: int
    lo: float
    hi: float

    @classmethod
    def fit(cls, x, y_top, w, h, vals: np.ndarray, lines: list[float], lower_zero: bool, n: int) -> _ChartAxes:
        span_vals = list(vals[np.isfinite(vals)]) + lines
        lo, hi = min(span_vals), max(span_vals)
        if lower_zero:
            lo = 0.0
        pad = (hi - lo) * 0.08 or 1.0
        lo, hi = (lo if lower_zero else lo - pad), hi + pad  # a moving range is never negative
        return cls(x + 34, y_top - h + 14, w - 98, h - 30, max(1, n), lo, hi)

    def px(self, i: int) -> float:
        return self.left + self.width * (i + 0.5) / self.n

    def py(self, v: float) -> float:
        return self.bottom + self.height * (v - self.lo) / (self.hi - self.lo)


def _limit_lines(c: Canvas, ax: _ChartAxes, lines, spec, unit: str, decimals: int, lower_zero: bool) -> None:
    """Centre line and control limits, the tolerance lines, their labels kept apart, the range's ends."""
    left, pw, py = ax.left, ax.width, ax.py
    tags = []
    for label, v in lines:
        c.setDash([] if label == "CL" else [3, 2])
        c.setStrokeColor(colors.black if label == "CL" else _rl(PALETTE["fail"]))
        c.setLineWidth(0.5 if label == "CL" else 0.8)
        c.line(left, py(v), left + pw, py(v))
        tags.append((py(v), f"{label} {format_fixed(v, decimals, signed=bool(unit) and not lower_zero)}{unit}"))
    c.setStrokeColor(_rl(PALETTE["pass"]))
    c.setLineWidth(0.8)
    c.setDash([1, 1.5])
    for v in spec or ():
        c.line(left, py(v), left + pw, py(v))
        tags.append((py(v), f"tolerance {format_fixed(v, decimals, signed=True)}{unit}"))
    c.setDash([])
    c.setLineWidth(0.5)
    tags.sort()
    placed: list[float] = []
    for ty, text in tags:  # keep the labels of close lines apart
        ty = max(ty, placed[-1] + 6.5) if placed else ty
        placed.append(ty)
        c.drawString(left + pw + 3, ty - 2, text)
    c.drawRightString(left - 2, ax.bottom - 2, format_fixed(ax.lo, decimals))
    c.drawRightString(left - 2, ax.bottom + ax.height - 4, format_fixed(ax.hi, decimals))


def _points(c: Canvas, ax: _ChartAxes, vals: np.ndarray, flagged: set[int], beyond: set[int]) -> None:
    """The line through the values (broken where one is missing), the part numbers, each point's mark."""
    finite = np.isfinite(vals)
    px, py = ax.px, ax.py
    c.setStrokeColor(colors.Color(0.3, 0.3, 0.3))
    c.setLineWidth(0.6)
    for i in range(len(vals) - 1):  # a missing value breaks the line
        if finite[i] and finite[i + 1]:
            c.line(px(i), py(vals[i]), px(i + 1), py(vals[i + 1]))
    step = max(1, math.ceil(ax.n / 20))
    for i, v in enumerate(vals):
        if i == 0 or (i + 1) % step == 0:
            c.setFillColor(colors.black)
            c.drawCentredString(px(i), ax.bottom - 8, str(i + 1))
        if not np.isfinite(v):
            continue
        x_i, y_i = px(i), py(v)
        _point_mark(c, x_i, y_i, flagged=i in flagged, beyond=i in beyond)
        if i in flagged or i in beyond:
            c.setFillColor(colors.black)
            c.setFont(SANS_BOLD, 6)
            above = y_i + 4.5 <= ax.bottom + ax.height - 6
            c.drawCentredString(x_i, y_i + 4.5 if above else y_i - 9.5, f"#{i + 1}")
            c.setFont(SANS, 6)


def _point_mark(c: Canvas, x: float, y: float, *, flagged: bool, beyond: bool) -> None:
    """A filled square outside the control limits, a cross beyond the tolerance, else a small circle."""
    if flagged:
        c.setFillColor(_rl(PALETTE["fail"]))
        c.setStrokeColor(colors.black)
        c.setLineWidth(0.6)
        c.rect(x - 3, y - 3, 6, 6, stroke=1, fill=1)
    elif not beyond:
        c.setFillColor(colors.white)
        c.setStrokeColor(colors.black)
        c.setLineWidth(0.6)
        c.circle(x, y, 1.8, stroke=1, fill=1)
    if beyond:
        c.setStrokeColor(colors.black)
        c.setLineWidth(1.2)
        c.line(x - 3.2, y - 3.2, x + 3.2, y + 3.2)
        c.line(x - 3.2, y + 3.2, x + 3.2, y - 3.2)


def _chart_key(c: Canvas, y: float) -> None:
    """The marks of the control charts, drawn as they appear."""
    c.saveState()
    c.setFont(SANS, 6.5)
    x = _MARGIN
    c.setFillColor(colors.white)
    c.setStrokeColor(colors.black)
    c.setLineWidth(0.6)
    c.circle(x + 3, y - 5, 1.8, stroke=1, fill=1)
    c.setFillColor(colors.black)
    c.drawString(x + 8, y - 7, "part within the limits")
    x += 80
    c.setFillColor(_rl(PALETTE["fail"]))
    c.rect(x, y - 8, 6, 6, stroke=1, fill=1)
    c.setFillColor(colors.black)
    c.drawString(x + 9, y - 7, "outside the control limits")
    x += 92
    c.setLineWidth(1.2)
    c.line(x, y - 8, x + 6, y - 2)
    c.line(x, y - 2, x + 6, y - 8)
    c.drawString(x + 9, y - 7, "beyond the tolerance")
    x += 80
    for colour, dash, width, text, advance in (
        (colors.black, [], 0.5, "CL centre line", 64),
        (_rl(PALETTE["fail"]), [3, 2], 0.8, "UCL / LCL control limits", 96),
        (_rl(PALETTE["pass"]), [1, 1.5], 0.8, "tolerance", 0),
    ):
        c.setStrokeColor(colour)
        c.setDash(dash)
        c.setLineWidth(width)
        c.line(x, y - 5, x + 14, y - 5)
        c.drawString(x + 17, y - 7, text)
        x += advance
    c.restoreState()
