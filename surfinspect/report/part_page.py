"""The part page: header, photo with overlay, region and patch tables, the row of figures."""

from __future__ import annotations

import dataclasses
import math
import os
from xml.sax.saxutils import escape

import numpy as np
from reportlab.lib import colors
from reportlab.lib.styles import ParagraphStyle
from reportlab.pdfgen.canvas import Canvas
from reportlab.platypus import Paragraph

from ..formatting import format_angle, format_fixed, format_signed_angle
from ..pdfa.fonts import MONO, SANS, SANS_BOLD, SANS_OBLIQUE
from ..results import (
    PartResult,
)
from .layout import _FRAME_W, _GLYPH_SPACING_PT, _MARGIN, _PICTURE_MAX_H, PAGE_SIZE, _fit_text, _Layout, _verdict_badge
from .overlay import checked_picture
from .picture import _draw_picture, _picture_jpeg
from .regions import (
    _CENTRED,
    _expected_text,
    _measured_text,
    _PartFigures,
    _patch_table,
    _region_table,
    _tolerance_text,
    _verdict_sentence,
)
from .rose import SPECTRUM_RANGE_DB, _draw_deviation_bars, _draw_rose, _figure_list, spectrum_caption, spectrum_petals
from .scene import PART_LOOKS, build_scene, measured_angles

_PART_HEADER_H = 40.0
_VERDICT_LINE = ParagraphStyle("verdict", fontName=SANS_BOLD, fontSize=8.5, leading=10.5)


def _part_header(c: Canvas, y: float, part: PartResult, page_note: str, number: str = "") -> None:
    badge_w, badge_h = 170.0, 40.0
    text_w = _FRAME_W - badge_w - 10
    c.setFillColor(colors.black)
    c.setFont(SANS_BOLD, 15)
    c.drawString(_MARGIN, y - 15, _fit_text(c, part.name + page_note, SANS_BOLD, 15, text_w))
    _verdict_badge(c, part.verdict, PAGE_SIZE[0] - _MARGIN - badge_w, y - badge_h, badge_w, badge_h)
    c.setFont(SANS, 7.5)
    c.drawString(
        _MARGIN,
        y - 26,
        _fit_text(c, f"Recipe {part.recipe.name} · revision {part.recipe.revision}", SANS, 7.5, text_w),
    )
    c.drawString(
        _MARGIN,
        y - 35,
        (f"Part {number} · " if number else "") + f"Inspected {part.inspected_at} · engine {part.engine_version}",
    )


def _image_lines(part: PartResult) -> str:
    im = part.image
    datum = part.datum
    if datum is None or datum.kind == "image":
        frame = "image axes"
        if datum is not None and datum.rotation_deg:
            frame += f", camera rotation corrected by {format_signed_angle(datum.rotation_deg)}"
    else:
        ox, oy = datum.origin_px
        frame = (
            f"part edges: rotation {format_fixed(datum.rotation_deg, 3, signed=True)}° against the image "
            f"(counter-clockwise positive), origin ({format_fixed(ox, 1)}, {format_fixed(oy, 1)}) px"
        )
        if datum.fit_quality is not None:
            frame += f", edge fit RMS {format_fixed(datum.fit_quality, 3)} px"
    if datum is not None and datum.pixel_size_mm:
        frame += f"; {datum.pixel_size_mm:g} mm per pixel"
    return (
        f"<b>Image file</b> {escape(os.path.basename(im.path) or im.path or '(not recorded)')} · "
        f"{im.width} × {im.height} px · {im.bit_depth} bit · <b>part frame</b> {escape(frame)}<br/>"
        f"<b>Image SHA-256</b> <font name={MONO} size=7>{im.sha256 or '(not recorded)'}</font>"
    )


#: Height of the picture when the part's other blocks leave more room on its page (points).
_PICTURE_ROOMY_H = 470.0
#: Smallest picture height that is still worth keeping a part on one page for (points).
_PICTURE_MIN_H = 240.0


def _picture_height(fig: _PartFigures, header_h: float) -> float:
    """Picture height that fills the part's page without pushing the rest onto another.

    The tallest height up to 470 pt at which the tables and figures still
    fit below the picture on the same page, but no less than 240 pt; when the
    part needs more than one page anyway, the default 340 pt.
    """
    rest = header_h + 8.0  # the picture's own gap
    if fig.part.regions:
        rest += _region_table(fig).wrap(_FRAME_W, 10_000)[1] + 8.0
    patches = _patch_table(fig)
    if patches is not None:
        rest += 10.0 + 2.0 + patches.wrap(_FRAME_W, 10_000)[1] + 8.0
    rows = math.ceil(len(_figure_list(fig)) / _FIGURES_PER_ROW)
    rest += rows * (_FIGURE_H + 4.0)
    room = (_Layout.top - _Layout.bottom) - rest - 2.0
    if room < _PICTURE_MIN_H:
        return _PICTURE_MAX_H
    return float(min(room, _PICTURE_ROOMY_H))


def _layout_part(
    layout: _Layout, fig: _PartFigures, pixels: np.ndarray | None, bookmark: str, number: str = ""
) -> None:
    part = fig.part

    def header(c: Canvas, y: float) -> None:
        c.bookmarkPage(bookmark)
        c.addOutlineEntry(f"{part.name}: {PART_LOOKS[part.verdict][0]}", bookmark, level=0)
        _part_header(c, y, part, "", number)

    top = layout.y
    layout.block(_PART_HEADER_H, header, gap=4)
    layout.continuation_header = lambda: layout.block(
        _PART_HEADER_H, lambda c, y: _part_header(c, y, part, " (continued)", number), gap=6
    )
    layout.flowable(Paragraph(escape(_verdict_sentence(part)), _VERDICT_LINE), gap=4)
    if part.reasons:
        layout.text("<b>Part:</b> " + "; ".join(escape(r) for r in part.reasons))
    layout.text(_image_lines(part), gap=6)
    if pixels is not None:
        grey = checked_picture(pixels, part)
        m, n = grey.shape
        s = min(_FRAME_W / n, _picture_height(fig, top - layout.y) / m)
        jpeg, _ = _picture_jpeg(grey)
        scene = build_scene(part, n, m, min_glyph_spacing_px=_GLYPH_SPACING_PT / s)
        x0 = _MARGIN + (_FRAME_W - n * s) / 2
        layout.block(m * s, lambda c, y: _draw_picture(c, jpeg, scene, x0, y, s), gap=8)
    else:
        layout.block(40, lambda c, y: _no_picture_note(c, y), gap=8)
    if part.regions:
        layout.flowable(_region_table(fig))
    else:
        layout.text("<b>No region was measured</b>; see the reasons above.")
    patches = _patch_table(fig)
    if patches is not None:
        layout.text("<b>Deviating patches</b> (named P1, P2, ... as on the picture, per region)", gap=2)
        layout.flowable(patches)
    _layout_figures(layout, fig)
    layout.continuation_header = None


def _no_picture_note(c: Canvas, y: float) -> None:
    c.setStrokeColor(colors.black)
    c.setDash([3, 2])
    c.rect(_MARGIN, y - 36, _FRAME_W, 36, stroke=1, fill=0)
    c.setDash([])
    c.setFont(SANS_OBLIQUE, 8)
    c.drawCentredString(
        PAGE_SIZE[0] / 2, y - 21, "Picture not supplied to the report: see the overlay PNG beside the result."
    )


_FIGURES_PER_ROW = 4
_FIGURE_H = 138.0


def _layout_figures(layout: _Layout, fig: _PartFigures) -> None:
    cell_w = _FRAME_W / _FIGURES_PER_ROW
    figures = _figure_list(fig)
    for start in range(0, len(figures), _FIGURES_PER_ROW):
        chunk = figures[start : start + _FIGURES_PER_ROW]

        def draw(c: Canvas, y: float, chunk=chunk) -> None:
            for k, (kind, region, d) in enumerate(chunk):
                x = _MARGIN + cell_w * k
                if kind == "deviations":
                    _draw_deviation_bars(c, x, y, cell_w, region, d)
                    continue
                cx = x + cell_w / 2
                varies = region.lay_pattern in _CENTRED
                expected = [] if varies else list(region.expected_angles)
                c.setFillColor(colors.black)
                c.setFont(SANS_BOLD, 7.5)
                spectrum = kind == "spectrum"
                title = "angular power spectrum" if spectrum else "orientation histogram"
                c.drawCentredString(cx, y - 9, f"{region.name}: {title}")
                as_printed = dataclasses.replace(region, lay_deg=d["lay_deg"], extra=d["extra"])  # the JSON's values
                petals = spectrum_petals(d) if spectrum else None
                _draw_rose(
                    c,
                    cx,
                    y - 66,
                    46,
                    region,
                    expected,
                    () if spectrum else measured_angles(as_printed),
                    petals,
                    SPECTRUM_RANGE_DB if spectrum else None,
                )
                c.setFont(SANS, 6.5)
                if spectrum:
                    _spectrum_caption(c, cx, y, d)
                    continue
                if varies:
                    exp_text = f"expected {_expected_text(region)}: varies per cell"
                elif expected:
                    exp_text = f"expected {' / '.join(format_angle(e, axial=True) for e in expected)} {_tolerance_text(region, d)}"
                else:
                    exp_text = f"expected {_expected_text(region)}"
                c.drawCentredString(cx, y - 128, exp_text)
                c.drawCentredString(cx, y - 136, f"measured {_measured_text(region, d)}")

        layout.block(_FIGURE_H, draw, gap=4)


def _spectrum_caption(c: Canvas, cx: float, y: float, d) -> None:
    """What the spectrum rose shows: the directions it gives (the verdict's) and the families' balance."""
    first, second = spectrum_caption(d)
    c.drawCentredString(cx, y - 128, first)
    c.drawCentredString(cx, y - 136, second)
