"""Overlay pictures: what was measured and judged, drawn on the photo.

The geometry is computed once, in image pixels, by :func:`build_scene`; two
painters draw it: :func:`render_overlay` rasterises it with OpenCV for the
overlay PNG, and the PDF report draws the same scene as vector graphics. So the
PNG, the PDF picture and the JSON share one set of coordinates.

What is drawn, and how it reads without colour:

- each region's outline in its verdict colour, solid for pass, dashed for fail,
  dotted for no texture, with a label "name: VERDICT"; excluded areas are
  darkened;
- the local lay as a short line per measured cell (with a dark edge, drawn
  inside the region only; on a coarser lattice when cells are too small to
  tell apart), deviating cells always, thicker and in their own colour;
- where the expected lay changes from cell to cell (circular or radial lay),
  the expected direction of each drawn cell as a longer white tick under the
  measured line, and the centre the lay turns about (marked "centre", or
  "centre (fitted)" when the engine found it);
- deviating patches as boxes named P1..Pn in the order of the region's
  ``patches`` list;
- the expected lay (white double arrow) and the measured lay (blue double
  arrow) of each region at its centroid, where the region has one direction;
- the part frame (origin and X/Y axes with arrow heads) when the datum is the
  part's edges.

Labels are set last, each in a filled box, and moved off one another
(:func:`place_labels`) so that no label hides another.

Angles: a lay ``theta`` is counter-clockwise from the part's +X axis with +Y up
on screen. On screen its direction is ``theta + rotation`` (the datum's
counter-clockwise skew against the image); in image pixels (rows down) that
is the vector ``(cos phi, -sin phi)``. :func:`screen_direction` is the one
place where the conversion happens.

The palette is the colour-blind-safe set of Okabe and Ito [1]_ [2]_.

References
----------
.. [1] M. Okabe and K. Ito, "Color Universal Design (CUD): How to make figures
   and presentations that are friendly to colorblind people", 2008,
   https://jfly.uni-koeln.de/color/
.. [2] B. Wong, "Points of view: Color blindness", Nature Methods 8, 441 (2011).
   doi:10.1038/nmeth.1618
"""

from __future__ import annotations

import contextlib
import math
import os
from dataclasses import dataclass, field
from typing import Protocol

import cv2
import numpy as np

from .. import fsutil
from ..errors import InputError
from ..measure.imaging import as_grey_float
from ..results import PartResult, PartVerdict, RegionResult, RegionVerdict

__all__ = [
    "RGB",
    "PALETTE",
    "RegionLook",
    "REGION_LOOKS",
    "PART_LOOKS",
    "STYLE_UNITS",
    "PatchMark",
    "patch_label",
    "RegionScene",
    "FrameScene",
    "EXPECTED_VARIES_DEG",
    "expected_varies",
    "measured_angles",
    "place_labels",
    "label_obstacles",
    "OverlayScene",
    "screen_direction",
    "build_scene",
    "dash_pieces",
    "arrow_polylines",
    "axis_polylines",
    "ScenePainter",
    "paint_scene",
    "glyph_widths",
    "render_overlay",
    "write_overlay_png",
    "grey_to_uint8",
    "checked_picture",
]

RGB = tuple[int, int, int]

#: Okabe-Ito colours [1]_ plus black and white, by their role in our pictures.
PALETTE: dict[str, RGB] = {
    "pass": (0, 158, 115),  # bluish green
    "fail": (213, 94, 0),  # vermillion
    "no-texture": (204, 121, 167),  # reddish purple
    "cell": (86, 180, 233),  # sky blue
    "cell-deviating": (230, 159, 0),  # orange
    "patch": (240, 228, 66),  # yellow
    "measured": (0, 114, 178),  # blue
    "expected": (255, 255, 255),
    "frame": (0, 0, 0),
    "halo-dark": (0, 0, 0),
    "halo-light": (255, 255, 255),
}


@dataclass(frozen=True)
class RegionLook:
    """How a verdict is shown: a word, a colour and a line pattern.

    ``dash`` is ``(on, off)`` in multiples of the line width, or None for a
    solid line, so the pattern reads the same at any scale and in black and
    white.
    """

    word: str
    colour: RGB
    dash: tuple[float, float] | None


REGION_LOOKS: dict[RegionVerdict, RegionLook] = {
    RegionVerdict.PASS: RegionLook("PASS", PALETTE["pass"], None),
    RegionVerdict.FAIL: RegionLook("FAIL", PALETTE["fail"], (4.0, 2.5)),
    RegionVerdict.NO_TEXTURE: RegionLook("NO TEXTURE", PALETTE["no-texture"], (1.0, 1.6)),
    RegionVerdict.REVIEW: RegionLook("REVIEW", PALETTE["no-texture"], (1.0, 1.6)),
}

#: Part verdicts: word, colour, and a shape for print (circle, crossed square, triangle).
PART_LOOKS: dict[PartVerdict, tuple[str, RGB, str]] = {
    PartVerdict.ACCEPT: ("ACCEPTED", PALETTE["pass"], "circle"),
    PartVerdict.REJECT: ("REJECTED", PALETTE["fail"], "cross"),
    PartVerdict.REVIEW: ("REVIEW", PALETTE["no-texture"], "triangle"),
}

#: Line widths and sizes in overlay units; one unit is 1/1000 of the picture's long side.
STYLE_UNITS = {
    "outline": 4.0,
    "hole": 2.5,
    "glyph": 1.6,
    "glyph-deviating": 3.0,
    "patch": 4.0,
    "expected": 3.5,
    "measured": 5.0,
    "frame": 3.5,
    "halo": 1.5,  # added on each side of a line that needs contrast on any grey
    "arrow-head": 16.0,
    "label": 18.0,  # text height
    "min-glyph-spacing": 16.0,  # cells closer than this on the picture are thinned out
}

#: Smallest text height and arrow head in output pixels, so small pictures stay legible.
MIN_LABEL_PX = 10.0
MIN_ARROW_HEAD_PX = 6.0

#: Length of the part-frame axes as a share of the picture's long side (at most).
FRAME_AXIS_SHARE = 0.15

#: Share of a cell's side taken by its lay glyph.
GLYPH_FILL = 0.65
#: Share of a cell's side taken by its expected-direction tick (longer than the glyph, so
#: that both show where they agree).
EXPECTED_FILL = 0.95
#: The expected lay "varies" over a region when its cells' expected directions spread by more
#: than this (degrees); then each cell's expected direction is drawn.
EXPECTED_VARIES_DEG = 0.05


def patch_label(number: int) -> str:
    """How a deviating patch is named on the picture and in the report's patch table."""
    return f"P{number}"


@dataclass(frozen=True)
class PatchMark:
    """A deviating patch: its number in the region (1-based) and box (x, y, w, h) in image px."""

    number: int
    bbox_px: tuple[int, int, int, int]


@dataclass(frozen=True)
class RegionScene:
    """The drawable geometry of one region, in image pixels (x right, y down).

    ``glyphs`` and ``deviating_glyphs`` are ``(K, 2, 2)`` arrays of line
    segments ``[[x0, y0], [x1, y1]]``.
    """

    name: str
    verdict: RegionVerdict
    outlines: tuple[np.ndarray, ...]
    holes: tuple[np.ndarray, ...]
    label_anchor: tuple[float, float]
    centre: tuple[float, float] | None
    arrow_half_length: float
    expected_screen_deg: tuple[float, ...]
    measured_screen_deg: tuple[float, ...]  # one lay, two for a crossed lay, none without a direction
    glyphs: np.ndarray
    deviating_glyphs: np.ndarray
    glyph_stride: int
    glyph_length_px: float  # of a regular glyph; a deviating one is glyph_length_px / glyph_stride
    patches: tuple[PatchMark, ...]
    expected_glyphs: np.ndarray = field(default_factory=lambda: np.zeros((0, 2, 2)))  # per cell, where it varies
    lay_centre: tuple[float, float] | None = None  # centre of circular / radial lay, image px
    lay_centre_fitted: bool = False

    @property
    def label(self) -> str:
        return f"{self.name}: {REGION_LOOKS[self.verdict].word}"


@dataclass(frozen=True)
class FrameScene:
    """The part frame: origin and the tips of its X and Y axes, in image pixels."""

    origin: tuple[float, float]
    x_tip: tuple[float, float]
    y_tip: tuple[float, float]

    @property
    def length(self) -> float:
        return math.hypot(self.x_tip[0] - self.origin[0], self.x_tip[1] - self.origin[1])


@dataclass(frozen=True)
class OverlayScene:
    width: int
    height: int
    regions: tuple[RegionScene, ...]
    frame: FrameScene | None


def screen_direction(angle_deg: float, rotation_deg: float = 0.0) -> tuple[float, float]:
    """Unit vector in image pixels (x right, y down) of a part-frame angle.

    Parameters
    ----------
    angle_deg : float
        Counter-clockwise from the part's +X axis, +Y up on screen.
    rotation_deg : float
        Counter-clockwise skew of the part frame against the image.
    """
    phi = math.radians(angle_deg + rotation_deg)
    return math.cos(phi), -math.sin(phi)


def _polygon_centroid(poly: np.ndarray) -> tuple[float, float]:
    x, y = poly[:, 0], poly[:, 1]
    xn, yn = np.roll(x, -1), np.roll(y, -1)
    cross = x * yn - xn * y
    area = cross.sum() / 2.0
    if abs(area) < 1e-9:
        return float(x.mean()), float(y.mean())
    return float(((x + xn) * cross).sum() / (6 * area)), float(((y + yn) * cross).sum() / (6 * area))


def expected_varies(expected_deg: np.ndarray) -> bool:
    """Whether a cell grid's expected lay changes across the region (circular or radial lay).

    Directions are axial: 179.9 and 0.1 differ by 0.2 degrees, not 179.8.
    """
    e = np.asarray(expected_deg, dtype=float)
    e = e[np.isfinite(e)]
    if e.size < 2:
        return False
    spread = (e - e[0] + 90.0) % 180.0 - 90.0
    return bool(np.abs(spread).max() > EXPECTED_VARIES_DEG)


@dataclass(frozen=True)
class _Glyphs:
    regular: np.ndarray
    deviating: np.ndarray
    expected: np.ndarray
    stride: int


def measured_angles(region: RegionResult) -> tuple[float, ...]:
    """The measured lay direction(s) of a region in the part frame: each grain found for a
    crossed lay (``extra.crossed_lay_deg``), else its one lay, else none."""
    found = region.extra.get("crossed_lay_deg") if region.extra else None
    if region.lay_pattern == "crossed" and isinstance(found, (list, tuple)):
        return tuple(float(v) for v in found if isinstance(v, (int, float)))
    return () if region.lay_deg is None else (float(region.lay_deg),)


def _cell_glyphs(region: RegionResult, rotation_deg: float, min_spacing_px: float) -> _Glyphs:
    """Glyph segments of the measured cells, thinned to a lattice when cells are small.

    Regular cells off the lattice are left out and the kept glyphs grow to the
    lattice spacing so they stay visible; deviating cells are always drawn,
    each at its own size, so that a patch shows cell by cell. Where the
    expected lay varies, every drawn cell (and every lattice cell of the
    region, measured or not) also gets its expected direction.
    """
    empty = np.zeros((0, 2, 2))
    cells = region.cells
    if cells is None or cells.lay_deg.size == 0:
        return _Glyphs(empty, empty, empty, 1)
    lay = np.asarray(cells.lay_deg, dtype=float)
    measured = np.isfinite(lay)
    deviating = measured & np.asarray(cells.deviating, dtype=bool)
    stride = max(1, int(math.ceil(min_spacing_px / cells.cell_px))) if min_spacing_px > 0 else 1
    rows, cols = np.indices(lay.shape)
    on_lattice = (rows % stride == 0) & (cols % stride == 0)
    x0, y0 = cells.origin_px
    step = float(cells.cell_px)

    def segments(angles: np.ndarray, mask: np.ndarray, length: float) -> np.ndarray:
        i, j = np.nonzero(mask)
        cx = x0 + (j + 0.5) * step
        cy = y0 + (i + 0.5) * step
        phi = np.radians(angles[i, j] + rotation_deg)
        dx, dy = np.cos(phi) * length / 2, -np.sin(phi) * length / 2
        return np.stack([np.stack([cx - dx, cy - dy], -1), np.stack([cx + dx, cy + dy], -1)], 1).reshape(-1, 2, 2)

    regular = segments(lay, measured & ~deviating & on_lattice, GLYPH_FILL * step * stride)
    expected = empty
    exp = np.asarray(cells.expected_deg, dtype=float)
    if exp.shape == lay.shape and expected_varies(exp):
        known = np.isfinite(exp)
        expected = np.concatenate(
            [
                segments(exp, known & on_lattice & ~deviating, EXPECTED_FILL * step * stride),
                segments(exp, known & deviating, EXPECTED_FILL * step),
            ]
        )
    return _Glyphs(regular, segments(lay, deviating, GLYPH_FILL * step), expected, stride)


def _lay_centre(region: RegionResult) -> tuple[tuple[float, float] | None, bool]:
    """The centre of a circular or radial lay (image px, from the result's figures), and whether it was fitted."""
    centre = region.extra.get("centre_px") if region.extra else None
    if centre is None or len(centre) != 2 or not all(isinstance(v, (int, float)) for v in centre):
        return None, False
    return (float(centre[0]), float(centre[1])), bool(region.extra.get("centre_fitted", False))


def build_scene(part: PartResult, width: int, height: int, *, min_glyph_spacing_px: float = 0.0) -> OverlayScene:
    """Compute everything the overlay draws, in image pixels.

    Parameters
    ----------
    part : PartResult
        The judged part; outlines, cells and patch boxes are in image pixels.
    width, height : int
        Image size in pixels (used for the part-frame axes).
    min_glyph_spacing_px : float
        Cells whose side is below this (in image pixels) are drawn on a
        coarser lattice; deviating cells are always drawn. 0 draws every cell.

    Returns
    -------
    OverlayScene
    """
    rotation = part.datum.rotation_deg if part.datum is not None else 0.0
    regions = []
    for region in part.regions:
        outlines = tuple(np.asarray(p, dtype=float).reshape(-1, 2) for p in region.outline_px if len(p) >= 2)
        holes = tuple(np.asarray(p, dtype=float).reshape(-1, 2) for p in region.exclude_px if len(p) >= 2)
        if outlines:
            allpts = np.concatenate(outlines)
            left, top = float(allpts[:, 0].min()), float(allpts[:, 1].min())
            span = min(np.ptp(allpts[:, 0]), np.ptp(allpts[:, 1]))
            centre = _polygon_centroid(max(outlines, key=lambda p: cv2.contourArea(np.asarray(p, np.float32))))
        else:
            left = top = 0.0
            span = 0.0
            centre = None
        g = _cell_glyphs(region, rotation, min_glyph_spacing_px)
        lay_centre, fitted = _lay_centre(region)
        regions.append(
            RegionScene(
                name=region.name,
                verdict=region.verdict,
                outlines=outlines,
                holes=holes,
                label_anchor=(left, top),
                centre=centre,
                arrow_half_length=0.3 * float(span),
                expected_screen_deg=tuple(e + rotation for e in region.expected_angles),
                measured_screen_deg=tuple(m + rotation for m in measured_angles(region)),
                glyphs=g.regular,
                deviating_glyphs=g.deviating,
                glyph_stride=g.stride,
                glyph_length_px=0.0 if region.cells is None else GLYPH_FILL * region.cells.cell_px * g.stride,
                patches=tuple(PatchMark(k + 1, tuple(int(v) for v in p.bbox_px)) for k, p in enumerate(region.patches)),
                expected_glyphs=g.expected,
                lay_centre=lay_centre,
                lay_centre_fitted=fitted,
            )
        )
    frame = None
    if part.datum is not None and part.datum.kind == "part-edge":
        ox, oy = (float(v) for v in part.datum.origin_px)
        length = FRAME_AXIS_SHARE * max(width, height)
        if part.datum.size_px is not None:
            length = min(length, 0.4 * min(float(v) for v in part.datum.size_px))
        ux, uy = screen_direction(0.0, rotation)
        vx, vy = screen_direction(90.0, rotation)
        # +Y points away from the part (up); keep both tips on the picture where there is room
        lx = max(min(length, 0.92 * _room_along(ox, oy, ux, uy, width, height)), 0.4 * length)
        ly = max(min(length, 0.92 * _room_along(ox, oy, vx, vy, width, height)), 0.4 * length)
        frame = FrameScene((ox, oy), (ox + lx * ux, oy + lx * uy), (ox + ly * vx, oy + ly * vy))
    return OverlayScene(int(width), int(height), tuple(regions), frame)


def _room_along(x: float, y: float, ux: float, uy: float, width: float, height: float) -> float:
    """How far one can go from (x, y) along (ux, uy) and stay on a width x height picture."""
    limits = []
    for pos, d, size in ((x, ux, width), (y, uy, height)):
        if d > 1e-12:
            limits.append((size - pos) / d)
        elif d < -1e-12:
            limits.append(-pos / d)
    return max(0.0, min(limits)) if limits else 0.0


def glyph_widths(glyph_length: float, stride: int, unit: float) -> tuple[float, float, float]:
    """Line widths of regular glyphs, deviating glyphs and the glyphs' dark edge.

    Widths grow with the glyph (long glyphs of large cells would otherwise
    vanish among the grain lines they run along), within bounds set by the
    picture's unit. ``glyph_length`` is a regular glyph's length and
    ``stride`` the thinning of the lattice (deviating glyphs are ``stride``
    times shorter). All values are in the painter's output units.
    """
    base = STYLE_UNITS["glyph"] * unit
    regular = min(max(base, 0.06 * glyph_length), 3.0 * base)
    if glyph_length > 0:
        regular = min(regular, 0.25 * glyph_length)
    deviating_length = glyph_length / max(1, stride)
    deviating = max(regular, min(STYLE_UNITS["glyph-deviating"] * unit, 1.8 * regular, 0.3 * deviating_length))
    edge = 0.5 * STYLE_UNITS["halo"] * unit
    return regular, deviating, edge


def dash_pieces(points: np.ndarray, closed: bool, on: float, off: float) -> list[np.ndarray]:
    """Cut a polyline into dashes of length ``on`` separated by gaps ``off``.

    Returns the dashes as a list of ``(K, 2)`` polylines (corners kept).
    """
    pts = np.asarray(points, dtype=float)
    if closed:
        pts = np.vstack([pts, pts[:1]])
    seg = np.diff(pts, axis=0)
    cum = np.concatenate([[0.0], np.cumsum(np.hypot(seg[:, 0], seg[:, 1]))])
    total = cum[-1]
    if total <= 0 or on <= 0:
        return []

    def at(t: float) -> np.ndarray:
        return np.array([np.interp(t, cum, pts[:, 0]), np.interp(t, cum, pts[:, 1])])

    pieces = []
    period = on + max(off, 0.0)
    for start in np.arange(0.0, total, period):
        end = min(start + on, total)
        inner = np.nonzero((cum > start) & (cum < end))[0]
        pieces.append(np.vstack([at(start), pts[inner], at(end)]))
    return pieces


# ------------------------------------------------------------------- painting


def arrow_polylines(centre: tuple[float, float], angle_deg: float, half_length: float, head: float) -> list[np.ndarray]:
    """A double-headed arrow in image px: a lay is axial, both ends point the same way.

    ``angle_deg`` is a screen angle (counter-clockwise, +Y up); ``head`` is
    the length of the barbs.
    """
    ux, uy = screen_direction(angle_deg)
    cx, cy = centre
    a = np.array([cx - ux * half_length, cy - uy * half_length])
    b = np.array([cx + ux * half_length, cy + uy * half_length])
    polys = [np.array([a, b])]
    for tip, sign in ((a, -1.0), (b, 1.0)):
        for turn in (150.0, -150.0):
            hx, hy = screen_direction(angle_deg + turn)
            polys.append(np.array([tip, tip + sign * head * np.array([hx, hy])]))
    return polys


def axis_polylines(origin: tuple[float, float], tip: tuple[float, float], head: float) -> list[np.ndarray]:
    """A single-headed arrow from ``origin`` to ``tip`` (image px) with barbs of length ``head``."""
    o, t = np.asarray(origin, dtype=float), np.asarray(tip, dtype=float)
    d = t - o
    length = float(np.hypot(*d))
    polys = [np.array([o, t])]
    if length <= 0:
        return polys
    ux, uy = d / length
    for turn in (150.0, -150.0):
        c, s = math.cos(math.radians(turn)), math.sin(math.radians(turn))
        # the same turn as screen_direction's, in image px (rows down): counter-clockwise on screen
        bx, by = c * ux + s * uy, -s * ux + c * uy
        polys.append(np.array([t, t + head * np.array([bx, by])]))
    return polys


def label_obstacles(scene: OverlayScene, size_px: float) -> list[tuple[float, float, float, float]]:
    """Boxes (x, y, w, h, image px) that labels should keep off: the part frame's origin and axes.

    Each axis is covered by boxes of side ``size_px`` along its length, so a
    skewed axis does not block the whole rectangle it spans.
    """
    f = scene.frame
    if f is None:
        return []
    boxes = []
    half = size_px / 2
    for tip in (f.x_tip, f.y_tip):
        n = max(2, int(math.ceil(math.hypot(tip[0] - f.origin[0], tip[1] - f.origin[1]) / max(size_px, 1e-9))) + 1)
        for t in np.linspace(0.0, 1.0, n):
            x = f.origin[0] + t * (tip[0] - f.origin[0])
            y = f.origin[1] + t * (tip[1] - f.origin[1])
            boxes.append((x - half, y - half, size_px, size_px))
    return boxes


def place_labels(
    boxes: list[tuple[float, float, float, float]],
    bounds: tuple[float, float],
    *,
    gap: float = 1.0,
    obstacles: list[tuple[float, float, float, float]] = (),
) -> list[tuple[float, float]]:
    """Top-left corners for label boxes, each near where it wants to be and none on another.

    Boxes are placed in the order given (the first keeps its place); each is
    tried at its wanted corner, then moved by steps of its own height down or
    up and of half its width sideways, nearest first (a step up counts about
    twice: a label moved down stays on the region or box it names), kept
    inside the picture. When no place is free the wanted one is used.

    Parameters
    ----------
    boxes : list of (x, y, w, h)
        Wanted top-left corner and size, in output units with y down.
    bounds : (width, height)
        The picture, in the same units.
    gap : float
        Space kept between two labels.
    obstacles : list of (x, y, w, h)
        Boxes that no label may cover if it can be placed elsewhere (same units).

    Returns
    -------
    list of (x, y)
    """
    width, height = bounds
    steps = sorted(
        ((dx, dy) for dy in (0, 1, -1, 2, -2, 3, -3) for dx in (0.0, 0.5, -0.5, 1.0, -1.0)),
        # moving down (into the region or box a label names) before moving up and away from it
        key=lambda d: (math.hypot(d[0], d[1] * (2.1 if d[1] < 0 else 1.0)), -d[1], -d[0]),
    )
    placed: list[tuple[float, float, float, float]] = [tuple(float(v) for v in b) for b in obstacles]
    out: list[tuple[float, float]] = []

    def clamp(x, y, w, h):
        return min(max(x, 0.0), max(0.0, width - w)), min(max(y, 0.0), max(0.0, height - h))

    def free(x, y, w, h) -> bool:
        return all(
            x + w + gap <= a or a + c + gap <= x or y + h + gap <= b or b + d + gap <= y for a, b, c, d in placed
        )

    for x, y, w, h in boxes:
        choice = clamp(x, y, w, h)
        for dx, dy in steps:
            cx, cy = clamp(x + dx * w, y + dy * (h + gap), w, h)
            if free(cx, cy, w, h):
                choice = (cx, cy)
                break
        placed.append((*choice, w, h))
        out.append(choice)
    return out


class ScenePainter(Protocol):
    """What :func:`paint_scene` needs of a drawing surface.

    Geometry is passed in image pixels; widths and sizes in the surface's
    output units (raster pixels, or PDF points), ``scale`` output units per
    image pixel and ``unit`` output units per style unit. Labels are
    collected by :meth:`label` and set by the painter's own ``set_labels``
    after the scene (with :func:`place_labels`).
    """

    scale: float
    unit: float
    min_arrow_head: float

    def stroke(self, polys, closed, colour, width, *, dash=None, halo=None, halo_width=None, butt=False) -> None: ...
    def rectangle(self, bbox_px, colour, width, *, halo, halo_width) -> None: ...
    def circle(self, centre_px, radius, colour, width, *, halo, halo_width) -> None: ...
    def darken(self, holes) -> None: ...
    def clipped_to(self, region: RegionScene) -> contextlib.AbstractContextManager: ...
    def label(self, text: str, anchor_px, fill: RGB, *, above: bool = False) -> None: ...


def paint_scene(p: ScenePainter, scene: OverlayScene) -> None:
    """Draw a scene in one fixed order, the same for the PNG and the PDF.

    Excluded areas darkened; per-cell expected ticks, then cell glyphs
    (inside their region only: a border cell was measured on its pixels
    inside the outline); patch boxes, then region outlines and holes over
    them (a box along a region's edge leaves the verdict's dash pattern
    visible); expected and measured lay arrows; the centre of a circular or
    radial lay; the part frame; labels last, in order of importance (region
    verdicts, patch numbers, centre, frame axes), so nothing covers them.
    """
    u = p.unit

    def w(key: str) -> float:
        return STYLE_UNITS[key] * u

    dark, light = PALETTE["halo-dark"], PALETTE["halo-light"]
    halo = w("halo")
    holes = [h for r in scene.regions for h in r.holes]
    if holes:
        p.darken(holes)
    for r in scene.regions:
        if not (len(r.glyphs) or len(r.deviating_glyphs) or len(r.expected_glyphs)):
            continue
        regular, deviating, edge = glyph_widths(r.glyph_length_px * p.scale, r.glyph_stride, u)
        with p.clipped_to(r):
            if len(r.expected_glyphs):
                tick = max(0.8 * regular, 0.5 * STYLE_UNITS["glyph"] * u)
                p.stroke(
                    r.expected_glyphs,
                    False,
                    PALETTE["expected"],
                    tick,
                    halo=dark,
                    halo_width=tick + 2 * edge,
                    butt=True,
                )
            p.stroke(r.glyphs, False, PALETTE["cell"], regular, halo=dark, halo_width=regular + 2 * edge, butt=True)
            p.stroke(
                r.deviating_glyphs,
                False,
                PALETTE["cell-deviating"],
                deviating,
                halo=dark,
                halo_width=deviating + 2 * edge,
                butt=True,
            )
    for r in scene.regions:
        for m in r.patches:
            p.rectangle(m.bbox_px, PALETTE["patch"], w("patch"), halo=dark, halo_width=w("patch") + 2 * halo)
    for r in scene.regions:
        look = REGION_LOOKS[r.verdict]
        p.stroke(r.holes, True, look.colour, w("hole"), dash=look.dash, halo=dark, halo_width=w("hole") + 2 * halo)
        p.stroke(
            r.outlines, True, look.colour, w("outline"), dash=look.dash, halo=dark, halo_width=w("outline") + 2 * halo
        )
    head_out = max(p.min_arrow_head, w("arrow-head"))
    head = head_out / p.scale
    for r in scene.regions:
        if r.centre is None:
            continue
        for e in r.expected_screen_deg:
            arrow = arrow_polylines(r.centre, e, r.arrow_half_length, head)
            p.stroke(arrow, False, PALETTE["expected"], w("expected"), halo=dark, halo_width=w("expected") + 2 * halo)
        for m in r.measured_screen_deg:
            arrow = arrow_polylines(r.centre, m, 0.8 * r.arrow_half_length, head)
            p.stroke(arrow, False, PALETTE["measured"], w("measured"), halo=light, halo_width=w("measured") + 2 * halo)
    centre_labels = []
    for r in scene.regions:
        if r.lay_centre is None:
            continue
        cx, cy = r.lay_centre
        arm = 0.9 * head
        cross = [np.array([[cx - arm, cy], [cx + arm, cy]]), np.array([[cx, cy - arm], [cx, cy + arm]])]
        p.stroke(cross, False, PALETTE["expected"], w("frame"), halo=dark, halo_width=w("frame") + 2 * halo)
        p.circle(
            r.lay_centre, 0.55 * head_out, PALETTE["expected"], w("frame"), halo=dark, halo_width=w("frame") + 2 * halo
        )
        text = f"{r.name} centre" + (" (fitted)" if r.lay_centre_fitted else "")
        same = [k for k, (_, at) in enumerate(centre_labels) if math.dist(at, r.lay_centre) < 1.0]
        if same:  # regions about one centre share one label
            k = same[0]
            centre_labels[k] = (centre_labels[k][0].replace(" centre", f", {text}", 1), centre_labels[k][1])
        else:
            centre_labels.append((text, r.lay_centre))
    f = scene.frame
    if f is not None:
        axes = axis_polylines(f.origin, f.x_tip, head) + axis_polylines(f.origin, f.y_tip, head)
        p.stroke(axes, False, PALETTE["frame"], w("frame"), halo=light, halo_width=w("frame") + 2 * halo)
        p.circle(f.origin, 0.5 * head_out, PALETTE["frame"], w("frame"), halo=light, halo_width=w("frame") + 2 * halo)
    for r in scene.regions:
        p.label(r.label, r.label_anchor, REGION_LOOKS[r.verdict].colour)
    for r in scene.regions:
        for m in r.patches:
            p.label(patch_label(m.number), m.bbox_px[:2], PALETTE["patch"], above=True)
    for text, anchor in centre_labels:
        p.label(text, anchor, light)
    if f is not None:
        p.label("X", f.x_tip, light)
        p.label("Y", f.y_tip, light)


_SHIFT = 4  # OpenCV sub-pixel bits for drawing at fractional coordinates
_FONT = cv2.FONT_HERSHEY_DUPLEX


def _fixed(points: np.ndarray) -> np.ndarray:
    return np.round(np.asarray(points, dtype=float) * (1 << _SHIFT)).astype(np.int32)


def _px(width: float) -> int:
    return max(1, int(round(width)))


class _RasterPainter:
    """Paints a scene into an RGB uint8 picture with OpenCV (anti-aliased)."""

    min_arrow_head = MIN_ARROW_HEAD_PX

    def __init__(self, image: np.ndarray, scale: float):
        self.image = image
        self.scale = scale
        self.unit = max(image.shape[:2]) / 1000.0
        self.labels: list[tuple] = []
        self.obstacles: list[tuple[float, float, float, float]] = []  # image px

    def width(self, key: str) -> int:
        return _px(STYLE_UNITS[key] * self.unit)

    def _polylines(self, polys, closed: bool, colour: RGB, width: float) -> None:
        if len(polys):
            pts = [_fixed(np.asarray(q) * self.scale) for q in polys]
            cv2.polylines(self.image, pts, closed, tuple(colour), _px(width), cv2.LINE_AA, _SHIFT)

    def stroke(self, polys, closed, colour, width, *, dash=None, halo=None, halo_width=None, butt=False) -> None:
        polys = list(polys)
        if dash is not None:
            on, off = dash[0] * _px(width) / self.scale, dash[1] * _px(width) / self.scale
            polys = [d for q in polys for d in dash_pieces(q, closed, on, off)]
            closed = False
        if halo is not None:
            self._polylines(polys, closed, halo, max(_px(width) + 2, halo_width))
        self._polylines(polys, closed, colour, width)

    def rectangle(self, bbox_px, colour, width, *, halo, halo_width) -> None:
        x, y, w, h = bbox_px
        box = np.array([[x, y], [x + w, y], [x + w, y + h], [x, y + h]], dtype=float)
        self.stroke([box], True, colour, width, halo=halo, halo_width=halo_width)

    def circle(self, centre_px, radius, colour, width, *, halo, halo_width) -> None:
        centre = tuple(int(round(v * self.scale)) for v in centre_px)
        cv2.circle(self.image, centre, _px(radius), tuple(halo), _px(halo_width), cv2.LINE_AA)
        cv2.circle(self.image, centre, _px(radius), tuple(colour), _px(width), cv2.LINE_AA)

    def darken(self, holes) -> None:
        mask = np.zeros(self.image.shape[:2], np.uint8)
        cv2.fillPoly(mask, [_fixed(h * self.scale) for h in holes], 255, cv2.LINE_8, _SHIFT)
        inside = mask > 0
        self.image[inside] = (self.image[inside] * 0.45).astype(np.uint8)  # still readable in grey print

    def region_mask(self, region: RegionScene) -> np.ndarray:
        """255 inside the region's outlines and outside its holes, on the output picture."""
        mask = np.zeros(self.image.shape[:2], np.uint8)
        cv2.fillPoly(mask, [_fixed(o * self.scale) for o in region.outlines], 255, cv2.LINE_8, _SHIFT)
        if region.holes:
            cv2.fillPoly(mask, [_fixed(h * self.scale) for h in region.holes], 0, cv2.LINE_8, _SHIFT)
        return mask

    @contextlib.contextmanager
    def clipped_to(self, region: RegionScene):
        if not region.outlines:
            yield
            return
        before = self.image.copy()
        yield
        outside = self.region_mask(region) == 0
        self.image[outside] = before[outside]

    def label(self, text: str, anchor_px, fill: RGB, *, above: bool = False) -> None:
        self.labels.append((text.encode("ascii", "replace").decode("ascii"), anchor_px, fill, above))

    def set_labels(self) -> None:
        """Text in filled boxes next to their anchors (image px), inside the picture and off one another."""
        # Hershey duplex capitals are about 22 px tall at font scale 1
        scale = max(MIN_LABEL_PX, STYLE_UNITS["label"] * self.unit) / 22.0
        thick = max(1, int(round(scale * 1.6)))
        h_img, w_img = self.image.shape[:2]
        wanted, looks = [], []
        for text, anchor_px, fill, above in self.labels:
            (tw, th), base = cv2.getTextSize(text, _FONT, scale, thick)
            pad = max(2, int(round(0.3 * th)))
            x = int(round(anchor_px[0] * self.scale)) + pad
            y = int(round(anchor_px[1] * self.scale)) + (-(th + base + 3 * pad) if above else pad)
            wanted.append((x, y, tw + 2 * pad, th + base + 2 * pad))
            looks.append((text, fill, pad, th))
        obstacles = [(x * self.scale, y * self.scale, w * self.scale, h * self.scale) for x, y, w, h in self.obstacles]
        spots = place_labels(wanted, (w_img - 1, h_img - 1), obstacles=obstacles)
        for (x, y), (_, _, bw, bh), (text, fill, pad, th) in zip(spots, wanted, looks):
            x, y = int(round(x)), int(round(y))
            corner = (x + bw, y + bh)
            cv2.rectangle(self.image, (x, y), corner, tuple(fill), -1)
            cv2.rectangle(self.image, (x, y), corner, (0, 0, 0), 1)
            cv2.putText(self.image, text, (x + pad, y + pad + th), _FONT, scale, (0, 0, 0), thick, cv2.LINE_AA)
        self.labels = []


def checked_picture(pixels: np.ndarray, part: PartResult) -> np.ndarray:
    """The pixels as (M, N) float32 grey, checked against the size the result was measured on."""
    try:
        grey = as_grey_float(pixels)
    except ValueError as exc:
        raise InputError(f"overlay of part {part.name!r}: pixels: {exc}") from None
    m, n = grey.shape
    w, h = part.image.width, part.image.height
    if (w or h) and (w, h) != (n, m):
        raise InputError(
            f"overlay of part {part.name!r}: pixels are {n} x {m} px but the result is for a "
            f"{w} x {h} px image (allowed: the image the result was measured on)"
        )
    return grey


def _fit_scale(shape: tuple[int, int], max_side: int | None) -> float:
    if max_side is None:
        return 1.0
    if int(max_side) < 1:
        raise InputError(f"overlay: max_side must be a positive number of pixels (got {max_side})")
    return min(1.0, float(max_side) / max(shape))


def grey_to_uint8(grey: np.ndarray, scale: float = 1.0) -> np.ndarray:
    """Grey [0, 1] float image to uint8, resized by ``scale`` with area averaging."""
    if scale != 1.0:
        size = (max(1, int(round(grey.shape[1] * scale))), max(1, int(round(grey.shape[0] * scale))))
        grey = cv2.resize(grey, size, interpolation=cv2.INTER_AREA)
    return np.clip(grey * 255.0 + 0.5, 0, 255).astype(np.uint8)


def render_overlay(pixels: np.ndarray, part: PartResult, *, max_side: int | None = None) -> np.ndarray:
    """Draw the part's measurement and verdicts on its photo.

    Parameters
    ----------
    pixels : (M, N) ndarray
        The grey image the result was measured on (float in [0, 1], or uint8 /
        uint16 scaled by their range), rows growing downward.
    part : PartResult
        The judged part; its image width and height must match ``pixels``.
    max_side : int, optional
        Shrink the picture so that its long side is at most this many pixels
        (area averaging); all marks are scaled with it. Default: full size.

    Returns
    -------
    (H, W, 3) uint8 ndarray
        RGB picture; ``H, W == M, N`` unless ``max_side`` shrinks it. Line
        widths and text size grow with the picture (:data:`STYLE_UNITS`, one
        unit = 1/1000 of the long side; lines at least 1 px, text at least
        :data:`MIN_LABEL_PX` tall).

    Raises
    ------
    InputError
        Pixels of the wrong shape or dtype, or a non-positive ``max_side``.
    """
    grey = checked_picture(pixels, part)
    scale = _fit_scale(grey.shape, max_side)
    image = cv2.cvtColor(grey_to_uint8(grey, scale), cv2.COLOR_GRAY2RGB)
    painter = _RasterPainter(image, scale)
    spacing = STYLE_UNITS["min-glyph-spacing"] * painter.unit / scale
    scene = build_scene(part, grey.shape[1], grey.shape[0], min_glyph_spacing_px=spacing)
    paint_scene(painter, scene)
    painter.obstacles = label_obstacles(scene, max(MIN_ARROW_HEAD_PX, STYLE_UNITS["arrow-head"] * painter.unit) / scale)
    painter.set_labels()
    return image


def write_overlay_png(
    path: str | os.PathLike, pixels: np.ndarray, part: PartResult, *, max_side: int | None = None
) -> None:
    """Write :func:`render_overlay` as a PNG file, atomically (temporary name, then rename).

    Raises
    ------
    InputError
        As :func:`render_overlay`.
    """
    rgb = render_overlay(pixels, part, max_side=max_side)
    ok, data = cv2.imencode(".png", cv2.cvtColor(rgb, cv2.COLOR_RGB2BGR))
    if not ok:  # pragma: no cover - OpenCV encodes any uint8 RGB picture
        raise RuntimeError(f"could not encode the overlay of part {part.name!r} as PNG")
    fsutil.write_bytes_atomic(path, data.tobytes())
