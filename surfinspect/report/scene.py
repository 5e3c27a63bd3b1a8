"""The overlay scene: palette and looks, and the geometry of what the overlay shows, in image pixels.

:func:`build_scene` computes it once; :mod:`surfinspect.report.overlay` paints it as a
PNG and the PDF report as vector graphics, so the PNG, the PDF picture and the JSON
share one set of coordinates. Labels are placed last by :func:`place_labels`.

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

import math
from dataclasses import dataclass, field

import cv2
import numpy as np

from ..results import PartResult, PartVerdict, RegionResult, RegionVerdict

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
    RegionVerdict.NO_TEXTURE: RegionLook("NO-TEXTURE", PALETTE["no-texture"], (1.0, 1.6)),
    RegionVerdict.REVIEW: RegionLook("REVIEW", PALETTE["no-texture"], (1.0, 1.6)),
}

#: Part verdicts: word, colour, and a shape for print (circle, crossed square, triangle).
PART_LOOKS: dict[PartVerdict, tuple[str, RGB, str]] = {
    PartVerdict.ACCEPT: ("ACCEPT", PALETTE["pass"], "circle"),
    PartVerdict.REJECT: ("REJECT", PALETTE["fail"], "cross"),
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
