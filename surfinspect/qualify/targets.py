"""Known-angle reference targets: gratings at true physical scale, as PDF (:mod:`.target_pdf`) or PNG.

A target sheet holds one grating per nominal lay angle, each with fiducial
crosses at its corners and its nominal angle printed beside it, plus a scale
bar to check the print scale with a ruler. Angles follow the fixed convention:
counter-clockwise from +X with +Y up on the sheet.

PDF: square gratings are vector stripes (sharp edges at any printer
resolution, no raster to resample). Sine gratings are continuous tone, which
a PDF cannot draw as vectors without a piecewise approximation, so they are
embedded as grey rasters at ``raster_dpi`` (default 600, the resolution of
common office laser printers) whose pixel pitch is the same along both axes:
the grating's printed size is rounded to whole raster pixels so that the
grating is not stretched, which would turn its angle.

PNG: the same sheet rendered at a stated ``dpi`` (recorded in the file), for
screen targets, for printing on a photo printer, and for the tests.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

import numpy as np

from ..errors import InputError
from ..fsutil import atomic_path, write_text_atomic
from ..measure.synth import sine_grating, to_uint8

__all__ = [
    "GRATING_KINDS",
    "PlacedGrating",
    "TargetSheet",
    "render_grating",
    "layout_targets",
    "render_sheet",
    "write_target_png",
    "target_recipe_yaml",
    "write_target_recipe",
    "check_dpi",
    "check_recipe_tolerance",
]

GRATING_KINDS = ("sine", "square")
MM_PER_INCH = 25.4
A4_MM = (210.0, 297.0)
MARGIN_MM = 15.0
GAP_MM = 14.0  # between gratings; holds the fiducials and the label
LABEL_MM = 9.0  # band below each grating for its nominal angle
HEADER_MM = 22.0  # title and scale bar above the gratings
SCALE_BAR_Y_MM = 10.0  # below the top margin
FIDUCIAL_ARM_MM = 3.0
FIDUCIAL_OFFSET_MM = 2.5  # from the grating corner, diagonally outward
FIDUCIAL_LINE_MM = 0.3
SCALE_BAR_MM = 50.0
#: Fewest pixels per period: below this the derivative filters of the engine lose accuracy.
MIN_PERIOD_PX = 4.0
#: Raster resolutions allowed, dots per inch: from a coarse screen target to a
#: fine photo print (common practice, no source).
DPI_RANGE = (50.0, 4800.0)
#: Largest raster rendered, in megapixels (a PNG sheet, or all rasters of a PDF):
#: an A4 sheet at about 1400 dpi. Larger requests are refused before anything is allocated.
MAX_RASTER_MEGAPIXELS = 200.0
#: Allowed tolerance of a written recipe's regions, degrees: the range a recipe's tolerance_deg accepts.
TOLERANCE_RANGE_DEG = (0.0, 45.0)  # lower end excluded
#: Smallest side of a recipe region after the inset, pixels (common practice, no source).
MIN_REGION_PX = 16
#: Pixels rendered at a time: bounds the float64 work arrays of a large grating to a few tens of MB.
_STRIP_PIXELS = 1 << 22
#: Grating grey levels: mean and amplitude on the [0, 1] scale (dark 0.1, light 0.9).
GRATING_MEAN = 0.5
GRATING_AMPLITUDE = 0.4


def render_grating(
    shape: tuple[int, int],
    lay_deg: float,
    period_px: float,
    *,
    kind: str = "sine",
    amplitude: float = GRATING_AMPLITUDE,
    mean: float = GRATING_MEAN,
    phase: float = 0.0,
    supersample: int = 4,
) -> np.ndarray:
    """A grating whose lines run along ``lay_deg``.

    The sine grating is :func:`surfinspect.measure.synth.sine_grating`,
    ``mean + amplitude * sin(2 pi u / period + phase)`` with
    ``u = -sin(lay) x + cos(lay) y_up`` at pixel centres (point samples of a
    band-limited pattern are exact). The square grating is
    ``mean + amplitude * sign(...)`` of the same sine, averaged over
    ``supersample x supersample`` sub-pixel samples per pixel so that its edges
    are anti-aliased instead of staircased (staircases would bias the lay).

    Parameters
    ----------
    shape : (rows, cols)
    lay_deg : float
        Direction of the lines, degrees counter-clockwise from +X, +Y up.
    period_px : float
        Period across the lines in pixels (> 2; at least 4 recommended).
    kind : {'sine', 'square'}
    amplitude, mean : float
        Grey levels on [0, 1]: the grating spans ``mean ± amplitude``.
    phase : float
        Phase in radians at the top-left pixel centre.
    supersample : int
        Sub-samples per pixel along each axis for ``kind='square'``.

    Returns
    -------
    (rows, cols) float32

    Raises
    ------
    InputError
        Unknown kind, a period of 2 px or less, or a bad ``supersample``.
    """
    _check_grating(kind, period_px, supersample)
    grating = np.empty(shape, dtype=np.float32)
    for first_row, strip in _grating_strips(
        shape, lay_deg, period_px, kind=kind, amplitude=amplitude, mean=mean, phase=phase, supersample=supersample
    ):
        grating[first_row : first_row + strip.shape[0]] = strip
    return grating


def _check_grating(kind: str, period_px: float, supersample: int) -> None:
    if kind not in GRATING_KINDS:
        raise InputError(f"grating kind: unknown (got {kind!r}, allowed {', '.join(GRATING_KINDS)})")
    if not period_px > 2.0:
        raise InputError(f"grating period: must exceed 2 px, the sampling limit (got {period_px:.3g} px)")
    if kind == "square" and int(supersample) < 1:
        raise InputError(f"supersample: must be a whole number >= 1 (got {supersample})")


def _grating_strips(shape, lay_deg, period_px, *, kind, amplitude, mean, phase, supersample):
    """Yield ``(first_row, strip)``: the grating of :func:`render_grating` a band of rows at a time."""
    s = int(supersample)
    rows, cols = shape
    work_per_row = max(1, cols) * (s * s if kind == "square" else 1)
    strip_rows = max(1, _STRIP_PIXELS // work_per_row)
    normal_y = math.cos(math.radians(lay_deg))
    for first_row in range(0, rows, strip_rows):
        # The strip's top row sits at y_up = -first_row: the same pattern with the phase moved along the normal.
        strip_phase = math.fmod(phase - 2 * math.pi * normal_y * first_row / period_px, 2 * math.pi)
        strip_shape = (min(strip_rows, rows - first_row), cols)
        if kind == "sine":
            strip = sine_grating(strip_shape, lay_deg, period_px, amplitude=amplitude, mean=mean, phase=strip_phase)
        else:
            strip = _square_block(strip_shape, lay_deg, period_px, amplitude, mean, strip_phase, s)
        yield first_row, strip


def _grating_uint8(shape, lay_deg, period_px, *, kind):
    """:func:`render_grating` as 8-bit grey, converted a strip at a time (no full-size float copy)."""
    _check_grating(kind, period_px, 4)
    grating = np.empty(shape, dtype=np.uint8)
    for first_row, strip in _grating_strips(
        shape, lay_deg, period_px, kind=kind, amplitude=GRATING_AMPLITUDE, mean=GRATING_MEAN, phase=0.0, supersample=4
    ):
        grating[first_row : first_row + strip.shape[0]] = to_uint8(strip)
    return grating


def _square_block(shape, lay_deg, period_px, amplitude, mean, phase, s):
    rows, cols = shape
    # Sub-sample k of pixel c sits at c + (k + 0.5)/s - 0.5; the fine grid's own
    # origin is c's first sub-sample, so shift the phase to keep pixel centres
    # where the sine grating has them.
    t = math.radians(lay_deg)
    delta = 0.5 / s - 0.5  # position of sub-sample 0 relative to the pixel centre
    u_shift = -math.sin(t) * delta + math.cos(t) * (-delta)  # y_up = -row
    fine_phase = phase + 2 * math.pi * u_shift / period_px
    fine = sine_grating((rows * s, cols * s), lay_deg, period_px * s, amplitude=1.0, mean=0.0, phase=fine_phase)
    square = np.sign(fine).reshape(rows, s, cols, s).mean(axis=(1, 3), dtype=np.float64)
    return (mean + amplitude * square).astype(np.float32)


# ------------------------------------------------------------------ sheet layout


@dataclass(frozen=True)
class PlacedGrating:
    """One grating on a sheet: its nominal lay and its rectangle in mm.

    ``rect_mm`` is ``(x, y, w, h)`` from the sheet's top-left corner, y downward.
    """

    lay_deg: float
    rect_mm: tuple[float, float, float, float]


@dataclass(frozen=True)
class TargetSheet:
    """A sheet (page) of gratings; ``size_mm`` is ``(width, height)``."""

    size_mm: tuple[float, float]
    gratings: tuple[PlacedGrating, ...]


def _check_lays(lays_deg: Sequence[float]) -> tuple[float, ...]:
    if not lays_deg:
        raise InputError("--lay: give at least one nominal angle (allowed 0 <= lay < 180)")
    lays = tuple(float(v) for v in lays_deg)
    for v in lays:
        if not (math.isfinite(v) and 0.0 <= v < 180.0):
            raise InputError(f"--lay: {v:g} is outside the allowed range 0 <= lay < 180 degrees")
    return lays


def layout_targets(
    lays_deg: Sequence[float],
    size_mm: tuple[float, float],
    *,
    page_mm: tuple[float, float] | None = A4_MM,
) -> tuple[TargetSheet, ...]:
    """Place gratings of ``size_mm`` in a grid, as many columns as fit the page width.

    Parameters
    ----------
    lays_deg : sequence of float
        Nominal lay angles in [0, 180), one grating each, in order.
    size_mm : (width, height)
        Grating size in mm.
    page_mm : (width, height) or None
        Page size (default A4 portrait); the gratings fill as many pages as
        needed. None: one sheet, as wide as an A4 page's columns and as tall
        as all rows need (for a raster).

    Returns
    -------
    tuple of TargetSheet

    Raises
    ------
    InputError
        An angle outside [0, 180), a non-positive size, or a grating larger
        than the printable area.
    """
    lays = _check_lays(lays_deg)
    w, h = (float(v) for v in size_mm)
    if not (w > 0 and h > 0 and math.isfinite(w) and math.isfinite(h)):
        raise InputError(f"--size-mm: width and height must be > 0 mm (got {w:g} x {h:g})")
    width_for_columns = (page_mm or A4_MM)[0]
    usable_w = width_for_columns - 2 * MARGIN_MM
    cols = int((usable_w + GAP_MM) // (w + GAP_MM))
    if cols < 1:
        raise InputError(f"--size-mm: a grating {w:g} mm wide does not fit the printable width {usable_w:g} mm")
    cell_h = h + LABEL_MM + GAP_MM
    if page_mm is not None:
        usable_h = page_mm[1] - 2 * MARGIN_MM - HEADER_MM
        rows_per_page = int((usable_h + GAP_MM) // cell_h)
        if rows_per_page < 1:
            raise InputError(
                f"--size-mm: a grating {h:g} mm high does not fit the printable height {usable_h - LABEL_MM:g} mm"
            )
    else:
        rows_per_page = math.ceil(len(lays) / cols)
    per_page = cols * rows_per_page
    sheets = []
    for start in range(0, len(lays), per_page):
        chunk = lays[start : start + per_page]
        placed = []
        for k, lay in enumerate(chunk):
            row, col = divmod(k, cols)
            x = MARGIN_MM + col * (w + GAP_MM)
            y = MARGIN_MM + HEADER_MM + row * cell_h
            placed.append(PlacedGrating(lay, (x, y, w, h)))
        if page_mm is not None:
            size = (float(page_mm[0]), float(page_mm[1]))
        else:
            used_cols = min(cols, len(chunk))
            used_rows = math.ceil(len(chunk) / cols)
            size = (
                max(2 * MARGIN_MM + used_cols * w + (used_cols - 1) * GAP_MM, 2 * MARGIN_MM + SCALE_BAR_MM + 40.0),
                2 * MARGIN_MM + HEADER_MM + used_rows * cell_h - GAP_MM,
            )
        sheets.append(TargetSheet(size, tuple(placed)))
    return tuple(sheets)


def check_dpi(dpi: float, flag: str) -> None:
    """Refuse a raster resolution outside :data:`DPI_RANGE`; the message names ``flag``."""
    lo, hi = DPI_RANGE
    if not (math.isfinite(dpi) and lo <= dpi <= hi):
        raise InputError(f"{flag}: must be {lo:g} <= dpi <= {hi:g} (got {dpi:g})")


def check_recipe_tolerance(tolerance_deg: float) -> None:
    """Refuse a region tolerance that a recipe would not accept (see :data:`TOLERANCE_RANGE_DEG`)."""
    lo, hi = TOLERANCE_RANGE_DEG
    if not (math.isfinite(tolerance_deg) and lo < tolerance_deg <= hi):
        raise InputError(f"--tolerance-deg: must be {lo:g} < tolerance <= {hi:g} degrees (got {tolerance_deg:g})")


def _check_raster_size(rows: int, cols: int, dpi: float, flag: str, what: str) -> None:
    megapixels = rows * cols / 1e6
    if megapixels > MAX_RASTER_MEGAPIXELS:
        raise InputError(
            f"{flag}: {what} at {dpi:g} dpi would be {megapixels:,.0f} megapixels "
            f"(allowed at most {MAX_RASTER_MEGAPIXELS:g}; a lower {flag}, or fewer or smaller gratings)"
        )


def _period_px(period_mm: float, dpi: float, what: str) -> float:
    if not (math.isfinite(period_mm) and period_mm > 0):
        raise InputError(f"--period-mm: must be > 0 (got {period_mm:g})")
    if not (math.isfinite(dpi) and dpi > 0):
        raise InputError(f"{what}: must be > 0 (got {dpi:g})")
    px = period_mm * dpi / MM_PER_INCH
    if px < MIN_PERIOD_PX:
        raise InputError(
            f"--period-mm: {period_mm:g} mm is {px:.2f} px at {dpi:g} dpi ({what}); "
            f"allowed at least {MIN_PERIOD_PX:g} px per period (a longer period or a higher resolution)"
        )
    return px


def _label(lay: float) -> str:
    return f"{lay:g}\N{DEGREE SIGN}"


def _stroke_offset_mm(width_mm: float) -> float:
    """Where the lay stroke beside a label sits: after the text, clear of the corner cross."""
    return min(24.0, width_mm - 6.0)


def _fiducial_centres(rect_mm: tuple[float, float, float, float]) -> list[tuple[float, float]]:
    x, y, w, h = rect_mm
    o = FIDUCIAL_OFFSET_MM
    return [(x - o, y - o), (x + w + o, y - o), (x - o, y + h + o), (x + w + o, y + h + o)]


# ------------------------------------------------------------------ raster sheet


def render_sheet(
    sheet: TargetSheet,
    *,
    period_mm: float,
    dpi: float,
    kind: str = "sine",
) -> tuple[np.ndarray, tuple[tuple[int, int, int, int], ...]]:
    """Render a target sheet as an 8-bit grey raster at ``dpi``.

    Returns
    -------
    image : (rows, cols) uint8
        White sheet, gratings, fiducial crosses, scale bar and labels.
    rects_px : tuple of (x, y, w, h)
        Each grating's rectangle in image pixels, in the order of ``sheet.gratings``.
    """
    from PIL import Image, ImageDraw

    if kind not in GRATING_KINDS:
        raise InputError(f"grating kind: unknown (got {kind!r}, allowed {', '.join(GRATING_KINDS)})")
    check_dpi(dpi, "--dpi")
    period_px = _period_px(period_mm, dpi, "--dpi")
    px_per_mm = dpi / MM_PER_INCH
    to_px = lambda v: int(round(v * px_per_mm))  # noqa: E731
    rows, cols = to_px(sheet.size_mm[1]), to_px(sheet.size_mm[0])
    _check_raster_size(rows, cols, dpi, "--dpi", f"a sheet of {cols} x {rows} px")
    sheet_px = np.full((rows, cols), 255, dtype=np.uint8)  # white; 8-bit from the start, no float sheet
    rects = []
    for g in sheet.gratings:
        x, y, w, h = (to_px(v) for v in g.rect_mm)
        sheet_px[y : y + h, x : x + w] = _grating_uint8((h, w), g.lay_deg, period_px, kind=kind)
        rects.append((x, y, w, h))
    # Fiducials and the scale bar are axis-aligned bars: drawn exactly on the pixel grid.
    arm, line = to_px(FIDUCIAL_ARM_MM), max(1, to_px(FIDUCIAL_LINE_MM))
    for g in sheet.gratings:
        for cx, cy in _fiducial_centres(g.rect_mm):
            px, py = to_px(cx), to_px(cy)
            sheet_px[py - line // 2 : py - line // 2 + line, px - arm : px + arm + 1] = 0
            sheet_px[py - arm : py + arm + 1, px - line // 2 : px - line // 2 + line] = 0
    bar_x, bar_y = to_px(MARGIN_MM), to_px(MARGIN_MM + SCALE_BAR_Y_MM)
    sheet_px[bar_y : bar_y + max(1, to_px(0.6)), bar_x : bar_x + to_px(SCALE_BAR_MM) + 1] = 0
    for k in range(int(SCALE_BAR_MM // 10) + 1):
        tx = bar_x + to_px(10.0 * k)
        sheet_px[bar_y - to_px(2.0) : bar_y, tx : tx + line] = 0

    image = Image.fromarray(sheet_px, mode="L")
    draw = ImageDraw.Draw(image)
    font = _font(max(10, to_px(3.2)))
    small = _font(max(8, to_px(2.4)))
    draw.text((bar_x, to_px(MARGIN_MM)), f"{SCALE_BAR_MM:g} mm scale bar: check it with a ruler", fill=0, font=small)
    for g, (x, y, w, h) in zip(sheet.gratings, rects):
        ty = y + h + to_px(FIDUCIAL_OFFSET_MM + 2.0)
        draw.text((x, ty), f"lay {_label(g.lay_deg)}", fill=0, font=font)
        # a short stroke along the nominal lay, beside the label (rows grow downward)
        t = math.radians(g.lay_deg)
        half = to_px(3.0)
        cx, cy = x + to_px(_stroke_offset_mm(g.rect_mm[2])), ty + to_px(2.0)
        draw.line(
            (cx - half * math.cos(t), cy + half * math.sin(t), cx + half * math.cos(t), cy - half * math.sin(t)),
            fill=0,
            width=line,
        )
    return np.asarray(image), tuple(rects)


def _font(size_px: int):
    from PIL import ImageFont

    try:
        return ImageFont.load_default(size=size_px)
    except TypeError:  # Pillow without FreeType sizing
        return ImageFont.load_default()


def write_target_png(
    path: str | Path,
    lays_deg: Sequence[float],
    *,
    period_mm: float,
    size_mm: tuple[float, float],
    dpi: float,
    kind: str = "sine",
    recipe_path: str | Path | None = None,
    recipe_name: str | None = None,
    tolerance_deg: float = 0.5,
) -> tuple[TargetSheet, tuple[tuple[int, int, int, int], ...]]:
    """Write one PNG sheet holding every grating, with its resolution recorded (pHYs).

    With ``recipe_path``, also write the recipe of :func:`target_recipe_yaml`
    (named ``recipe_name``, default ``target-<png name>``); it is built before
    either file is written, so a recipe that cannot be made leaves no PNG.

    Returns the sheet and each grating's rectangle in image pixels.

    Raises
    ------
    InputError
        A bad layout, a ``dpi`` outside :data:`DPI_RANGE`, a sheet over
        :data:`MAX_RASTER_MEGAPIXELS`, a period under :data:`MIN_PERIOD_PX`,
        or (with a recipe) a bad ``tolerance_deg`` or gratings too small for a region.
    """
    from PIL import Image

    if recipe_path is not None:
        check_recipe_tolerance(tolerance_deg)
    (sheet,) = layout_targets(lays_deg, size_mm, page_mm=None)
    image, rects = render_sheet(sheet, period_mm=period_mm, dpi=dpi, kind=kind)
    recipe_text = None
    if recipe_path is not None:
        name = recipe_name or f"target-{Path(path).stem}"
        recipe_text = target_recipe_yaml(name, sheet, rects, tolerance_deg=tolerance_deg)
    with atomic_path(path) as tmp:
        Image.fromarray(image, mode="L").save(tmp, format="PNG", dpi=(dpi, dpi))
    if recipe_text is not None:
        write_text_atomic(recipe_path, recipe_text)
    return sheet, rects


def target_recipe_yaml(
    name: str,
    sheet: TargetSheet,
    rects_px: Sequence[tuple[int, int, int, int]],
    *,
    tolerance_deg: float = 0.5,
    inset_px: int = 8,
) -> str:
    """A recipe measuring each grating of a rendered sheet (one region per nominal lay).

    Regions are inset by ``inset_px`` from the grating edges so that the
    derivative filters see grating only.

    Raises
    ------
    InputError
        ``tolerance_deg`` outside what a recipe accepts (0 < tolerance <= 45),
        or a grating whose region would be under :data:`MIN_REGION_PX` a side.
    """
    import yaml

    check_recipe_tolerance(tolerance_deg)
    regions = []
    for g, (x, y, w, h) in zip(sheet.gratings, rects_px):
        if min(w, h) - 2 * inset_px < MIN_REGION_PX:
            raise InputError(
                f"--size-mm: a grating of {w} x {h} px leaves a region under {MIN_REGION_PX} px a side "
                f"inside its {inset_px} px margin (allowed: larger gratings or a higher --dpi)"
            )
        regions.append(
            {
                "name": f"lay-{g.lay_deg:g}".replace(".", "p"),
                "rect": [x + inset_px, y + inset_px, w - 2 * inset_px, h - 2 * inset_px],
                "lay_deg": g.lay_deg,
                "tolerance_deg": tolerance_deg,
            }
        )
    doc = {"recipe": name, "revision": 1, "datum": "image", "regions": regions}
    return yaml.safe_dump(doc, sort_keys=False, default_flow_style=None)


def write_target_recipe(path: str | Path, name: str, sheet: TargetSheet, rects_px, *, tolerance_deg: float) -> None:
    """Write :func:`target_recipe_yaml` atomically."""
    write_text_atomic(path, target_recipe_yaml(name, sheet, rects_px, tolerance_deg=tolerance_deg))
