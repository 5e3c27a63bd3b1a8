"""Known-angle reference targets as a printable PDF at true scale (A4 pages); see :mod:`surfinspect.qualify.targets`."""

from __future__ import annotations

import io
import math
from pathlib import Path
from typing import Sequence

from reportlab.lib.pagesizes import A4
from reportlab.lib.units import mm

from .._version import __version__
from ..errors import InputError
from ..fsutil import write_bytes_atomic
from ..pdfa.document import DocumentInfo, archival_canvas, finish_archival
from ..pdfa.fonts import SANS, SANS_BOLD
from .targets import (
    A4_MM,
    FIDUCIAL_ARM_MM,
    FIDUCIAL_LINE_MM,
    FIDUCIAL_OFFSET_MM,
    GRATING_AMPLITUDE,
    GRATING_KINDS,
    GRATING_MEAN,
    MARGIN_MM,
    MM_PER_INCH,
    SCALE_BAR_MM,
    SCALE_BAR_Y_MM,
    PlacedGrating,
    TargetSheet,
    _check_raster_size,
    _fiducial_centres,
    _grating_uint8,
    _label,
    _period_px,
    _stroke_offset_mm,
    check_dpi,
    layout_targets,
)

__all__ = ["write_target_pdf"]


def write_target_pdf(
    path: str | Path,
    lays_deg: Sequence[float],
    *,
    period_mm: float,
    size_mm: tuple[float, float],
    kind: str = "sine",
    raster_dpi: float = 600.0,
) -> tuple[TargetSheet, ...]:
    """Write a printable PDF of gratings at true scale (A4 pages).

    Square gratings are vector stripes; sine gratings are grey rasters at
    ``raster_dpi`` with equal pitch on both axes (see the module notes).
    Each grating has fiducial crosses at its corners and its nominal lay
    printed below it; each page has a scale bar and the printing instruction.

    Returns the sheets (pages) with each grating's rectangle in mm.
    """
    if kind not in GRATING_KINDS:
        raise InputError(f"grating kind: unknown (got {kind!r}, allowed {', '.join(GRATING_KINDS)})")
    sheets = layout_targets(lays_deg, size_mm)
    raster_period_px = _check_printable(sheets, kind, period_mm, raster_dpi)
    info = DocumentInfo(
        title="surfinspect lay targets " + ", ".join(_label(g.lay_deg) for sheet in sheets for g in sheet.gratings),
        subject=f"{kind} gratings, period {period_mm:g} mm, {size_mm[0]:g} x {size_mm[1]:g} mm",
        author=f"surfinspect {__version__}",
    )
    buf = io.BytesIO()
    c = archival_canvas(buf, info)
    for page_no, sheet in enumerate(sheets, 1):
        _page_header(c, kind, period_mm)
        _scale_bar(c)
        for g in sheet.gratings:
            if kind == "sine":
                _draw_sine_raster(c, g, raster_period_px, raster_dpi)
            else:
                gx, gy, gw, gh = g.rect_mm
                _draw_square_stripes(c, (_x(gx), _y(gy + gh), _x(gw), _x(gh)), g.lay_deg, _x(period_mm))
            _fiducials_and_label(c, g)
        c.setFont(SANS, 7)
        c.drawString(
            _x(MARGIN_MM),
            _x(8),
            f"surfinspect {__version__}  |  grating {size_mm[0]:g} x {size_mm[1]:g} mm"
            + (f"  |  raster {raster_dpi:g} dpi" if kind == "sine" else "  |  vector stripes")
            + f"  |  page {page_no} of {len(sheets)}",
        )
        c.showPage()
    c.save()
    write_bytes_atomic(path, finish_archival(buf.getvalue(), info))
    return sheets


# PDF frame: origin bottom-left, +Y up, 1 unit = 1 pt; the sheet's mm are measured from the top-left.


def _x(v_mm: float) -> float:
    """A length or an x position on the sheet, mm to points."""
    return v_mm * mm


def _y(v_mm: float) -> float:
    """A y position on the sheet (mm down from the top edge) to points up from the bottom edge."""
    return A4[1] - v_mm * mm


def _check_printable(sheets: Sequence[TargetSheet], kind: str, period_mm: float, raster_dpi: float) -> float | None:
    """Check the period (and the rasters' size for sine gratings); return the raster period in px."""
    if kind != "sine":
        _period_px(period_mm, 1200.0, "a 1200 dpi printer")  # vector stripes: only a printable period is checked
        return None
    check_dpi(raster_dpi, "--raster-dpi")
    raster_period_px = _period_px(period_mm, raster_dpi, "--raster-dpi")
    tiles = [_raster_shape(g.rect_mm, raster_dpi) for sheet in sheets for g in sheet.gratings]
    _check_raster_size(
        sum(rows * cols for rows, cols in tiles), 1, raster_dpi, "--raster-dpi", f"the {len(tiles)} grating rasters"
    )
    return raster_period_px


def _page_header(c, kind: str, period_mm: float) -> None:
    """The sheet's title and the printing instruction along its top margin."""
    c.setFillColorRGB(0, 0, 0)
    c.setFont(SANS_BOLD, 10)
    c.drawString(_x(MARGIN_MM), _y(MARGIN_MM) - 8, f"Lay reference targets: {kind} gratings, period {period_mm:g} mm")
    c.setFont(SANS, 7.5)
    c.drawRightString(
        _x(A4_MM[0] - MARGIN_MM),
        _y(MARGIN_MM) - 8,
        "Print at 100 % (no fit to page). Lay: counter-clockwise from +X, +Y up.",
    )


def _scale_bar(c) -> None:
    """A scale bar with 10 mm ticks, to check the print scale with a ruler."""
    bar_y = _y(MARGIN_MM + SCALE_BAR_Y_MM)
    c.setLineWidth(_x(0.6))
    c.line(_x(MARGIN_MM), bar_y, _x(MARGIN_MM + SCALE_BAR_MM), bar_y)
    c.setLineWidth(_x(FIDUCIAL_LINE_MM))
    for k in range(int(SCALE_BAR_MM // 10) + 1):
        tx = _x(MARGIN_MM + 10.0 * k)
        c.line(tx, bar_y, tx, bar_y + _x(2))
    c.drawString(_x(MARGIN_MM + SCALE_BAR_MM + 3), bar_y - 2.5, f"{SCALE_BAR_MM:g} mm")


def _draw_sine_raster(c, g: PlacedGrating, raster_period_px: float, raster_dpi: float) -> None:
    """A sine grating as a grey raster whose pixel pitch is the same along both axes."""
    from PIL import Image
    from reportlab.lib.utils import ImageReader

    gx, gy, _, _ = g.rect_mm
    rows, cols = _raster_shape(g.rect_mm, raster_dpi)
    tile = _grating_uint8((rows, cols), g.lay_deg, raster_period_px, kind="sine")
    drawn_w = cols * MM_PER_INCH / raster_dpi  # whole pixels, equal pitch on both axes
    drawn_h = rows * MM_PER_INCH / raster_dpi
    c.drawImage(
        ImageReader(Image.fromarray(tile, mode="L")), _x(gx), _y(gy + drawn_h), width=_x(drawn_w), height=_x(drawn_h)
    )


def _fiducials_and_label(c, g: PlacedGrating) -> None:
    """Fiducial crosses at the grating's corners; its nominal lay, in words and as a stroke, below it."""
    gx, gy, gw, gh = g.rect_mm
    c.setStrokeColorRGB(0, 0, 0)
    c.setLineWidth(_x(FIDUCIAL_LINE_MM))
    for fx, fy in _fiducial_centres(g.rect_mm):
        c.line(_x(fx - FIDUCIAL_ARM_MM), _y(fy), _x(fx + FIDUCIAL_ARM_MM), _y(fy))
        c.line(_x(fx), _y(fy - FIDUCIAL_ARM_MM), _x(fx), _y(fy + FIDUCIAL_ARM_MM))
    label_y = _y(gy + gh + FIDUCIAL_OFFSET_MM + 5.5)
    c.setFillColorRGB(0, 0, 0)
    c.setFont(SANS_BOLD, 10)
    c.drawString(_x(gx), label_y, f"lay {_label(g.lay_deg)}")
    t = math.radians(g.lay_deg)
    cx, cy, half = _x(gx + _stroke_offset_mm(gw)), label_y + 3.5, _x(3.0)
    c.line(cx - half * math.cos(t), cy - half * math.sin(t), cx + half * math.cos(t), cy + half * math.sin(t))


def _raster_shape(rect_mm: tuple[float, float, float, float], raster_dpi: float) -> tuple[int, int]:
    """(rows, cols) of a grating's raster in the PDF: its size rounded to whole pixels."""
    return (
        max(1, int(round(rect_mm[3] * raster_dpi / MM_PER_INCH))),
        max(1, int(round(rect_mm[2] * raster_dpi / MM_PER_INCH))),
    )


def _draw_square_stripes(c, box_pt: tuple[float, float, float, float], lay_deg: float, period_pt: float) -> None:
    """Dark stripes along ``lay_deg`` on a light ground, clipped to ``box_pt`` (x, y, w, h, PDF frame)."""
    x, y, w, h = box_pt
    light = GRATING_MEAN + GRATING_AMPLITUDE
    dark = GRATING_MEAN - GRATING_AMPLITUDE
    c.saveState()
    clip = c.beginPath()
    clip.rect(x, y, w, h)
    c.clipPath(clip, stroke=0, fill=0)
    c.setFillColorRGB(light, light, light)
    c.rect(x, y, w, h, stroke=0, fill=1)
    c.translate(x + w / 2, y + h / 2)
    c.rotate(lay_deg)  # PDF rotation is counter-clockwise with +Y up: the project's convention
    reach = math.hypot(w, h) / 2 + period_pt
    c.setFillColorRGB(dark, dark, dark)
    k_max = int(math.ceil(reach / period_pt))
    for k in range(-k_max, k_max + 1):
        c.rect(-reach, k * period_pt, 2 * reach, period_pt / 2, stroke=0, fill=1)
    c.restoreState()
