"""The PDF inspection report (reportlab).

Pages, in order:

1. Summary: recipe(s), engine version, date and time (UTC and local), station,
   operator, counts of rejected / not inspected / review / accepted parts in
   large boxes, one line per region on the batch statistics (Cp/Cpk, parts
   flagged, their page), the sign-off block, one row per part (rejects first,
   then parts not inspected, then review, then accepted; numbered ``#`` in
   production order) and, once, the legend (angle convention, colours and
   shapes).
2. One page or more per part, in the summary's order: the verdict and why in
   one sentence, the photo as a downsampled JPEG with the overlay of
   :mod:`surfinspect.overlay` drawn on top as vector graphics in the result's
   own image-pixel coordinates (as tall as the page leaves room for), a table
   per region in the words of its lay pattern, the deviating patches, a rose
   plot of each region's orientation histogram (and, where the expected lay
   turns, a chart of the cells' deviations), the image file name and SHA-256.
3. Optionally, batch statistics: individuals and moving-range charts of the
   lay deviation and coherence per part on one axis of part numbers, Cp/Cpk of
   the deviation against the tolerance, and a table of the parts the charts
   flag (outside the control limits, beyond the tolerance, not measured).
4. Parts whose image could not be inspected (``not_inspected``), if any.
5. Pages added by the caller (``extra_pages``).

Every page carries the report id, the sign-off state ("NOT SIGNED" or who
signed, with what meaning and when), "page n of N" and the caution that the
measurement supports, and does not replace, the inspector's decision.

Numbers are printed from the result's JSON form (:func:`results.region_to_dict`)
so the report shows what the result file says: angles with
:data:`ANGLE_DECIMALS` decimals, coherence with 3, area shares in per cent
with 2, each rounded half away from zero from the JSON's decimal digits
(:func:`format_fixed`). The document is deterministic apart from
``generated_at``: same inputs and time, same bytes.
"""

from __future__ import annotations

import contextlib
import dataclasses
import io
import math
import os
import socket
import unicodedata
from dataclasses import dataclass
from datetime import datetime, timezone
from decimal import Decimal
from typing import Callable, Iterable, Mapping, Sequence
from xml.sax.saxutils import escape

import numpy as np
from PIL import Image
from reportlab.lib import colors
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.utils import ImageReader, simpleSplit
from reportlab.pdfgen.canvas import FILL_EVEN_ODD, Canvas
from reportlab.platypus import Flowable, Paragraph, Table, TableStyle

from .. import fsutil
from ..errors import InputError
from ..formatting import ANGLE_DECIMALS, format_angle, format_fixed, format_signed_angle
from ..measure.orientation import wrap_deviation
from ..qualify.spc import Capability, IndividualsChart, capability, individuals_chart
from ..results import (
    CAUTION,
    PartResult,
    PartVerdict,
    RegionResult,
    RegionVerdict,
    SignOff,
    region_to_dict,
)
from .overlay import (
    PALETTE,
    PART_LOOKS,
    REGION_LOOKS,
    RGB,
    STYLE_UNITS,
    OverlayScene,
    build_scene,
    checked_picture,
    grey_to_uint8,
    label_obstacles,
    measured_angles,
    paint_scene,
    patch_label,
    place_labels,
)

__all__ = [
    "ANGLE_DECIMALS",
    "CAUTION",
    "PAGE_SIZE",
    "PICTURE_MAX_PX",
    "ExtraPage",
    "NotInspected",
    "format_angle",
    "format_fixed",
    "format_signed_angle",
    "printable_text",
    "render_report",
    "signoff_state",
    "write_report",
]

#: Decimals of every angle the report prints (values rounded from the JSON form).
PAGE_SIZE = A4
#: Long side of the embedded photo at most (about 220 dpi across the page's text width).
PICTURE_MAX_PX = 1600
JPEG_QUALITY = 82
DEFAULT_TITLE = "Surface lay inspection report"

#: A page that another module appends: it draws on the canvas, the report adds the footer.
ExtraPage = Callable[[Canvas, tuple[float, float]], None]

_MARGIN = 36.0
_FOOTER = 30.0
_FRAME_W = PAGE_SIZE[0] - 2 * _MARGIN
_PICTURE_MAX_H = 340.0
_GLYPH_SPACING_PT = 12.0  # denser glyphs cover the photo on paper
_VERDICT_ORDER = {PartVerdict.REJECT: 0, PartVerdict.REVIEW: 1, PartVerdict.ACCEPT: 2}
_REGION_SEVERITY = {RegionVerdict.FAIL: 2, RegionVerdict.NO_TEXTURE: 1, RegionVerdict.REVIEW: 1, RegionVerdict.PASS: 0}

_BODY = ParagraphStyle("body", fontName="Helvetica", fontSize=8, leading=10)
_SMALL = ParagraphStyle("small", fontName="Helvetica", fontSize=7, leading=8.6)
_CELL = ParagraphStyle("cell", fontName="Helvetica", fontSize=7.5, leading=9)
_CELL_BOLD = ParagraphStyle("cellb", parent=_CELL, fontName="Helvetica-Bold")


def _percent(share: float | None) -> str:
    """An area share (fraction) in per cent with 2 decimals, shifted exactly from the JSON's digits."""
    if share is None:
        return "—"
    return format_fixed(float(Decimal(repr(float(share))).scaleb(2)), 2) + " %"


def _rl(colour: RGB, alpha: float | None = None) -> colors.Color:
    r, g, b = (c / 255.0 for c in colour)
    return colors.Color(r, g, b) if alpha is None else colors.Color(r, g, b, alpha)


def _tint(colour: RGB, amount: float = 0.3) -> colors.Color:
    """The colour mixed with white: a light fill that keeps black text readable."""
    r, g, b = (1.0 - amount + amount * c / 255.0 for c in colour)
    return colors.Color(r, g, b)


# --------------------------------------------------------------------- layout


class _Layout:
    """Places blocks top-down on A4 pages; a page is a list of drawing closures.

    Drawing happens only after the whole document is laid out, so every page
    knows N for "page n of N".
    """

    top = PAGE_SIZE[1] - _MARGIN
    bottom = _MARGIN + _FOOTER

    def __init__(self) -> None:
        self.pages: list[list[Callable[[Canvas], None]]] = []
        #: Called on every page this layout starts, e.g. to repeat a part's name on continuation pages.
        self.continuation_header: Callable[[], None] | None = None
        self.pages.append([])
        self.y = self.top

    def new_page(self) -> None:
        self.pages.append([])
        self.y = self.top
        if self.continuation_header is not None:
            self.continuation_header()

    @property
    def space(self) -> float:
        return self.y - self.bottom

    @property
    def page_is_empty(self) -> bool:
        return self.y >= self.top

    def block(self, height: float, draw: Callable[[Canvas, float], None], *, gap: float = 8.0) -> None:
        """Reserve ``height`` points (new page if they do not fit) and draw at the block's top."""
        if height > self.space and not self.page_is_empty:
            self.new_page()
        y_top = self.y
        self.pages[-1].append(lambda c: draw(c, y_top))
        self.y -= height + gap

    def flowable(self, f: Flowable, *, x: float = _MARGIN, width: float = _FRAME_W, gap: float = 8.0) -> None:
        """A platypus flowable, split across pages when it is taller than the space left."""
        while True:
            _, h = f.wrap(width, self.space)
            if h <= self.space:
                self.block(h, lambda c, y, f=f, h=h: f.drawOn(c, x, y - h), gap=gap)
                return
            parts = f.split(width, self.space) if self.space > 40 else []
            if len(parts) < 2:
                if self.page_is_empty:  # taller than a page and cannot split: draw what fits
                    self.block(min(h, self.space), lambda c, y, f=f, h=h: f.drawOn(c, x, y - h), gap=gap)
                    return
                self.new_page()
                continue
            first, f = parts[0], parts[1]
            _, h1 = first.wrap(width, self.space)
            self.block(h1, lambda c, y, g=first, h1=h1: g.drawOn(c, x, y - h1), gap=0)
            self.new_page()

    def text(self, text: str, style: ParagraphStyle = _BODY, *, gap: float = 4.0) -> None:
        self.flowable(Paragraph(text, style), gap=gap)


def _table(rows, col_widths, style_commands, *, repeat_rows: int = 1) -> Table:
    base = [("FONT", (0, 0), (-1, -1), "Helvetica", 7.5)]
    if repeat_rows:
        base += [
            ("FONT", (0, 0), (-1, repeat_rows - 1), "Helvetica-Bold", 7.5),
            ("BACKGROUND", (0, 0), (-1, repeat_rows - 1), colors.Color(0.88, 0.88, 0.88)),
        ]
    base += [
        ("GRID", (0, 0), (-1, -1), 0.4, colors.Color(0.55, 0.55, 0.55)),
        ("VALIGN", (0, 0), (-1, -1), "MIDDLE"),
        ("TOPPADDING", (0, 0), (-1, -1), 2),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 2),
        ("LEFTPADDING", (0, 0), (-1, -1), 3),
        ("RIGHTPADDING", (0, 0), (-1, -1), 3),
    ]
    return Table(rows, colWidths=col_widths, style=TableStyle(base + list(style_commands)), repeatRows=repeat_rows)


# ------------------------------------------------------------ verdict marks


def _verdict_icon(c: Canvas, kind: str, cx: float, cy: float, size: float) -> None:
    """A shape that names the verdict in black-and-white print."""
    r = size / 2
    c.saveState()
    c.setStrokeColor(colors.black)
    c.setFillColor(colors.white)
    c.setLineWidth(max(0.8, size / 10))
    if kind == "circle":
        c.circle(cx, cy, r, stroke=1, fill=1)
        c.circle(cx, cy, r * 0.35, stroke=0, fill=0)
        c.setFillColor(colors.black)
        c.circle(cx, cy, r * 0.3, stroke=0, fill=1)
    elif kind == "cross":
        c.rect(cx - r, cy - r, size, size, stroke=1, fill=1)
        c.line(cx - r * 0.6, cy - r * 0.6, cx + r * 0.6, cy + r * 0.6)
        c.line(cx - r * 0.6, cy + r * 0.6, cx + r * 0.6, cy - r * 0.6)
    else:  # triangle with an exclamation mark
        p = c.beginPath()
        p.moveTo(cx - r, cy - r * 0.85)
        p.lineTo(cx + r, cy - r * 0.85)
        p.lineTo(cx, cy + r)
        p.close()
        c.drawPath(p, stroke=1, fill=1)
        c.line(cx, cy - r * 0.05, cx, cy + r * 0.45)
        c.setFillColor(colors.black)
        c.circle(cx, cy - r * 0.45, max(0.5, r * 0.1), stroke=0, fill=1)
    c.restoreState()


def _verdict_badge(c: Canvas, verdict: PartVerdict, x: float, y: float, w: float, h: float, *, label=None) -> None:
    word, colour, shape = PART_LOOKS[verdict]
    c.saveState()
    c.setFillColor(_rl(colour))
    c.setStrokeColor(colors.black)
    c.setLineWidth(1.5)
    c.rect(x, y, w, h, stroke=1, fill=1)
    _verdict_icon(c, shape, x + h / 2, y + h / 2, h * 0.55)
    c.setFillColor(colors.black)
    size = min(h * 0.42, 18)
    c.setFont("Helvetica-Bold", size)
    c.drawString(x + h, y + h / 2 - size * 0.35, label or word)
    c.restoreState()


# ----------------------------------------------------------- picture (vector)


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
            tw = self.c.stringWidth(text, "Helvetica-Bold", size) + 2 * pad
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
            c.setFont("Helvetica-Bold", size)
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


# ------------------------------------------------------------------ rose plot


def _draw_rose(
    c: Canvas,
    cx: float,
    cy: float,
    radius: float,
    region: RegionResult,
    expected: Sequence[float],
    measured: Sequence[float],
) -> None:
    """Axial rose of the orientation histogram, mirrored to a full circle.

    Petal radius grows with the square root of the bin weight, so petal area
    is proportional to the weight (common practice for rose diagrams, no source).
    """
    edges = np.asarray(region.histogram.bin_edges_deg, dtype=float)
    weights = np.asarray(region.histogram.weights, dtype=float)
    c.saveState()
    c.setLineWidth(0.4)
    c.setStrokeColor(colors.Color(0.7, 0.7, 0.7))
    for k in (0.5, 1.0):
        c.circle(cx, cy, radius * k, stroke=1, fill=0)
    for a in range(0, 180, 45):
        ux, uy = math.cos(math.radians(a)), math.sin(math.radians(a))
        c.line(cx - ux * radius, cy - uy * radius, cx + ux * radius, cy + uy * radius)
    tol = region.tolerance_deg
    c.setFillColor(_rl(PALETTE["pass"], 0.35))
    for e in expected:
        for base in (e, e + 180.0):
            p = c.beginPath()
            p.moveTo(cx, cy)
            p.arcTo(cx - radius, cy - radius, cx + radius, cy + radius, startAng=base - tol, extent=2 * tol)
            p.close()
            c.drawPath(p, stroke=0, fill=1)
    wmax = float(weights.max()) if weights.size and np.isfinite(weights).all() else 0.0
    if wmax > 0:
        c.setFillColor(colors.Color(0.35, 0.35, 0.35))
        c.setStrokeColor(colors.Color(0.85, 0.85, 0.85))
        c.setLineWidth(0.2)
        path = c.beginPath()
        for a0, a1, w in zip(edges[:-1], edges[1:], weights):
            if w <= 0:
                continue
            r = radius * math.sqrt(w / wmax)
            for base in (0.0, 180.0):
                path.moveTo(cx, cy)
                path.arcTo(cx - r, cy - r, cx + r, cy + r, startAng=a0 + base, extent=a1 - a0)
                path.close()
        c.drawPath(path, stroke=1, fill=1)
    # the band's edges as lines too: a narrow band vanishes under the petals and in grey print
    c.setStrokeColor(_rl(PALETTE["pass"]))
    c.setLineWidth(0.6)
    for e in expected:
        for edge in (e - tol, e + tol):
            ux, uy = math.cos(math.radians(edge)), math.sin(math.radians(edge))
            c.line(cx - ux * radius, cy - uy * radius, cx + ux * radius, cy + uy * radius)
    c.setStrokeColor(colors.black)
    c.setLineWidth(0.9)
    c.setDash([3, 2])
    for e in expected:
        ux, uy = math.cos(math.radians(e)), math.sin(math.radians(e))
        c.line(cx - ux * radius * 1.08, cy - uy * radius * 1.08, cx + ux * radius * 1.08, cy + uy * radius * 1.08)
    c.setDash([])
    for m in measured:
        ux, uy = math.cos(math.radians(m)), math.sin(math.radians(m))
        for col, w in ((colors.white, 2.6), (_rl(PALETTE["measured"]), 1.4)):
            c.setStrokeColor(col)
            c.setLineWidth(w)
            c.line(cx - ux * radius, cy - uy * radius, cx + ux * radius, cy + uy * radius)
    c.setFillColor(colors.black)
    c.setFont("Helvetica", 5.5)
    for a in (0, 45, 90, 135):
        ux, uy = math.cos(math.radians(a)), math.sin(math.radians(a))
        c.drawCentredString(cx + ux * (radius + 7), cy + uy * (radius + 7) - 2, f"{a}°")
    c.restoreState()


# -------------------------------------------------------------- part pages


@dataclass(frozen=True)
class _PartFigures:
    """The numbers of one part as the JSON prints them."""

    part: PartResult
    regions: tuple[dict, ...]  # region_to_dict of each region

    @property
    def worst(self) -> tuple[RegionResult, dict] | None:
        if not self.part.regions:
            return None
        k = max(
            range(len(self.part.regions)),
            key=lambda i: (
                _REGION_SEVERITY[self.part.regions[i].verdict],
                abs(self.regions[i]["deviation_deg"]) if self.regions[i]["deviation_deg"] is not None else -1.0,
                -i,
            ),
        )
        return self.part.regions[k], self.regions[k]


_CENTRED = ("circular", "radial")  # the expected lay turns about a centre, cell by cell
_UNDIRECTED = ("multidirectional", "particulate")  # no direction may dominate
_JUDGED_ANGLE = ("directional", "crossed", *_CENTRED)  # patterns whose tolerance_deg applies
#: ISO 1302 lay symbols of the patterns that have no angle of their own (common drawing practice).
_ISO_1302_SYMBOL = {"crossed": "X", "multidirectional": "M", "particulate": "P", "circular": "C", "radial": "R"}


def _expected_text(region: RegionResult) -> str:
    """What the recipe asks, in words where the lay has no one angle."""
    pattern = region.lay_pattern
    if pattern == "circular":
        return "tangent to circles"
    if pattern == "radial":
        return "along radii"
    if pattern in _UNDIRECTED:
        return "no dominant lay"
    if pattern == "any":
        return "any (not judged)"
    angles = region.expected_angles
    return " / ".join(format_angle(v, axial=True) for v in angles) if angles else "—"


def _tolerance_text(region: RegionResult, d: Mapping) -> str:
    if region.lay_pattern == "any":
        return "not judged"
    if region.lay_pattern not in _JUDGED_ANGLE:
        return "—"
    return f"± {format_angle(d['tolerance_deg'])}"


def _measured_text(region: RegionResult, d: Mapping) -> str:
    """The measured lay as the region's pattern has it; "no texture" only when there is none."""
    if region.verdict is RegionVerdict.NO_TEXTURE:
        return "no texture"
    pattern = region.lay_pattern
    if pattern in _CENTRED:
        return "per cell (picture)"
    if pattern in _UNDIRECTED:
        return "no single lay"
    if pattern == "crossed" and isinstance(d["extra"].get("crossed_lay_deg"), list):
        found = d["extra"]["crossed_lay_deg"]
        return " / ".join("not found" if v is None else format_angle(v, axial=True) for v in found)
    if d["lay_deg"] is None:
        return "—"
    text = format_angle(d["lay_deg"], axial=True)
    if d["uncertainty_deg"] is not None:
        text += f" ± {format_angle(d['uncertainty_deg'])}"
    return text


def _deviation_note(region: RegionResult) -> str:
    if region.lay_pattern in _CENTRED:
        return "mean of cells"
    if region.lay_pattern == "crossed":
        return "larger of two"
    return ""


def _coherence_of(region: RegionResult, d: Mapping) -> tuple[float | None, str]:
    """The coherence the verdict rests on, and a note when it is not the region-summed one.

    For circular or radial lay the region-summed tensor is nearly isotropic by
    design (the lay turns), and the judge uses the cells' mean coherence.
    """
    if region.verdict is RegionVerdict.NO_TEXTURE:
        return d["coherence"], ""
    mean_cells = d["extra"].get("mean_cell_coherence")
    if region.lay_pattern in _CENTRED and isinstance(mean_cells, (int, float)):
        return float(mean_cells), "cell mean"
    return d["coherence"], ""


def _figures_text(region: RegionResult, d: Mapping) -> str:
    """The pattern's own figures from the result file (``extra``), in words; nothing is left out."""
    extra = dict(d["extra"])
    said = []
    centre = extra.pop("centre_px", None)
    fitted = extra.pop("centre_fitted", False)
    if centre is not None:
        where = ", ".join(format_fixed(v, 1) for v in centre)
        said.append(f"centre ({where}) px in the image, {'fitted to the cell lays' if fitted else 'from the recipe'}")
    if "rms_cell_deviation_deg" in extra:
        said.append(f"RMS cell deviation {format_angle(extra.pop('rms_cell_deviation_deg'))}")
    if "mean_cell_coherence" in extra:
        extra.pop("mean_cell_coherence")
        if region.lay_pattern in _CENTRED:
            said.append(
                f"region-summed coherence {format_fixed(d['coherence'], 3)} (not judged: the lay turns across the region)"
            )
    found = extra.pop("crossed_lay_deg", None)
    devs = extra.pop("crossed_deviation_deg", None)
    if isinstance(found, list) and isinstance(devs, list):
        grains = [
            "not found" if v is None else f"{format_angle(v, axial=True)} ({format_signed_angle(dv)})"
            for v, dv in zip(found, devs)
        ]
        said.append("grains " + " and ".join(grains))
    if "balance" in extra:
        said.append(f"balance {format_fixed(extra.pop('balance'), 2)} (weaker direction's share, 0.50 = even)")
    if "rayleigh_p" in extra:
        r = extra.pop("rayleigh_resultant_length", None)
        z = extra.pop("rayleigh_statistic", None)
        said.append(
            f"Rayleigh test of the cell lays: mean resultant length {format_fixed(r, 3)}, "
            f"statistic {format_fixed(z, 2)}, p = {extra.pop('rayleigh_p')}"
        )
    if "texture_to_noise" in extra:
        said.append(f"texture energy {format_fixed(extra.pop('texture_to_noise'), 1)}× the camera noise's")
    for key in sorted(extra):  # figures this report does not know by name are still shown
        said.append(f"{key.replace('_', ' ')} {extra[key]}")
    return "; ".join(escape(str(t)) for t in said)


_CELL_RIGHT = ParagraphStyle("cellr", parent=_CELL, alignment=2)


def _cell_with_note(text: str, note: str, *, right: bool = True):
    if not note:
        return text
    return Paragraph(f"{escape(text)}<br/><font size=6>{escape(note)}</font>", _CELL_RIGHT if right else _CELL)


def _region_table(fig: _PartFigures) -> Table:
    header = [
        "Region",
        "Expected lay",
        "Tolerance",
        "Measured lay ± u",
        "Deviation",
        "Coherence",
        "Defect area",
        "Verdict",
    ]
    rows = [header]
    style = []
    for region, d in zip(fig.part.regions, fig.regions):
        look = REGION_LOOKS[region.verdict]
        name = escape(region.name)
        if region.lay_pattern != "directional":
            symbol = _ISO_1302_SYMBOL.get(region.lay_pattern)
            pattern = f"{region.lay_pattern} lay" + (f", ISO 1302 {symbol}" if symbol else "")
            name += f"<br/><font size=6>({escape(pattern)})</font>"
        coherence, coherence_note = _coherence_of(region, d)
        row = len(rows)
        rows.append(
            [
                Paragraph(name, _CELL_BOLD),
                Paragraph(escape(_expected_text(region)), _CELL_RIGHT),
                _tolerance_text(region, d),
                Paragraph(escape(_measured_text(region, d)), _CELL_RIGHT),
                _cell_with_note(
                    format_signed_angle(d["deviation_deg"]),
                    _deviation_note(region) if d["deviation_deg"] is not None else "",
                ),
                _cell_with_note(format_fixed(coherence, 3), coherence_note),
                _percent(d["defect_area_fraction"]),
                look.word,
            ]
        )
        style += [
            ("FONT", (-1, row), (-1, row), "Helvetica-Bold", 8),
            ("BACKGROUND", (-1, row), (-1, row), _tint(look.colour, 0.55)),
            ("ALIGN", (1, row), (-2, row), "RIGHT"),
        ]
        last = row
        lines = []
        if region.reasons:
            lines.append("<i>Reasons:</i> " + "; ".join(escape(r) for r in region.reasons))
        figures = _figures_text(region, d)
        if figures:
            lines.append(f"<font size=6.5><i>Figures:</i> {figures}</font>")
        if lines:
            rows.append([Paragraph("<br/>".join(lines), _CELL), "", "", "", "", "", "", ""])
            last = row + 1
            style.append(("SPAN", (0, last), (-1, last)))
        if region.verdict is RegionVerdict.FAIL:  # a heavy rule beside failing rows, for grey print
            style.append(("LINEBEFORE", (0, row), (0, last), 2.5, colors.black))
    widths = [92, 70, 48, 92, 52, 50, 50, 69]
    return _table(rows, widths, style)


def _patch_table(fig: _PartFigures) -> Table | None:
    rows = [["Region", "Patch", "Box x, y, w, h (px)", "Size (mm)", "Share of region", "Lay", "Deviation"]]
    for region, d in zip(fig.part.regions, fig.regions):
        for n, p in enumerate(d["patches"], start=1):
            size = "—" if "bbox_mm" not in p else " × ".join(format_fixed(v, 1) for v in p["bbox_mm"])
            rows.append(
                [
                    region.name,
                    patch_label(n),
                    ", ".join(str(v) for v in p["bbox_px"]),
                    size,
                    _percent(p["area_fraction"]),
                    format_angle(p["lay_deg"], axial=True),
                    format_signed_angle(p["deviation_deg"]),
                ]
            )
    if len(rows) == 1:
        return None
    return _table(rows, [110, 40, 120, 70, 70, 56, 57], [("ALIGN", (1, 1), (-1, -1), "RIGHT")])


def _verdict_sentence(part: PartResult) -> str:
    """One sentence that says why the part got its verdict."""
    why = [
        f"{r.name}: {r.reasons[0] if r.reasons else REGION_LOOKS[r.verdict].word.lower()}"
        for r in part.regions
        if r.verdict is not RegionVerdict.PASS
    ]
    why = list(part.reasons) + why
    if part.verdict is PartVerdict.ACCEPT:
        n = len(part.regions)
        if why:
            return "; ".join(why)
        return "The region is within its limits." if n == 1 else f"All {n} regions are within their limits."
    lead = "Rejected" if part.verdict is PartVerdict.REJECT else "Needs review"
    return f"{lead}: " + "; ".join(why)


def _fit_text(c: Canvas, text: str, font: str, size: float, width: float) -> str:
    if c.stringWidth(text, font, size) <= width:
        return text
    while text and c.stringWidth(text + "…", font, size) > width:
        text = text[:-1]
    return text + "…"


_PART_HEADER_H = 40.0
_VERDICT_LINE = ParagraphStyle("verdict", fontName="Helvetica-Bold", fontSize=8.5, leading=10.5)


def _part_header(c: Canvas, y: float, part: PartResult, page_note: str, number: str = "") -> None:
    badge_w, badge_h = 170.0, 40.0
    text_w = _FRAME_W - badge_w - 10
    c.setFillColor(colors.black)
    c.setFont("Helvetica-Bold", 15)
    c.drawString(_MARGIN, y - 15, _fit_text(c, part.name + page_note, "Helvetica-Bold", 15, text_w))
    _verdict_badge(c, part.verdict, PAGE_SIZE[0] - _MARGIN - badge_w, y - badge_h, badge_w, badge_h)
    c.setFont("Helvetica", 7.5)
    c.drawString(
        _MARGIN,
        y - 26,
        _fit_text(c, f"Recipe {part.recipe.name} · revision {part.recipe.revision}", "Helvetica", 7.5, text_w),
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
            f"part edges: skew {format_fixed(datum.rotation_deg, 3, signed=True)}° against the image "
            f"(counter-clockwise positive), origin ({format_fixed(ox, 1)}, {format_fixed(oy, 1)}) px"
        )
        if datum.fit_quality is not None:
            frame += f", edge fit RMS {format_fixed(datum.fit_quality, 3)} px"
    if datum is not None and datum.pixel_size_mm:
        frame += f"; {datum.pixel_size_mm:g} mm per pixel"
    return (
        f"<b>Image file</b> {escape(os.path.basename(im.path) or im.path or '(not recorded)')} · "
        f"{im.width} × {im.height} px · {im.bit_depth} bit · <b>part frame</b> {escape(frame)}<br/>"
        f"<b>Image SHA-256</b> <font name=Courier size=7>{im.sha256 or '(not recorded)'}</font>"
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
    c.setFont("Helvetica-Oblique", 8)
    c.drawCentredString(
        PAGE_SIZE[0] / 2, y - 21, "Picture not supplied to the report: see the overlay PNG beside the result."
    )


_FIGURES_PER_ROW = 4
_FIGURE_H = 138.0


def _cell_deviations(d: Mapping) -> np.ndarray:
    """Deviation of each measured cell from its own expected lay, from the JSON's cell grid."""
    cells = d.get("cells")
    if not cells:
        return np.zeros(0)
    lay = np.array([[np.nan if v is None else v for v in row] for row in cells["lay_deg"]], dtype=float)
    exp = np.array([[np.nan if v is None else v for v in row] for row in cells["expected_deg"]], dtype=float)
    if lay.size == 0 or lay.shape != exp.shape:
        return np.zeros(0)
    known = np.isfinite(lay) & np.isfinite(exp)
    return np.asarray(wrap_deviation(lay[known], exp[known]), dtype=float).reshape(-1)


def _figure_list(fig: _PartFigures) -> list[tuple[str, RegionResult, dict]]:
    """One rose per region; a region whose expected lay varies also gets its cells' deviations."""
    out = []
    for region, d in zip(fig.part.regions, fig.regions):
        out.append(("rose", region, d))
        if (
            region.lay_pattern in _CENTRED
            and region.verdict is not RegionVerdict.NO_TEXTURE
            and _cell_deviations(d).size
        ):
            out.append(("deviations", region, d))
    return out


def _draw_deviation_bars(c: Canvas, x: float, y_top: float, w: float, region: RegionResult, d: Mapping) -> None:
    """Bar chart of the cells' deviations from their own expected lay, -90..+90 in 5° bins, tolerance shaded."""
    dev = _cell_deviations(d)
    tol = float(d["tolerance_deg"])
    left, right = x + 14, x + w - 10
    bottom, top = y_top - 104, y_top - 22
    edges = np.linspace(-90.0, 90.0, 37)
    counts, _ = np.histogram(np.clip(dev, -90.0, 90.0), bins=edges)

    def px(v: float) -> float:
        return left + (right - left) * (v + 90.0) / 180.0

    c.saveState()
    c.setFillColor(colors.black)
    c.setFont("Helvetica-Bold", 7.5)
    c.drawCentredString(x + w / 2, y_top - 9, f"{region.name}: cell deviation")
    c.setFillColor(_rl(PALETTE["pass"], 0.35))
    c.rect(px(-tol), bottom, px(tol) - px(-tol), top - bottom, stroke=0, fill=1)
    c.setStrokeColor(_rl(PALETTE["pass"]))
    c.setLineWidth(0.6)
    for v in (-tol, tol):
        c.line(px(v), bottom, px(v), top)
    peak = max(1, int(counts.max()))
    c.setFillColor(colors.Color(0.35, 0.35, 0.35))
    c.setStrokeColor(colors.white)
    c.setLineWidth(0.2)
    for a0, a1, k in zip(edges[:-1], edges[1:], counts):
        if k:
            c.rect(px(a0), bottom, px(a1) - px(a0), (top - bottom) * k / peak, stroke=1, fill=1)
    c.setStrokeColor(colors.black)
    c.setLineWidth(0.5)
    c.line(left, bottom, right, bottom)
    c.setFillColor(colors.black)
    c.setFont("Helvetica", 5.5)
    for v in (-90, -45, 0, 45, 90):
        c.line(px(v), bottom, px(v), bottom - 2)
        c.drawCentredString(px(v), bottom - 8, f"{v:+d}°" if v else "0°")
    c.drawString(left, top + 2, f"highest bar {peak} cells")
    within = int((np.abs(dev) <= tol).sum())
    c.setFont("Helvetica", 6.5)
    c.drawCentredString(x + w / 2, y_top - 128, f"{within} of {dev.size} cells within ± {format_angle(tol)}")
    c.drawCentredString(x + w / 2, y_top - 136, "deviation = cell lay - expected there")
    c.restoreState()


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
                c.setFont("Helvetica-Bold", 7.5)
                c.drawCentredString(cx, y - 9, f"{region.name}: orientation histogram")
                as_printed = dataclasses.replace(region, lay_deg=d["lay_deg"], extra=d["extra"])  # the JSON's values
                _draw_rose(c, cx, y - 66, 46, region, expected, measured_angles(as_printed))
                c.setFont("Helvetica", 6.5)
                if varies:
                    exp_text = f"expected {_expected_text(region)}: varies per cell"
                elif expected:
                    exp_text = f"expected {' / '.join(format_angle(e, axial=True) for e in expected)} {_tolerance_text(region, d)}"
                else:
                    exp_text = f"expected {_expected_text(region)}"
                c.drawCentredString(cx, y - 128, exp_text)
                c.drawCentredString(cx, y - 136, f"measured {_measured_text(region, d)}")

        layout.block(_FIGURE_H, draw, gap=4)


# ------------------------------------------------------------- summary page


def _sort_key(item: tuple[int, _PartFigures]):
    index, fig = item
    return _VERDICT_ORDER[fig.part.verdict], index


def _unique(values: Iterable) -> list:
    seen: dict = {}
    for v in values:
        seen.setdefault(v, None)
    return list(seen)


@dataclass(frozen=True)
class NotInspected:
    """A part of the batch whose image could not be inspected (it counts as needing review).

    ``name`` is the part's name (its file name), ``sha256`` the file's hash
    when it could be read (else ""), ``error`` the reason in words.
    """

    name: str
    sha256: str
    error: str


_NOT_INSPECTED_WORD = "NOT INSPECTED"


def _count_boxes(c: Canvas, y: float, counts: Mapping[PartVerdict, int], not_inspected: int) -> None:
    """Big verdict counts; a box for parts not inspected appears only when there are some."""
    kinds: list[tuple[str, RGB, str, int]] = [(*PART_LOOKS[PartVerdict.REJECT], counts.get(PartVerdict.REJECT, 0))]
    if not_inspected:
        kinds.append((_NOT_INSPECTED_WORD, PALETTE["no-texture"], "triangle", not_inspected))
    kinds += [(*PART_LOOKS[v], counts.get(v, 0)) for v in (PartVerdict.REVIEW, PartVerdict.ACCEPT)]
    gap, h = 8.0, 46.0
    w = (_FRAME_W - gap * (len(kinds) - 1)) / len(kinds)
    for k, (word, colour, shape, n) in enumerate(kinds):
        x = _MARGIN + k * (w + gap)
        c.saveState()
        c.setFillColor(_rl(colour) if n else colors.white)
        c.setStrokeColor(colors.black)
        c.setLineWidth(2.0 if n else 0.6)
        c.rect(x, y - h, w, h, stroke=1, fill=1)
        _verdict_icon(c, shape, x + 20, y - h / 2, 22)
        c.setFillColor(colors.black)
        c.setFont("Helvetica-Bold", 24)
        number_w = c.stringWidth(str(n), "Helvetica-Bold", 24)
        c.drawRightString(x + w - 10, y - h / 2 - 8, str(n))
        size = 11.0
        while size > 6 and c.stringWidth(word, "Helvetica-Bold", size) > w - 38 - number_w - 16:
            size -= 0.5
        c.setFont("Helvetica-Bold", size)
        c.drawString(x + 38, y - h / 2 - size * 0.36, word)
        c.restoreState()


def _titled_box(c: Canvas, y: float, height: float, title: str, *, line_width: float, title_size: float) -> None:
    c.setStrokeColor(colors.black)
    c.setLineWidth(line_width)
    c.rect(_MARGIN, y - height, _FRAME_W, height, stroke=1, fill=0)
    c.setFillColor(colors.black)
    c.setFont("Helvetica-Bold", title_size)
    c.drawString(_MARGIN + 8, y - 15, title)


_SIGNOFF_LINE = 14.5
_SIGNOFF_VALUE_X = 90.0
_SIGNOFF_VALUE_W = _FRAME_W - _SIGNOFF_VALUE_X - 10
_SIGNOFF_TEXT_SIZE = 7.5
#: The encoding of the standard PDF fonts the report uses (reportlab's WinAnsiEncoding, Windows Latin-1).
_FONT_ENCODING = "cp1252"
REPLACED_CHARACTERS_NOTE = "(characters outside Latin-1 shown as ?; the signed record keeps the exact text)"


def printable_text(text: str) -> tuple[str, bool]:
    """``text`` with every character the report's fonts cannot show replaced by '?'; and whether any was.

    The standard PDF fonts hold the Windows Latin-1 set only; any other
    character (CJK, most symbols) would print as a black box.
    """
    shown = []
    for ch in text:
        try:
            ch.encode(_FONT_ENCODING)
            ok = not unicodedata.category(ch).startswith("C")  # control characters have no glyph either
        except UnicodeEncodeError:
            ok = False
        shown.append(ch if ok else "?")
    out = "".join(shown)
    return out, out != text


def _signoff_rows(signoff: SignOff | None) -> list[tuple[str, str | None, str]]:
    """(label, value or None for an empty line, font) of the sign-off block; long comments wrap."""
    if signoff is None:
        return [
            (label, None, "Helvetica")
            for label in ("Name (printed)", "Meaning", "Time (UTC)", "Key fingerprint", "Signature")
        ]
    name, name_replaced = printable_text(signoff.signer_name)
    comment, comment_replaced = printable_text(signoff.comment)
    rows = [
        ("Name (printed)", name, "Helvetica-Bold"),
        ("Meaning", signoff.meaning.upper(), "Helvetica-Bold"),
        ("Time (UTC)", signoff.signed_at_utc, "Helvetica"),
        ("Key fingerprint", signoff.key_fingerprint, "Courier"),
        ("Record SHA-256", signoff.record_sha256 or "—", "Courier"),
        ("Covers report", f"SHA-256 {signoff.report_sha256}" if signoff.report_sha256 else "—", "Courier"),
    ]
    if comment:
        for k, line in enumerate(simpleSplit(comment, "Helvetica", _SIGNOFF_TEXT_SIZE, _SIGNOFF_VALUE_W)):
            rows.append(("Comment" if k == 0 else "", line, "Helvetica"))
    if name_replaced or comment_replaced:
        rows.append(("", REPLACED_CHARACTERS_NOTE, "Helvetica-Oblique"))
    return rows


def _signoff_height(signoff: SignOff | None) -> float:
    return 26.0 + len(_signoff_rows(signoff)) * _SIGNOFF_LINE


def _signoff_block(c: Canvas, y: float, signoff: SignOff | None) -> None:
    c.saveState()
    height = _signoff_height(signoff)
    _titled_box(c, y, height, "SIGN-OFF", line_width=1.2, title_size=10)
    if signoff is None:
        c.setFont("Helvetica-Bold", 8.5)
        c.drawString(_MARGIN + 70, y - 15, "NOT SIGNED")
        c.setFont("Helvetica", 7)
        c.drawString(_MARGIN + 128, y - 15, "this report carries no sign-off yet; the lines below are left empty.")
    else:
        c.setFont("Helvetica", 7)
        c.drawString(
            _MARGIN + 70,
            y - 15,
            "Signed electronically; the archive's verify command checks the signature against the record.",
        )
    line_y = y - 32
    for label, value, font in _signoff_rows(signoff):
        c.setFont("Helvetica-Bold", _SIGNOFF_TEXT_SIZE)
        c.drawString(_MARGIN + 8, line_y, label)
        if value is None:
            c.setLineWidth(0.5)
            c.setDash([1, 2])
            c.line(_MARGIN + _SIGNOFF_VALUE_X, line_y - 1, _MARGIN + _FRAME_W - 10, line_y - 1)
            c.setDash([])
            if label == "Meaning":
                c.setFont("Helvetica", 6.5)
                c.drawString(_MARGIN + _FRAME_W - 180, line_y + 1, "approved / rejected / reviewed")
        else:
            size = 9 if label == "Meaning" else _SIGNOFF_TEXT_SIZE
            c.setFont(font, size)
            c.drawString(_MARGIN + _SIGNOFF_VALUE_X, line_y, _fit_text(c, str(value), font, size, _SIGNOFF_VALUE_W))
        line_y -= _SIGNOFF_LINE
    c.restoreState()


def signoff_state(signoff: SignOff | None) -> str:
    """The sign-off state in one line, as the footer of every page prints it."""
    if signoff is None:
        return "NOT SIGNED"
    return f"Signed: {signoff.meaning.upper()} by {printable_text(signoff.signer_name)[0]}, {signoff.signed_at_utc}"


_LEGEND_H = 228.0


def _legend(c: Canvas, y: float) -> None:
    """Angle convention, colours and shapes, explained once."""
    c.saveState()
    _titled_box(c, y, _LEGEND_H, "How to read the pictures", line_width=0.6, title_size=9)
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
    x0, x1, tx = _MARGIN + 10, _MARGIN + 46, _MARGIN + 54
    yy = y - 30
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
        c.setFont("Helvetica", 7.5)
        c.drawString(tx, yy - 2.5, text)
        yy -= 15
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
    c.setFont("Helvetica", 7.5)
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
    # right column: angle convention
    x = _MARGIN + _FRAME_W / 2 + 20
    c.setFont("Helvetica-Bold", 8)
    c.drawString(x, y - 30, "Angle convention")
    cx, cy, r = x + 30, y - 80, 26
    c.setLineWidth(0.8)
    c.line(cx - 4, cy, cx + r + 8, cy)
    c.line(cx, cy - 4, cx, cy + r + 8)
    c.setFont("Helvetica", 6.5)
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
    text.setFont("Helvetica", 7)
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
    c.setFont("Helvetica-Bold", 8)
    c.drawString(x, y - 140, "Verdicts (word and shape)")
    yy = y - 156
    for verdict in (PartVerdict.ACCEPT, PartVerdict.REJECT, PartVerdict.REVIEW):
        word, colour, shape = PART_LOOKS[verdict]
        c.setFillColor(_rl(colour))
        c.rect(x, yy - 6, 14, 12, stroke=0, fill=1)
        _verdict_icon(c, shape, x + 24, yy, 10)
        c.setFillColor(colors.black)
        c.setFont("Helvetica", 7.5)
        meaning = {
            PartVerdict.ACCEPT: "every region within its limits",
            PartVerdict.REJECT: "at least one region fails",
            PartVerdict.REVIEW: "no region fails, one has no measurable texture",
        }[verdict]
        c.drawString(x + 34, yy - 2.5, f"{word}: {meaning}")
        yy -= 14
    c.setFont("Helvetica", 6.8)
    c.drawString(x, yy - 4, "Rose plots: grey petals = orientation histogram (area ~ weight),")
    c.drawString(x, yy - 12, "green band = tolerance, dashed = expected, blue = measured lay.")
    c.restoreState()


def _layout_summary(
    layout: _Layout,
    figs: Sequence[tuple[int, _PartFigures]],
    page_of: Mapping[int, int],
    *,
    report_id: str,
    title: str,
    operator: str | None,
    station: str,
    generated_at: datetime,
    signoff: SignOff | None,
    not_inspected: Sequence[NotInspected] = (),
    not_inspected_page: int | None = None,
    stats: Sequence[_RegionStats] = (),
    stats_page: int | None = None,
) -> None:
    parts = [f.part for _, f in figs]
    counts = {v: sum(p.verdict is v for p in parts) for v in PartVerdict}

    def head(c: Canvas, y: float) -> None:
        c.setFillColor(colors.black)
        c.setFont("Helvetica-Bold", 17)
        c.drawString(_MARGIN, y - 17, title)
        c.setFont("Helvetica", 9)
        line = f"Report {report_id} · {len(parts)} part{'s' if len(parts) != 1 else ''} inspected"
        if not_inspected:
            line += f" · {len(not_inspected)} not inspected (image unreadable)"
        c.drawString(_MARGIN, y - 31, line)
        _count_boxes(c, y - 40, counts, len(not_inspected))

    layout.block(88, head)
    local = generated_at.astimezone()
    info = []
    for name, revision, sha in _unique((p.recipe.name, p.recipe.revision, p.recipe.sha256) for p in parts):
        n = sum(p.recipe.name == name and p.recipe.revision == revision for p in parts)
        info.append(
            [
                "Recipe",
                Paragraph(
                    f"<b>{escape(name)}</b> · revision {revision} · {n} part{'s' if n != 1 else ''}<br/>"
                    f"SHA-256 <font name=Courier size=7>{sha}</font>",
                    _CELL,
                ),
            ]
        )
    info += [
        ["Engine version", ", ".join(_unique(p.engine_version for p in parts))],
        ["Generated (UTC)", generated_at.strftime("%Y-%m-%d %H:%M:%S UTC")],
        ["Generated (local)", local.strftime("%Y-%m-%d %H:%M:%S ") + (local.tzname() or local.strftime("%z"))],
        ["Station", station],
        ["Operator", operator if operator else "not given"],
    ]
    if stats:
        lines = "<br/>".join(_stats_line(st) for st in stats)
        where = f" (page {stats_page})" if stats_page is not None else ""
        info.append(
            [
                "Batch statistics",
                Paragraph(f"{lines}<br/><font size=6.5>control charts and capability{where}</font>", _CELL),
            ]
        )
    layout.flowable(
        _table(
            info,
            [100, _FRAME_W - 100],
            [
                ("FONT", (0, 0), (0, -1), "Helvetica-Bold", 7.5),
                ("BACKGROUND", (0, 0), (0, -1), colors.Color(0.93, 0.93, 0.93)),
            ],
            repeat_rows=0,
        )
    )
    layout.block(_signoff_height(signoff), lambda c, y: _signoff_block(c, y, signoff))
    rows = [["#", "Part", "Verdict", "Worst region", "Worst deviation", "First reason", "Page"]]
    style = []

    def add_row(number: str, name: str, word: str, colour: RGB, region: str, deviation: str, reason: str, page) -> None:
        k = len(rows)
        rows.append(
            [
                number,
                Paragraph(escape(name), _CELL_BOLD),
                Paragraph(f"<b>{word}</b>", _CELL),
                region,
                deviation,
                Paragraph(escape(reason), _CELL),
                str(page if page is not None else ""),
            ]
        )
        style.extend([("BACKGROUND", (2, k), (2, k), _tint(colour, 0.55))])
        if word in (PART_LOOKS[PartVerdict.REJECT][0], _NOT_INSPECTED_WORD):
            style.append(("LINEBEFORE", (0, k), (0, k), 2.5, colors.black))

    def add_part(index: int, fig: _PartFigures) -> None:
        worst = fig.worst
        if worst is None:
            region_name, deviation = "—", "—"
        else:
            region, d = worst
            region_name = f"{region.name} ({REGION_LOOKS[region.verdict].word})"
            if region.verdict is RegionVerdict.NO_TEXTURE:
                deviation = "no texture"
            else:
                deviation = (
                    format_signed_angle(d["deviation_deg"]) if region.lay_pattern in _JUDGED_ANGLE else "not judged"
                )
        reasons = [r for reg in fig.part.regions if reg.verdict is not RegionVerdict.PASS for r in reg.reasons]
        reasons = list(fig.part.reasons) + reasons
        word, colour, _ = PART_LOOKS[fig.part.verdict]
        add_row(
            str(index + 1),
            fig.part.name,
            word,
            colour,
            region_name,
            deviation,
            reasons[0] if reasons else "—",
            page_of.get(index),
        )

    ordered = list(figs)
    rejects = [f for f in ordered if f[1].part.verdict is PartVerdict.REJECT]
    for index, fig in rejects:
        add_part(index, fig)
    for item in not_inspected:  # a hold like the rejects: listed before the parts that need review
        add_row(
            "—",
            item.name,
            _NOT_INSPECTED_WORD,
            PALETTE["no-texture"],
            "—",
            "—",
            item.error or "image could not be read",
            not_inspected_page,
        )
    for index, fig in ordered:
        if fig.part.verdict is not PartVerdict.REJECT:
            add_part(index, fig)
    order = (
        "rejected first, then not inspected, then review, then accepted"
        if not_inspected
        else "rejected first, then review, then accepted"
    )
    layout.text(f"<b>Parts</b> ({order}; # is the part's number in production order)", gap=2)
    layout.flowable(
        _table(
            rows,
            [20, 96, 62, 88, 66, 161, 30],
            style
            + [
                ("ALIGN", (0, 1), (0, -1), "RIGHT"),
                ("ALIGN", (4, 1), (4, -1), "RIGHT"),
                ("ALIGN", (-1, 1), (-1, -1), "RIGHT"),
            ],
        )
    )
    layout.block(_LEGEND_H, _legend)


# ----------------------------------------------------------- batch statistics


@dataclass(frozen=True)
class _RegionStats:
    """Control charts and capability of one recipe region over the parts, in production order."""

    recipe: str
    region: str
    tolerance: float
    judged: bool  # the region's deviation is judged against its tolerance
    present: tuple[int, ...]  # indices of the parts that have this region
    deviations: tuple[float | None, ...]  # per part, as the JSON prints them
    coherences: tuple[float | None, ...]
    dev_chart: IndividualsChart | None
    coh_chart: IndividualsChart | None
    capability: Capability | None
    note: str  # why a chart is missing, in words ("" when both are drawn)

    @property
    def beyond_tolerance(self) -> tuple[int, ...]:
        if not self.judged:
            return ()
        return tuple(i for i, v in enumerate(self.deviations) if v is not None and abs(v) > self.tolerance)

    def flags(self) -> dict[int, list[str]]:
        """Per part index, why the charts flag it (in words)."""
        out: dict[int, list[str]] = {}
        for i in self.beyond_tolerance:
            out.setdefault(i, []).append(f"deviation beyond the tolerance ± {format_angle(self.tolerance)}")
        for what, chart in (("deviation", self.dev_chart), ("coherence", self.coh_chart)):
            if chart is None:
                continue
            for i in chart.out_of_limits:
                out.setdefault(i, []).append(f"{what} outside the control limits")
            for k in chart.mr_out_of_limits:  # mr[k] spans parts k and k + 1
                out.setdefault(k + 1, []).append(f"{what} jump from #{k + 1} above the moving-range limit")
        if self.judged:
            for i in self.present:
                if self.deviations[i] is None:
                    out.setdefault(i, []).append("not measured (no texture): a gap in the charts")
        return dict(sorted(out.items()))


def _batch_stats(parts: Sequence[PartResult]) -> list[_RegionStats]:
    groups: dict[tuple[str, str], list[tuple[int, RegionResult, dict]]] = {}
    for i, part in enumerate(parts):
        for region in part.regions:
            groups.setdefault((part.recipe.name, region.name), []).append((i, region, region_to_dict(region)))
    out = []
    for (recipe, name), members in groups.items():
        judged = any(region.lay_pattern in _JUDGED_ANGLE for _, region, _ in members)
        devs: list[float | None] = [None] * len(parts)
        cohs: list[float | None] = [None] * len(parts)
        for i, region, d in members:
            if region.lay_pattern in _JUDGED_ANGLE:
                devs[i] = d["deviation_deg"]
            if region.verdict is not RegionVerdict.NO_TEXTURE:
                cohs[i] = _coherence_of(region, d)[0]
        tol = float(members[0][1].tolerance_deg)
        notes = []
        dev_chart = coh_chart = cap = None
        if judged:
            try:
                dev_chart = individuals_chart(devs)
                cap = capability(devs, -tol, tol)
            except InputError as exc:
                notes.append(f"too few measured parts for limits on the deviation ({exc})")
        else:
            notes.append(
                "its lay direction is not judged (lay: "
                + members[0][1].lay_pattern
                + "): no deviation chart, no Cp/Cpk"
            )
        try:
            coh_chart = individuals_chart(cohs)
        except InputError as exc:
            notes.append(f"too few measured parts for limits on the coherence ({exc})")
        out.append(
            _RegionStats(
                recipe,
                name,
                tol,
                judged,
                tuple(i for i, _, _ in members),
                tuple(devs),
                tuple(cohs),
                dev_chart,
                coh_chart,
                cap,
                "; ".join(notes),
            )
        )
    return out


def _capability_text(st: _RegionStats) -> str:
    if st.capability is None:
        return "no Cp/Cpk"
    cp = "—" if st.capability.cp is None else format_fixed(st.capability.cp, 2)
    cpk = "—" if st.capability.cpk is None else format_fixed(st.capability.cpk, 2)
    return f"Cp {cp} · Cpk {cpk}"


def _stats_line(st: _RegionStats) -> str:
    """One line per region for the summary page: capability and how many parts the charts flag."""
    outside = set()
    for chart in (st.dev_chart, st.coh_chart):
        if chart is not None:
            outside |= set(chart.out_of_limits) | {k + 1 for k in chart.mr_out_of_limits}
    parts = [f"<b>{_capability_text(st)}</b>"]
    parts.append(f"{len(outside)} part{'s' if len(outside) != 1 else ''} outside control limits")
    if st.judged:
        n = len(st.beyond_tolerance)
        parts.append(f"{n} beyond the tolerance")
    return f"{escape(st.recipe)} / {escape(st.region)}: " + " · ".join(parts)


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
    finite = np.isfinite(vals)
    lines = [("CL", centre), ("UCL", ucl)] + ([] if lcl is None else [("LCL", lcl)])
    span_vals = list(vals[finite]) + [v for _, v in lines] + list(spec or ())
    lo, hi = min(span_vals), max(span_vals)
    if lower_zero:
        lo = 0.0
    pad = (hi - lo) * 0.08 or 1.0
    lo, hi = (lo if lower_zero else lo - pad), hi + pad  # a moving range is never negative
    left, bottom = x + 34, y_top - h + 14
    pw, ph = w - 98, h - 30
    n = max(1, len(vals))

    def px(i):
        return left + pw * (i + 0.5) / n

    def py(v):
        return bottom + ph * (v - lo) / (hi - lo)

    c.saveState()
    c.setFillColor(colors.black)
    c.setFont("Helvetica-Bold", 7.5)
    c.drawString(x, y_top - 8, title)
    c.setStrokeColor(colors.black)
    c.setLineWidth(0.5)
    c.rect(left, bottom, pw, ph, stroke=1, fill=0)
    c.setFont("Helvetica", 6)
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
    c.drawRightString(left - 2, bottom - 2, format_fixed(lo, decimals))
    c.drawRightString(left - 2, bottom + ph - 4, format_fixed(hi, decimals))
    c.setStrokeColor(colors.Color(0.3, 0.3, 0.3))
    c.setLineWidth(0.6)
    for i in range(len(vals) - 1):  # a missing value breaks the line
        if finite[i] and finite[i + 1]:
            c.line(px(i), py(vals[i]), px(i + 1), py(vals[i + 1]))
    step = max(1, math.ceil(n / 20))
    flagged, beyond = set(flagged), set(beyond)
    for i, v in enumerate(vals):
        if i == 0 or (i + 1) % step == 0:
            c.setFillColor(colors.black)
            c.drawCentredString(px(i), bottom - 8, str(i + 1))
        if not np.isfinite(v):
            continue
        x_i, y_i = px(i), py(v)
        if i in flagged:
            c.setFillColor(_rl(PALETTE["fail"]))
            c.setStrokeColor(colors.black)
            c.setLineWidth(0.6)
            c.rect(x_i - 3, y_i - 3, 6, 6, stroke=1, fill=1)
        elif i not in beyond:
            c.setFillColor(colors.white)
            c.setStrokeColor(colors.black)
            c.setLineWidth(0.6)
            c.circle(x_i, y_i, 1.8, stroke=1, fill=1)
        if i in beyond:
            c.setStrokeColor(colors.black)
            c.setLineWidth(1.2)
            c.line(x_i - 3.2, y_i - 3.2, x_i + 3.2, y_i + 3.2)
            c.line(x_i - 3.2, y_i + 3.2, x_i + 3.2, y_i - 3.2)
        if i in flagged or i in beyond:
            c.setFillColor(colors.black)
            c.setFont("Helvetica-Bold", 6)
            above = y_i + 4.5 <= bottom + ph - 6
            c.drawCentredString(x_i, y_i + 4.5 if above else y_i - 9.5, f"#{i + 1}")
            c.setFont("Helvetica", 6)
    c.restoreState()


def _chart_key(c: Canvas, y: float) -> None:
    """The marks of the control charts, drawn as they appear."""
    c.saveState()
    c.setFont("Helvetica", 6.5)
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


def _flag_table(st: _RegionStats, parts: Sequence[PartResult], page_of: Mapping[int, int]) -> Table | None:
    flags = st.flags()
    if not flags:
        return None
    rows = [["#", "Part", "Verdict", "Deviation", "Coherence", "Flagged for", "Page"]]
    style = []
    for i, why in flags.items():
        word, colour, _ = PART_LOOKS[parts[i].verdict]
        rows.append(
            [
                str(i + 1),
                Paragraph(escape(parts[i].name), _CELL_BOLD),
                word,
                format_signed_angle(st.deviations[i]) if st.judged else "—",
                format_fixed(st.coherences[i], 3),
                Paragraph("; ".join(escape(w) for w in why), _CELL),
                str(page_of.get(i, "")),
            ]
        )
        style.append(("BACKGROUND", (2, len(rows) - 1), (2, len(rows) - 1), _tint(colour, 0.55)))
    style += [
        ("ALIGN", (0, 1), (0, -1), "RIGHT"),
        ("ALIGN", (3, 1), (4, -1), "RIGHT"),
        ("ALIGN", (-1, 1), (-1, -1), "RIGHT"),
    ]
    return _table(rows, [24, 100, 62, 56, 52, 199, 30], style)


def _layout_batch_stats(
    layout: _Layout, parts: Sequence[PartResult], stats: Sequence[_RegionStats], page_of: Mapping[int, int]
) -> None:
    layout.new_page()
    layout.block(20, lambda c, y: (c.setFont("Helvetica-Bold", 14), c.drawString(_MARGIN, y - 14, "Batch statistics")))
    layout.text(
        "Individuals (X) and moving-range (MR) charts per recipe region over the parts in production order; "
        "# is the part's number in that order, as in the summary. A moving range sits at the later of its two parts. "
        "Limits from the mean moving range (Montgomery, ch. 6.4): X limits mean ± 2.66 × mean MR, MR limit 3.267 × mean MR. "
        "Cp/Cpk of the lay deviation against the region's tolerance, with the within sigma mean MR / 1.128. "
        "Parts without measurable texture leave a gap.",
        _SMALL,
    )
    for st in stats:
        header = f"<b>{escape(st.recipe)} / {escape(st.region)}</b>"
        if st.judged:
            header += f" · tolerance ± {format_angle(st.tolerance)}"
        if st.capability is not None:
            cap = st.capability
            header += (
                f" · n = {cap.n} · mean deviation {format_signed_angle(cap.mean)} · within sigma "
                f"{format_fixed(cap.sigma, 3)}° · <b>{_capability_text(st)}</b>"
            )
        if st.note:
            header += f" · {escape(st.note)}"
        layout.text(header, gap=2)
        if st.dev_chart is None and st.coh_chart is None:
            layout.text("No chart for this region.", gap=10)
            continue
        layout.block(12, lambda c, y: _chart_key(c, y), gap=2)
        blocks = []
        if st.dev_chart is not None:
            ch = st.dev_chart
            blocks += [
                (
                    118,
                    "Lay deviation (°): individuals",
                    ch.values,
                    dict(
                        centre=ch.center,
                        ucl=ch.ucl,
                        lcl=ch.lcl,
                        flagged=ch.out_of_limits,
                        beyond=st.beyond_tolerance,
                        spec=(-st.tolerance, st.tolerance),
                        unit="°",
                        decimals=ANGLE_DECIMALS,
                    ),
                ),
                (
                    70,
                    "Lay deviation (°): moving range",
                    (math.nan, *ch.mr),
                    dict(
                        centre=ch.mr_bar,
                        ucl=ch.mr_ucl,
                        lcl=None,
                        flagged=[k + 1 for k in ch.mr_out_of_limits],
                        unit="°",
                        decimals=ANGLE_DECIMALS,
                        lower_zero=True,
                    ),
                ),
            ]
        if st.coh_chart is not None:
            ch = st.coh_chart
            # enough decimals to tell the limits apart, up to the 4 the result file keeps
            spread = ch.ucl - ch.lcl
            dec = 3 if spread <= 0 else int(min(4, max(3, math.ceil(-math.log10(spread)) + 1)))
            blocks += [
                (
                    100,
                    "Coherence: individuals",
                    ch.values,
                    dict(centre=ch.center, ucl=ch.ucl, lcl=ch.lcl, flagged=ch.out_of_limits, decimals=dec),
                ),
                (
                    64,
                    "Coherence: moving range",
                    (math.nan, *ch.mr),
                    dict(
                        centre=ch.mr_bar,
                        ucl=ch.mr_ucl,
                        lcl=None,
                        flagged=[k + 1 for k in ch.mr_out_of_limits],
                        decimals=dec,
                        lower_zero=True,
                    ),
                ),
            ]
        for h, title, values, kw in blocks:
            layout.block(
                h,
                lambda c, y, h=h, title=title, values=values, kw=kw: _chart(
                    c, _MARGIN, y, _FRAME_W, h, title, values, **kw
                ),
                gap=4,
            )
        table = _flag_table(st, parts, page_of)
        if table is None:
            layout.text("No part outside the control limits or beyond the tolerance.", gap=10)
        else:
            layout.text("<b>Parts flagged on these charts</b>", gap=2)
            layout.flowable(table, gap=12)


# ------------------------------------------------------------ not inspected


def _layout_not_inspected(layout: _Layout, items: Sequence[NotInspected], total: int) -> None:
    layout.new_page()
    layout.block(
        20,
        lambda c, y: (
            c.setFont("Helvetica-Bold", 14),
            c.drawString(_MARGIN, y - 14, f"Parts not inspected: {len(items)} of {total}"),
        ),
    )
    layout.text(
        "These images could not be inspected. Each counts as needing review: it is neither accepted nor rejected "
        "by this report, and appears in no statistics."
    )
    rows = [["Part", "Why", "File SHA-256"]]
    for item in items:
        rows.append(
            [
                Paragraph(escape(item.name), _CELL_BOLD),
                Paragraph(escape(item.error or "(no reason recorded)"), _CELL),
                Paragraph(
                    f"<font name=Courier size=6>{escape(item.sha256) or '(file could not be read)'}</font>", _CELL
                ),
            ]
        )
    layout.flowable(_table(rows, [110, 243, 170], []))


# ------------------------------------------------------------------ document


def _footer(c: Canvas, n: int, total: int, report_id: str, signoff: SignOff | None) -> None:
    """Report id, sign-off state and page n of N on every page, and the caution under them."""
    c.saveState()
    c.setStrokeColor(colors.Color(0.4, 0.4, 0.4))
    c.setLineWidth(0.5)
    c.line(_MARGIN, _MARGIN + 16, PAGE_SIZE[0] - _MARGIN, _MARGIN + 16)
    c.setFillColor(colors.black)
    c.setFont("Helvetica", 7.5)
    left = f"Report {report_id}"
    right = f"Page {n} of {total}"
    c.drawString(_MARGIN, _MARGIN + 6, left)
    c.drawRightString(PAGE_SIZE[0] - _MARGIN, _MARGIN + 6, right)
    # a page printed or filed on its own still says whether the report it belongs to was signed
    room = _FRAME_W - 2 * max(c.stringWidth(left, "Helvetica", 7.5), c.stringWidth(right, "Helvetica", 7.5)) - 24
    c.setFont("Helvetica-Bold", 7.5)
    c.drawCentredString(
        PAGE_SIZE[0] / 2, _MARGIN + 6, _fit_text(c, signoff_state(signoff), "Helvetica-Bold", 7.5, room)
    )
    c.setFont("Helvetica-Oblique", 6.8)
    c.drawCentredString(PAGE_SIZE[0] / 2, _MARGIN - 4, CAUTION)
    c.restoreState()


def _check_inputs(parts, images, report_id) -> tuple[list[PartResult], list]:
    parts = list(parts)
    images = list(images)
    if not parts:
        raise InputError("report: parts: no part results to report (allowed: one or more)")
    if len(images) != len(parts):
        raise InputError(
            f"report: images: got {len(images)} pictures for {len(parts)} parts (allowed: one per part, or None)"
        )
    if not str(report_id).strip():
        raise InputError("report: report_id: empty (allowed: a non-empty identifier)")
    for k, p in enumerate(parts):
        if not isinstance(p, PartResult):
            raise InputError(f"report: parts[{k}]: not a PartResult (got {type(p).__name__})")
    return parts, images


def render_report(
    parts: Sequence[PartResult],
    images: Sequence[np.ndarray | None],
    *,
    report_id: str,
    title: str | None = None,
    operator: str | None = None,
    station: str | None = None,
    generated_at: datetime | str | None = None,
    signoff: SignOff | None = None,
    batch_stats: bool = False,
    not_inspected: Sequence[NotInspected] = (),
    extra_pages: Sequence[ExtraPage] = (),
) -> bytes:
    """Render the inspection report of a batch of parts as PDF bytes.

    Parameters
    ----------
    parts : sequence of PartResult
        The judged parts, in production order (the batch charts keep it; the
        summary and part pages put rejects first).
    images : sequence of (M, N) ndarray or None
        One grey picture per part, the one its result was measured on (float
        in [0, 1], or uint8 / uint16). None leaves the part page without a
        picture and says so.
    report_id : str
        Printed on every page and fixed into the PDF's document id.
    title : str, optional
        Default "Surface lay inspection report".
    operator, station : str, optional
        Who ran the inspection and where; the station defaults to this host's name.
    generated_at : datetime or ISO 8601 str, optional
        The report's time (default: now). Naive values are taken as UTC. With
        the same inputs and ``generated_at`` the bytes are the same.
    signoff : SignOff, optional
        Fills the sign-off block; None leaves it visibly empty ("NOT SIGNED").
    batch_stats : bool
        Add the batch statistics page(s) after the part pages, and one line
        per region (Cp/Cpk, parts flagged) to the summary.
    not_inspected : sequence of NotInspected
        Parts of the batch whose image could not be inspected: counted and
        listed on the summary (a box of their own, rows after the rejects)
        and on a page of their own after the statistics.
    extra_pages : sequence of callables ``(canvas, page_size) -> None``
        Each draws one page at the end (the report adds the footer).

    Returns
    -------
    bytes
        The PDF document.

    Raises
    ------
    InputError
        No parts, a picture count or shape that does not match the results,
        an empty ``report_id``, or a ``not_inspected`` entry that is not a
        :class:`NotInspected`.
    """
    parts, images = _check_inputs(parts, images, report_id)
    report_id = str(report_id)
    title = title or DEFAULT_TITLE
    station = station or socket.gethostname()
    if generated_at is None:
        generated_at = datetime.now(timezone.utc)
    elif isinstance(generated_at, str):
        try:
            generated_at = datetime.fromisoformat(generated_at.replace("Z", "+00:00"))
        except ValueError:
            raise InputError(
                f"report: generated_at: not an ISO 8601 time (got {generated_at!r}, allowed e.g. 2031-04-02T09:00:00Z)"
            ) from None
    if generated_at.tzinfo is None:
        generated_at = generated_at.replace(tzinfo=timezone.utc)
    generated_at = generated_at.astimezone(timezone.utc)

    not_inspected = list(not_inspected)
    for k, item in enumerate(not_inspected):
        if not isinstance(item, NotInspected):
            raise InputError(f"report: not_inspected[{k}]: not a NotInspected (got {type(item).__name__})")
    figs = [(i, _PartFigures(p, tuple(region_to_dict(r) for r in p.regions))) for i, p in enumerate(parts)]
    ordered = sorted(figs, key=_sort_key)
    stats = _batch_stats(parts) if batch_stats else []
    summary_kwargs = dict(
        report_id=report_id,
        title=title,
        operator=operator,
        station=station,
        generated_at=generated_at,
        signoff=signoff,
        not_inspected=not_inspected,
        stats=stats,
    )

    # pass 1 counts the summary's pages, so the part table can give each part's page
    probe = _Layout()
    _layout_summary(probe, ordered, {i: 999 for i, _ in figs}, not_inspected_page=999, stats_page=999, **summary_kwargs)
    body = _Layout()
    page_of: dict[int, int] = {}
    first_part_page = len(probe.pages) + 1
    for i, fig in ordered:
        if not body.page_is_empty:
            body.new_page()
        page_of[i] = first_part_page + len(body.pages) - 1
        _layout_part(body, fig, images[i], f"part-{len(page_of)}", f"#{i + 1} of {len(parts)}")
    next_page = first_part_page + len(body.pages)
    stats_page = None
    if stats:
        stats_layout = _Layout()
        stats_layout.pages = []  # _layout_batch_stats starts its own page
        _layout_batch_stats(stats_layout, parts, stats, page_of)
        stats_page, next_page = next_page, next_page + len(stats_layout.pages)
    layout = _Layout()
    _layout_summary(
        layout,
        ordered,
        page_of,
        not_inspected_page=next_page if not_inspected else None,
        stats_page=stats_page,
        **summary_kwargs,
    )
    if len(layout.pages) != len(probe.pages):  # pragma: no cover - row heights do not depend on page digits
        raise RuntimeError("summary pagination changed between passes")
    layout.pages.extend(body.pages)
    if stats:
        layout.pages.extend(stats_layout.pages)
    if not_inspected:
        _layout_not_inspected(layout, not_inspected, len(parts) + len(not_inspected))
    for extra in extra_pages:
        layout.new_page()
        layout.pages[-1].append(lambda c, extra=extra: _extra(c, extra))
    pages = [p for p in layout.pages if p]

    buf = io.BytesIO()
    c = Canvas(buf, pagesize=PAGE_SIZE, invariant=1, pageCompression=1)
    stamp = generated_at.strftime("D:%Y%m%d%H%M%S+00'00'")
    c.setDateFormatter(lambda *_: stamp)
    c.setTitle(f"{title} {report_id}")
    c.setSubject(f"surfinspect report {report_id}")  # enters the PDF document id
    c.setAuthor(operator or "surfinspect")
    c.setCreator("surfinspect " + ", ".join(_unique(p.engine_version for p in parts)))
    c.setKeywords(f"report {report_id}; generated {generated_at.strftime('%Y-%m-%dT%H:%M:%SZ')}")
    for n, page in enumerate(pages, start=1):
        for draw in page:
            draw(c)
        _footer(c, n, len(pages), report_id, signoff)
        c.showPage()
    c.save()
    return buf.getvalue()


def _extra(c: Canvas, extra: ExtraPage) -> None:
    c.saveState()
    try:
        extra(c, PAGE_SIZE)
    finally:
        c.restoreState()


def write_report(
    path: str | os.PathLike, parts: Sequence[PartResult], images: Sequence[np.ndarray | None], **kwargs
) -> None:
    """Render the report (:func:`render_report`, same keywords) and write it atomically."""
    fsutil.write_bytes_atomic(path, render_report(parts, images, **kwargs))
