"""The part photo on the page: a downsampled JPEG with the overlay scene drawn on top as vector graphics."""

from __future__ import annotations

import contextlib
import io
from typing import Iterable

import numpy as np
from PIL import Image
from reportlab.lib import colors
from reportlab.lib.utils import ImageReader
from reportlab.pdfgen.canvas import FILL_EVEN_ODD, Canvas

from ..pdfa.fonts import SANS_BOLD
from .layout import JPEG_QUALITY, PICTURE_MAX_PX, _rl
from .overlay import grey_to_uint8, paint_scene
from .scene import STYLE_UNITS, OverlayScene, label_obstacles, place_labels


def _picture_jpeg(grey: np.ndarray) -> tuple[bytes, tuple[int, int]]:
    scale = min(1.0, PICTURE_MAX_PX / max(grey.shape))
    small = grey_to_uint8(grey, scale)
    buf = io.BytesIO()
    Image.fromarray(small, mode="L").save(buf, format="JPEG", quality=JPEG_QUALITY, optimize=True)
    return buf.getvalue(), (small.shape[1], small.shape[0])


def _path_of(c: Canvas, polys: Iterable[np.ndarray], closed: bool):
    p = c.beginPath()
    for poly in polys:
        p.moveTo(float(poly[0][0]), float(poly[0][1]))
        for x, y in poly[1:]:
            p.lineTo(float(x), float(y))
        if closed:
            p.close()
    return p


class _VectorPainter:
    """Paints an overlay scene as vector graphics over the photo.

    Inside :meth:`image_space` the canvas user space is image pixels (x right,
    y down), so outlines and patch boxes carry the result's own coordinates;
    widths come in points and are divided by the scale. Labels are set in
    page space so their text is upright.
    """

    min_arrow_head = 3.0  # points
    min_line = 0.35  # points: thinner lines vanish in print

    def __init__(self, c: Canvas, x0: float, y_top: float, s: float, w_pt: float, h_pt: float):
        self.c, self.x0, self.y_top, self.scale = c, x0, y_top, s
        self.w_pt, self.h_pt = w_pt, h_pt
        self.unit = max(w_pt, h_pt) / 1000.0
        self.labels: list[tuple] = []
        self.obstacles: list[tuple[float, float, float, float]] = []  # image px

    def _user(self, width_pt: float) -> float:
        return max(self.min_line, width_pt) / self.scale

    def _draw(self, polys, closed, colour, width_pt, dash, butt) -> None:
        c = self.c
        c.setLineCap(0 if butt else 1)
        c.setLineJoin(1)
        width = self._user(width_pt)
        c.setDash([dash[0] * width, dash[1] * width] if dash is not None else [])
        c.setStrokeColor(_rl(colour))
        c.setLineWidth(width)
        c.drawPath(_path_of(c, polys, closed), stroke=1, fill=0)
        c.setDash([])

    def stroke(self, polys, closed, colour, width, *, dash=None, halo=None, halo_width=None, butt=False) -> None:
        polys = list(polys)
        if not polys:
            return
        if halo is not None:
            self._draw(polys, closed, halo, halo_width, dash, butt)
        self._draw(polys, closed, colour, width, dash, butt)

    def rectangle(self, bbox_px, colour, width, *, halo, halo_width) -> None:
        for col, w in ((halo, halo_width), (colour, width)):
            self.c.setStrokeColor(_rl(col))
            self.c.setLineWidth(self._user(w))
            self.c.rect(*bbox_px, stroke=1, fill=0)  # the JSON's (x, y, w, h) verbatim

    def circle(self, centre_px, radius, colour, width, *, halo, halo_width) -> None:
        for col, w in ((halo, halo_width), (colour, width)):
            self.c.setStrokeColor(_rl(col))
            self.c.setLineWidth(self._user(w))
            self.c.circle(centre_px[0], centre_px[1], radius / self.scale, stroke=1, fill=0)

    def darken(self, holes) -> None:
        self.c.setFillColor(colors.Color(0, 0, 0, 0.55))
        self.c.drawPath(_path_of(self.c, holes, True), stroke=0, fill=1)

    @contextlib.contextmanager
    def clipped_to(self, region):
        self.c.saveState()
        if region.outlines:
            outline = _path_of(self.c, list(region.outlines) + list(region.holes), True)
            self.c.clipPath(outline, stroke=0, fill=0, fillMode=FILL_EVEN_ODD)
        try:
            yield
        finally:
            self.c.restoreState()

    def label(self, text, anchor_px, fill, *, above=False) -> None:
        self.labels.append((text, anchor_px, fill, above))  # set after leaving image space

    @contextlib.contextmanager
    def image_space(self):
        c = self.c
        c.saveState()
        c.translate(self.x0, self.y_top)
        c.scale(self.scale, -self.scale)
        clip = c.beginPath()
        clip.rect(0, 0, self.w_pt / self.scale, self.h_pt / self.scale)
        c.clipPath(clip, stroke=0, fill=0)
        try:
            yield
        finally:
            c.restoreState()

    def set_labels(self) -> None:
        """Labels in filled boxes, upright, kept inside the picture and off one another."""
        wanted, looks = [], []
        for text, (x, y), fill, above in self.labels:
            size = 7.5 if len(text) > 2 else 7.0
            pad = size * 0.25
            tw = self.c.stringWidth(text, SANS_BOLD, size) + 2 * pad
            th = size + 2 * pad
            px, py = x * self.scale, y * self.scale  # picture points, y down
            wanted.append((px + pad, py - th - pad if above else py + pad, tw, th))
            looks.append((text, fill, size, pad))
        c = self.c
        obstacles = [(x * self.scale, y * self.scale, w * self.scale, h * self.scale) for x, y, w, h in self.obstacles]
        spots = place_labels(wanted, (self.w_pt, self.h_pt), gap=0.8, obstacles=obstacles)
        for (left, top), (_, _, tw, th), (text, fill, size, pad) in zip(spots, wanted, looks):
            x, y = self.x0 + left, self.y_top - top - th
            c.saveState()
            c.setFillColor(_rl(fill))
            c.setStrokeColor(colors.black)
            c.setLineWidth(0.5)
            c.rect(x, y, tw, th, stroke=1, fill=1)
            c.setFillColor(colors.black)
            c.setFont(SANS_BOLD, size)
            c.drawString(x + pad, y + pad + size * 0.18, text)
            c.restoreState()
        self.labels = []


def _draw_picture(c: Canvas, jpeg: bytes, scene: OverlayScene, x0: float, y_top: float, s: float) -> None:
    """The photo, then the overlay scene in image-pixel coordinates, then the labels and a frame."""
    w_pt, h_pt = scene.width * s, scene.height * s
    c.drawImage(ImageReader(io.BytesIO(jpeg)), x0, y_top - h_pt, w_pt, h_pt)
    painter = _VectorPainter(c, x0, y_top, s, w_pt, h_pt)
    with painter.image_space():
        paint_scene(painter, scene)
    painter.obstacles = label_obstacles(
        scene, max(painter.min_arrow_head, STYLE_UNITS["arrow-head"] * painter.unit) / s
    )
    painter.set_labels()
    c.setStrokeColor(colors.black)
    c.setLineWidth(0.6)
    c.rect(x0, y_top - h_pt, w_pt, h_pt, stroke=1, fill=0)
