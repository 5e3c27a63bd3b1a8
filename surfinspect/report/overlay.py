"""Overlay pictures: what was measured and judged, drawn on the photo.

The scene (looks, geometry, labels) lives in :mod:`surfinspect.report.scene`; this
module paints it (the painter interface, the OpenCV raster painter, the PNG) and
keeps the overlay's public names in one place.

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

Angles (the one conversion, :func:`screen_direction`) and the palette (colour-blind safe)
are described in :mod:`surfinspect.report.scene`.
"""

from __future__ import annotations

import contextlib
import math
import os
from typing import Protocol

import cv2
import numpy as np

from .. import fsutil
from ..errors import InputError
from ..measure.imaging import as_grey_float
from ..results import PartResult
from .scene import (
    EXPECTED_VARIES_DEG,
    MIN_ARROW_HEAD_PX,
    MIN_LABEL_PX,
    PALETTE,
    PART_LOOKS,
    REGION_LOOKS,
    RGB,
    STYLE_UNITS,
    FrameScene,
    OverlayScene,
    PatchMark,
    RegionLook,
    RegionScene,
    arrow_polylines,
    axis_polylines,
    build_scene,
    dash_pieces,
    expected_varies,
    glyph_widths,
    label_obstacles,
    measured_angles,
    patch_label,
    place_labels,
    screen_direction,
)

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
    holes = [h for r in scene.regions for h in r.holes]
    if holes:
        p.darken(holes)
    for r in scene.regions:
        _paint_cell_glyphs(p, r)
    _paint_outlines(p, scene)
    head_out = max(p.min_arrow_head, _width(p, "arrow-head"))
    _paint_lay_arrows(p, scene, head_out / p.scale)
    centre_labels = _paint_lay_centres(p, scene, head_out)
    f = scene.frame
    if f is not None:
        _paint_frame(p, f, head_out)
    for r in scene.regions:
        p.label(r.label, r.label_anchor, REGION_LOOKS[r.verdict].colour)
    for r in scene.regions:
        for m in r.patches:
            p.label(patch_label(m.number), m.bbox_px[:2], PALETTE["patch"], above=True)
    for text, anchor in centre_labels:
        p.label(text, anchor, PALETTE["halo-light"])
    if f is not None:
        p.label("X", f.x_tip, PALETTE["halo-light"])
        p.label("Y", f.y_tip, PALETTE["halo-light"])


def _width(p: ScenePainter, key: str) -> float:
    """A line width of :data:`STYLE_UNITS` in the painter's units."""
    return STYLE_UNITS[key] * p.unit


def _halo_width(p: ScenePainter, key: str) -> float:
    """The width of a line's dark or light edge: the line and a halo on each side."""
    return _width(p, key) + 2 * _width(p, "halo")


def _paint_cell_glyphs(p: ScenePainter, r: RegionScene) -> None:
    """The expected ticks, then the measured cell lines and the deviating ones, inside the region only."""
    if not (len(r.glyphs) or len(r.deviating_glyphs) or len(r.expected_glyphs)):
        return
    u, dark = p.unit, PALETTE["halo-dark"]
    regular, deviating, edge = glyph_widths(r.glyph_length_px * p.scale, r.glyph_stride, u)
    with p.clipped_to(r):
        if len(r.expected_glyphs):
            tick = max(0.8 * regular, 0.5 * STYLE_UNITS["glyph"] * u)
            p.stroke(
                r.expected_glyphs, False, PALETTE["expected"], tick, halo=dark, halo_width=tick + 2 * edge, butt=True
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


def _paint_outlines(p: ScenePainter, scene: OverlayScene) -> None:
    """Patch boxes, then the region outlines and holes over them in their verdict's colour and dash."""
    dark = PALETTE["halo-dark"]
    for r in scene.regions:
        for m in r.patches:
            p.rectangle(m.bbox_px, PALETTE["patch"], _width(p, "patch"), halo=dark, halo_width=_halo_width(p, "patch"))
    for r in scene.regions:
        look = REGION_LOOKS[r.verdict]
        for lines, key in ((r.holes, "hole"), (r.outlines, "outline")):
            width, halo_width = _width(p, key), _halo_width(p, key)
            p.stroke(lines, True, look.colour, width, dash=look.dash, halo=dark, halo_width=halo_width)


def _paint_lay_arrows(p: ScenePainter, scene: OverlayScene, head: float) -> None:
    """The expected (white) and measured (blue) double arrows of each region at its centroid."""
    for r in scene.regions:
        if r.centre is None:
            continue
        for e in r.expected_screen_deg:
            arrow = arrow_polylines(r.centre, e, r.arrow_half_length, head)
            width, halo_width = _width(p, "expected"), _halo_width(p, "expected")
            p.stroke(arrow, False, PALETTE["expected"], width, halo=PALETTE["halo-dark"], halo_width=halo_width)
        for m in r.measured_screen_deg:
            arrow = arrow_polylines(r.centre, m, 0.8 * r.arrow_half_length, head)
            width, halo_width = _width(p, "measured"), _halo_width(p, "measured")
            p.stroke(arrow, False, PALETTE["measured"], width, halo=PALETTE["halo-light"], halo_width=halo_width)


def _paint_lay_centres(p: ScenePainter, scene: OverlayScene, head_out: float) -> list[tuple[str, tuple]]:
    """The centre of each circular or radial lay; return its labels (regions about one centre share one)."""
    head = head_out / p.scale
    width, halo_width, dark = _width(p, "frame"), _halo_width(p, "frame"), PALETTE["halo-dark"]
    centre_labels = []
    for r in scene.regions:
        if r.lay_centre is None:
            continue
        cx, cy = r.lay_centre
        arm = 0.9 * head
        cross = [np.array([[cx - arm, cy], [cx + arm, cy]]), np.array([[cx, cy - arm], [cx, cy + arm]])]
        p.stroke(cross, False, PALETTE["expected"], width, halo=dark, halo_width=halo_width)
        p.circle(r.lay_centre, 0.55 * head_out, PALETTE["expected"], width, halo=dark, halo_width=halo_width)
        text = f"{r.name} centre" + (" (fitted)" if r.lay_centre_fitted else "")
        same = [k for k, (_, at) in enumerate(centre_labels) if math.dist(at, r.lay_centre) < 1.0]
        if same:  # regions about one centre share one label
            k = same[0]
            centre_labels[k] = (centre_labels[k][0].replace(" centre", f", {text}", 1), centre_labels[k][1])
        else:
            centre_labels.append((text, r.lay_centre))
    return centre_labels


def _paint_frame(p: ScenePainter, f: FrameScene, head_out: float) -> None:
    """The part frame: origin and the X and Y axes with arrow heads."""
    head = head_out / p.scale
    axes = axis_polylines(f.origin, f.x_tip, head) + axis_polylines(f.origin, f.y_tip, head)
    width, halo_width, light = _width(p, "frame"), _halo_width(p, "frame"), PALETTE["halo-light"]
    p.stroke(axes, False, PALETTE["frame"], width, halo=light, halo_width=halo_width)
    p.circle(f.origin, 0.5 * head_out, PALETTE["frame"], width, halo=light, halo_width=halo_width)


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
