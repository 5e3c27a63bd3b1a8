"""The legend of the summary page: angle convention, colours and shapes of the overlay."""

from __future__ import annotations

import math

from reportlab.lib import colors
from reportlab.pdfgen.canvas import Canvas

from ..formatting import ANGLE_DECIMALS
from ..pdfa.fonts import SANS, SANS_BOLD
from ..results import (
    PartVerdict,
    RegionVerdict,
)
from .layout import _FRAME_W, _MARGIN, _rl, _titled_box, _verdict_icon
from .scene import PALETTE, PART_LOOKS, REGION_LOOKS, STYLE_UNITS

_LEGEND_H = 228.0


_KEY_TEXT_X = _MARGIN + 54  # where the words of the left column's keys start


def _legend(c: Canvas, y: float) -> None:
    """Angle convention, colours and shapes, explained once."""
    c.saveState()
    _titled_box(c, y, _LEGEND_H, "How to read the pictures", line_width=0.6, title_size=9)
    yy = _line_keys(c, y - 30)
    _mark_keys(c, yy)
    # right column: angle convention
    x = _MARGIN + _FRAME_W / 2 + 20
    _angle_convention(c, x, y)
    _verdict_keys(c, x, y)
    c.restoreState()


def _line_keys(c: Canvas, yy: float) -> float:
    """Left column, first the lines: region outlines by verdict, cell glyphs, expected and measured arrows."""
    line_keys = [
        ("outline", PALETTE["pass"], None, "Region passes (outline solid)"),
        ("outline", PALETTE["fail"], REGION_LOOKS[RegionVerdict.FAIL].dash, "Region fails (outline dashed)"),
        (
            "outline",
            PALETTE["no-texture"],
            REGION_LOOKS[RegionVerdict.NO_TEXTURE].dash,
            "No measurable texture (dotted): review",
        ),
        ("glyph", PALETTE["cell"], None, "Local lay of a cell (short line along the grain)"),
        ("glyph-deviating", PALETTE["cell-deviating"], None, "Cell whose lay deviates beyond tolerance"),
        ("expected", PALETTE["expected"], None, "Expected lay of the region (white double arrow)"),
        ("measured", PALETTE["measured"], None, "Measured lay of the region (blue double arrow)"),
    ]
    x0, x1, tx = _MARGIN + 10, _MARGIN + 46, _KEY_TEXT_X
    for key, colour, dash, text in line_keys:
        w = STYLE_UNITS[key] * 0.55
        c.setLineCap(1)
        if key in ("outline", "expected", "glyph", "glyph-deviating"):  # drawn with a dark edge on the pictures
            c.setStrokeColor(colors.black)
            c.setLineWidth(w + (1.6 if key in ("outline", "expected") else 0.8))
            if dash:
                c.setDash([dash[0] * w, dash[1] * w])
            c.line(x0, yy, x1, yy)
        c.setStrokeColor(_rl(colour))
        c.setLineWidth(w)
        if dash:
            c.setDash([dash[0] * w, dash[1] * w])
        c.line(x0, yy, x1, yy)
        c.setDash([])
        c.setFillColor(colors.black)
        c.setFont(SANS, 7.5)
        c.drawString(tx, yy - 2.5, text)
        yy -= 15
    return yy


def _mark_keys(c: Canvas, yy: float) -> None:
    """Left column, then the marks: expected tick per cell, centre, excluded area, patch box, part frame."""
    tx = _KEY_TEXT_X
    # expected direction per cell, where it turns: a white tick under the cell's line
    c.setLineCap(0)
    for colour, width, half in (
        (colors.black, 2.2, 14),
        (colors.white, 1.0, 14),
        (colors.black, 2.0, 8),
        (_rl(PALETTE["cell"]), 1.0, 8),
    ):
        c.setStrokeColor(colour)
        c.setLineWidth(width)
        c.line(_MARGIN + 28 - half, yy - 3, _MARGIN + 28 + half, yy + 3)
    c.setFont(SANS, 7.5)
    c.drawString(tx, yy - 2.5, "Expected lay per cell where it turns (circular, radial): white tick")
    yy -= 15
    c.setLineCap(1)
    for colour, width in ((colors.black, 2.4), (colors.white, 1.0)):
        c.setStrokeColor(colour)
        c.setLineWidth(width)
        c.circle(_MARGIN + 28, yy, 3.5, stroke=1, fill=0)
        c.line(_MARGIN + 21, yy, _MARGIN + 35, yy)
        c.line(_MARGIN + 28, yy - 7, _MARGIN + 28, yy + 7)
    c.setFillColor(colors.black)
    c.drawString(tx, yy - 2.5, 'Centre of a circular or radial lay ("fitted" when found from the cells)')
    yy -= 15
    c.setFillColor(colors.Color(0, 0, 0, 0.55))
    c.rect(_MARGIN + 18, yy - 5, 20, 10, stroke=0, fill=1)
    c.setFillColor(colors.black)
    c.drawString(tx, yy - 2.5, "Excluded from the measurement (darkened)")
    yy -= 15
    c.setStrokeColor(_rl(PALETTE["patch"]))
    c.setLineWidth(2)
    c.rect(_MARGIN + 16, yy - 5, 24, 10, stroke=1, fill=0)
    c.drawString(tx, yy - 2.5, "Deviating patch P1, P2, ... as in the patch table")
    yy -= 15
    c.setStrokeColor(colors.black)
    c.setLineWidth(1.2)
    for tip in ((_MARGIN + 40, yy - 4), (_MARGIN + 14, yy + 9)):
        c.line(_MARGIN + 14, yy - 4, *tip)
    c.line(_MARGIN + 40, yy - 4, _MARGIN + 36, yy - 2)
    c.line(_MARGIN + 40, yy - 4, _MARGIN + 36, yy - 6)
    c.line(_MARGIN + 14, yy + 9, _MARGIN + 12, yy + 5)
    c.line(_MARGIN + 14, yy + 9, _MARGIN + 16, yy + 5)
    c.circle(_MARGIN + 14, yy - 4, 2, stroke=1, fill=0)
    c.drawString(tx, yy - 2.5, "Part frame: origin, +X and +Y (datum part-edge)")


def _angle_convention(c: Canvas, x: float, y: float) -> None:
    """Right column: the angle convention, drawn (a 30 degree lay) and in words."""
    c.setFont(SANS_BOLD, 8)
    c.drawString(x, y - 30, "Angle convention")
    cx, cy, r = x + 30, y - 80, 26
    c.setLineWidth(0.8)
    c.line(cx - 4, cy, cx + r + 8, cy)
    c.line(cx, cy - 4, cx, cy + r + 8)
    c.setFont(SANS, 6.5)
    c.drawString(cx + r + 10, cy - 2, "+X")
    c.drawString(cx - 4, cy + r + 11, "+Y")
    c.setStrokeColor(_rl(PALETTE["measured"]))
    c.setLineWidth(1.6)
    c.line(cx, cy, cx + r * math.cos(math.radians(30)), cy + r * math.sin(math.radians(30)))
    c.setStrokeColor(colors.black)
    c.setLineWidth(0.5)
    c.arc(cx - r * 0.6, cy - r * 0.6, cx + r * 0.6, cy + r * 0.6, 0, 30)
    c.drawString(cx + r * 0.65, cy + 3, "30°")
    text = c.beginText(x + 80, y - 44)
    text.setFont(SANS, 7)
    text.setLeading(8.6)
    for line in (
        "Lay 0–180°, counter-clockwise from",
        "the part's +X axis, +Y up on the page:",
        "0° horizontal grain, 90° vertical.",
        "Deviation = measured - expected,",
        "wrapped to (-90°, +90°]; positive =",
        "turned counter-clockwise.",
        f"Printed with {ANGLE_DECIMALS} decimals, rounded half up",
        "from the values in the result file.",
        "Region positions: x along +X, y down",
        "from the part's top edge (recipe units).",
    ):
        text.textLine(line)
    c.drawText(text)


def _verdict_keys(c: Canvas, x: float, y: float) -> None:
    """Right column, below: the three part verdicts by word, colour and shape; how to read a rose plot."""
    c.setFont(SANS_BOLD, 8)
    c.drawString(x, y - 140, "Verdicts (word and shape)")
    yy = y - 156
    for verdict in (PartVerdict.ACCEPT, PartVerdict.REJECT, PartVerdict.REVIEW):
        word, colour, shape = PART_LOOKS[verdict]
        c.setFillColor(_rl(colour))
        c.rect(x, yy - 6, 14, 12, stroke=0, fill=1)
        _verdict_icon(c, shape, x + 24, yy, 10)
        c.setFillColor(colors.black)
        c.setFont(SANS, 7.5)
        meaning = {
            PartVerdict.ACCEPT: "every region within its limits",
            PartVerdict.REJECT: "at least one region fails",
            PartVerdict.REVIEW: "no region fails, one has no measurable texture",
        }[verdict]
        c.drawString(x + 34, yy - 2.5, f"{word}: {meaning}")
        yy -= 14
    c.setFont(SANS, 6.8)
    c.drawString(x, yy - 4, "Rose plots: grey petals = orientation histogram (area ~ weight),")
    c.drawString(x, yy - 12, "green band = tolerance, dashed = expected, blue = measured lay.")
