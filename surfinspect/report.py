"""The PDF inspection report (reportlab).

Pages, in order:

1. Summary: recipe(s), engine version, date and time (UTC and local), station,
   operator, counts of accepted / rejected / review parts, the sign-off block,
   one row per part (rejects first, then review, then accepted) and, once, the
   legend (angle convention, colours and shapes).
2. One page or more per part, in the summary's order: the photo as a
   downsampled JPEG with the overlay of :mod:`surfinspect.overlay` drawn on top
   as vector graphics in the result's own image-pixel coordinates, a table per
   region, the deviating patches, a rose plot of each region's orientation
   histogram, the image file name and SHA-256.
3. Optionally, batch statistics: individuals and moving-range charts of the
   lay deviation and coherence per part, and Cp/Cpk of the deviation against
   the tolerance.
4. Pages added by the caller (``extra_pages``).

Every page carries the report id, "page n of N" and the caution that the
measurement supports, and does not replace, the inspector's decision.

Numbers are printed from the result's JSON form (:func:`results.region_to_dict`)
so the report shows what the result file says: angles with
:data:`ANGLE_DECIMALS` decimals (rounded from the JSON value), coherence with 3,
area shares in per cent with 2. The document is deterministic apart from
``generated_at``: same inputs and time, same bytes.
"""

from __future__ import annotations

import contextlib
import io
import math
import os
import socket
from dataclasses import dataclass
from datetime import datetime, timezone
from typing import Callable, Iterable, Mapping, Sequence
from xml.sax.saxutils import escape

import numpy as np
from PIL import Image
from reportlab.lib import colors
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle
from reportlab.lib.utils import ImageReader
from reportlab.pdfgen.canvas import FILL_EVEN_ODD, Canvas
from reportlab.platypus import Flowable, Paragraph, Table, TableStyle

from . import fsutil
from .errors import InputError
from .overlay import (
    PALETTE,
    PART_LOOKS,
    REGION_LOOKS,
    STYLE_UNITS,
    OverlayScene,
    RGB,
    checked_picture,
    build_scene,
    grey_to_uint8,
    paint_scene,
)
from .results import PartResult, PartVerdict, RegionResult, RegionVerdict, SignOff, region_to_dict

__all__ = [
    "ANGLE_DECIMALS",
    "CAUTION",
    "PAGE_SIZE",
    "PICTURE_MAX_PX",
    "ExtraPage",
    "format_angle",
    "format_signed_angle",
    "render_report",
    "write_report",
]

#: Decimals of every angle the report prints (values rounded from the JSON form).
ANGLE_DECIMALS = 2
PAGE_SIZE = A4
#: Long side of the embedded photo at most (about 220 dpi across the page's text width).
PICTURE_MAX_PX = 1600
JPEG_QUALITY = 82
CAUTION = (
    "The measurement supports, and does not replace, the qualified inspector's decision "
    "and the customer's specification."
)
DEFAULT_TITLE = "Surface lay inspection report"

#: A page that another module appends: it draws on the canvas, the report adds the footer.
ExtraPage = Callable[[Canvas, tuple[float, float]], None]

_MARGIN = 36.0
_FOOTER = 30.0
_FRAME_W = PAGE_SIZE[0] - 2 * _MARGIN
_PICTURE_MAX_H = 340.0
_GLYPH_SPACING_PT = 12.0  # denser glyphs cover the photo on paper
_VERDICT_ORDER = {PartVerdict.REJECT: 0, PartVerdict.REVIEW: 1, PartVerdict.ACCEPT: 2}
_REGION_SEVERITY = {RegionVerdict.FAIL: 2, RegionVerdict.NO_TEXTURE: 1, RegionVerdict.PASS: 0}

_BODY = ParagraphStyle("body", fontName="Helvetica", fontSize=8, leading=10)
_SMALL = ParagraphStyle("small", fontName="Helvetica", fontSize=7, leading=8.6)
_CELL = ParagraphStyle("cell", fontName="Helvetica", fontSize=7.5, leading=9)
_CELL_BOLD = ParagraphStyle("cellb", parent=_CELL, fontName="Helvetica-Bold")


def format_angle(value: float | None, *, axial: bool = False) -> str:
    """An angle as the report prints it: ``ANGLE_DECIMALS`` decimals and a degree sign; None is a dash.

    With ``axial=True`` (a lay direction, in [0, 180)) a value that rounds to
    180 is printed as 0, the same direction.
    """
    if value is None:
        return "—"
    text = f"{value:.{ANGLE_DECIMALS}f}"
    if axial and float(text) >= 180.0:
        text = f"{float(text) - 180.0:.{ANGLE_DECIMALS}f}"
    return text + "°"


def format_signed_angle(value: float | None) -> str:
    """A deviation as the report prints it: signed, ``ANGLE_DECIMALS`` decimals; None is a dash."""
    if value is None:
        return "—"
    text = f"{value:+.{ANGLE_DECIMALS}f}"
    if float(text) == 0.0:  # no "-0.00": a sign that rounds away says nothing
        text = f"{0.0:.{ANGLE_DECIMALS}f}"
    return text + "°"


def _percent(share: float | None) -> str:
    return "—" if share is None else f"{100.0 * share:.2f} %"


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
                self.block(h, lambda c, y, f=f: f.drawOn(c, x, y - h), gap=gap)
                return
            parts = f.split(width, self.space) if self.space > 40 else []
            if len(parts) < 2:
                if self.page_is_empty:  # taller than a page and cannot split: draw what fits
                    self.block(min(h, self.space), lambda c, y, f=f: f.drawOn(c, x, y - h), gap=gap)
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
        for text, (x, y), fill, above in self.labels:
            size = 7.5 if len(text) > 2 else 7.0
            px, py = self.x0 + x * self.scale, self.y_top - y * self.scale
            _tag(self.c, text, px, py, fill, size, self.x0, self.y_top, self.w_pt, self.h_pt, above=above)


def _draw_picture(c: Canvas, jpeg: bytes, scene: OverlayScene, x0: float, y_top: float, s: float) -> None:
    """The photo, then the overlay scene in image-pixel coordinates, then the labels and a frame."""
    w_pt, h_pt = scene.width * s, scene.height * s
    c.drawImage(ImageReader(io.BytesIO(jpeg)), x0, y_top - h_pt, w_pt, h_pt)
    painter = _VectorPainter(c, x0, y_top, s, w_pt, h_pt)
    with painter.image_space():
        paint_scene(painter, scene)
    painter.set_labels()
    c.setStrokeColor(colors.black)
    c.setLineWidth(0.6)
    c.rect(x0, y_top - h_pt, w_pt, h_pt, stroke=1, fill=0)


def _tag(c, text, x, y, fill: RGB, size, x0, y_top, w_pt, h_pt, *, above=False) -> None:
    """A label in a filled box with its top-left at (x, y) on the page, kept inside the picture."""
    pad = size * 0.25
    tw = c.stringWidth(text, "Helvetica-Bold", size) + 2 * pad
    th = size + 2 * pad
    left = min(max(x + pad, x0), x0 + w_pt - tw)
    top = y + th + pad if above else y - pad
    top = min(max(top, y_top - h_pt + th), y_top)
    c.saveState()
    c.setFillColor(_rl(fill))
    c.setStrokeColor(colors.black)
    c.setLineWidth(0.5)
    c.rect(left, top - th, tw, th, stroke=1, fill=1)
    c.setFillColor(colors.black)
    c.setFont("Helvetica-Bold", size)
    c.drawString(left + pad, top - th + pad + size * 0.18, text)
    c.restoreState()


# ------------------------------------------------------------------ rose plot


def _draw_rose(c: Canvas, cx: float, cy: float, radius: float, region: RegionResult, expected: Sequence[float]) -> None:
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
    c.setStrokeColor(colors.black)
    c.setLineWidth(0.9)
    c.setDash([3, 2])
    for e in expected:
        ux, uy = math.cos(math.radians(e)), math.sin(math.radians(e))
        c.line(cx - ux * radius * 1.08, cy - uy * radius * 1.08, cx + ux * radius * 1.08, cy + uy * radius * 1.08)
    c.setDash([])
    if region.lay_deg is not None:
        ux, uy = math.cos(math.radians(region.lay_deg)), math.sin(math.radians(region.lay_deg))
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


def _expected_text(region: RegionResult, figures: dict) -> str:
    e = figures["expected_lay_deg"]
    if e is None:
        text = "—"
    elif isinstance(e, list):
        text = " / ".join(format_angle(v, axial=True) for v in e)
    else:
        text = format_angle(e, axial=True)
    return text


def _region_table(fig: _PartFigures) -> Table:
    header = ["Region", "Expected lay", "Tolerance", "Measured lay ± u", "Deviation", "Coherence", "Defect area", "Verdict"]
    rows = [header]
    style = []
    for region, d in zip(fig.part.regions, fig.regions):
        look = REGION_LOOKS[region.verdict]
        name = escape(region.name)
        if region.lay_pattern != "directional":
            name += f"<br/><font size=6>({escape(region.lay_pattern)} lay)</font>"
        measured = (
            "no texture"
            if d["lay_deg"] is None
            else f"{format_angle(d['lay_deg'], axial=True)} ± {format_angle(d['uncertainty_deg']) if d['uncertainty_deg'] is not None else '?'}"
        )
        row = len(rows)
        rows.append(
            [
                Paragraph(name, _CELL_BOLD),
                _expected_text(region, d),
                f"± {format_angle(d['tolerance_deg'])}",
                measured,
                format_signed_angle(d["deviation_deg"]),
                f"{d['coherence']:.3f}" if d["coherence"] is not None else "—",
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
        if region.reasons:
            reasons = "; ".join(escape(r) for r in region.reasons)
            rows.append([Paragraph(f"<i>Reasons:</i> {reasons}", _CELL), "", "", "", "", "", "", ""])
            last = row + 1
            style.append(("SPAN", (0, last), (-1, last)))
        if region.verdict is RegionVerdict.FAIL:  # a heavy rule beside failing rows, for grey print
            style.append(("LINEBEFORE", (0, row), (0, last), 2.5, colors.black))
    widths = [96, 62, 50, 92, 52, 50, 52, 69]
    return _table(rows, widths, style)


def _patch_table(fig: _PartFigures) -> Table | None:
    rows = [["Region", "Patch", "Box x, y, w, h (px)", "Size (mm)", "Share of region", "Lay", "Deviation"]]
    for region, d in zip(fig.part.regions, fig.regions):
        for n, p in enumerate(d["patches"], start=1):
            size = "—" if "bbox_mm" not in p else " × ".join(f"{v:.1f}" for v in p["bbox_mm"])
            rows.append(
                [
                    region.name,
                    str(n),
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
    """One line that says why the part got its verdict."""
    why = [f"{r.name}: {r.reasons[0] if r.reasons else REGION_LOOKS[r.verdict].word.lower()}" for r in part.regions if r.verdict is not RegionVerdict.PASS]
    why = list(part.reasons) + why
    if part.verdict is PartVerdict.ACCEPT:
        n = len(part.regions)
        return f"All {n} region{'s' if n != 1 else ''} within limits." if not why else "; ".join(why)
    lead = "Rejected" if part.verdict is PartVerdict.REJECT else "Needs review"
    return f"{lead}: " + "; ".join(why)


def _fit_text(c: Canvas, text: str, font: str, size: float, width: float) -> str:
    if c.stringWidth(text, font, size) <= width:
        return text
    while text and c.stringWidth(text + "…", font, size) > width:
        text = text[:-1]
    return text + "…"


_PART_HEADER_H = 50.0


def _part_header(c: Canvas, y: float, part: PartResult, page_note: str) -> None:
    badge_w, badge_h = 170.0, 40.0
    text_w = _FRAME_W - badge_w - 10
    c.setFillColor(colors.black)
    c.setFont("Helvetica-Bold", 15)
    c.drawString(_MARGIN, y - 15, _fit_text(c, part.name + page_note, "Helvetica-Bold", 15, text_w))
    _verdict_badge(c, part.verdict, PAGE_SIZE[0] - _MARGIN - badge_w, y - badge_h, badge_w, badge_h)
    c.setFont("Helvetica", 7.5)
    c.drawString(_MARGIN, y - 26, f"Recipe {part.recipe.name} · revision {part.recipe.revision}")
    c.drawString(_MARGIN, y - 35, f"Inspected {part.inspected_at} · engine {part.engine_version}")
    c.setFont("Helvetica-Bold", 8.5)
    c.drawString(_MARGIN, y - 48, _fit_text(c, _verdict_sentence(part), "Helvetica-Bold", 8.5, _FRAME_W))


def _image_lines(part: PartResult) -> str:
    im = part.image
    datum = part.datum
    if datum is None or datum.kind == "image":
        frame = "image axes"
    else:
        frame = f"part edges, rotation {datum.rotation_deg:+.3f}° against the image"
        if datum.fit_quality is not None:
            frame += f", fit quality {datum.fit_quality:.3f}"
    return (
        f"<b>Image file</b> {escape(os.path.basename(im.path) or im.path or '(not recorded)')} · "
        f"{im.width} × {im.height} px · {im.bit_depth} bit · <b>part frame</b> {frame}<br/>"
        f"<b>Image SHA-256</b> <font name=Courier size=7>{im.sha256 or '(not recorded)'}</font>"
    )


def _layout_part(layout: _Layout, fig: _PartFigures, pixels: np.ndarray | None, bookmark: str) -> None:
    part = fig.part

    def header(c: Canvas, y: float) -> None:
        c.bookmarkPage(bookmark)
        c.addOutlineEntry(f"{part.name}: {PART_LOOKS[part.verdict][0]}", bookmark, level=0)
        _part_header(c, y, part, "")

    layout.block(_PART_HEADER_H, header, gap=6)
    layout.continuation_header = lambda: layout.block(
        _PART_HEADER_H, lambda c, y: _part_header(c, y, part, " (continued)"), gap=6
    )
    if part.reasons:
        layout.text("<b>Part:</b> " + "; ".join(escape(r) for r in part.reasons))
    layout.text(_image_lines(part), gap=6)
    if pixels is not None:
        grey = checked_picture(pixels, part)
        m, n = grey.shape
        s = min(_FRAME_W / n, _PICTURE_MAX_H / m)
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
        layout.text("<b>Deviating patches</b> (numbered as on the picture, per region)", gap=2)
        layout.flowable(patches)
    _layout_roses(layout, fig)
    layout.continuation_header = None


def _no_picture_note(c: Canvas, y: float) -> None:
    c.setStrokeColor(colors.black)
    c.setDash([3, 2])
    c.rect(_MARGIN, y - 36, _FRAME_W, 36, stroke=1, fill=0)
    c.setDash([])
    c.setFont("Helvetica-Oblique", 8)
    c.drawCentredString(PAGE_SIZE[0] / 2, y - 21, "Picture not supplied to the report: see the overlay PNG beside the result.")


def _layout_roses(layout: _Layout, fig: _PartFigures) -> None:
    per_row, cell_h = 4, 138.0
    cell_w = _FRAME_W / per_row
    regions = list(zip(fig.part.regions, fig.regions))
    for start in range(0, len(regions), per_row):
        chunk = regions[start : start + per_row]

        def draw(c: Canvas, y: float, chunk=chunk, first=start == 0) -> None:
            for k, (region, d) in enumerate(chunk):
                cx = _MARGIN + cell_w * (k + 0.5)
                expected = [] if d["expected_lay_deg"] is None else (
                    d["expected_lay_deg"] if isinstance(d["expected_lay_deg"], list) else [d["expected_lay_deg"]]
                )
                c.setFillColor(colors.black)
                c.setFont("Helvetica-Bold", 7.5)
                c.drawCentredString(cx, y - 9, f"{region.name}: orientation histogram")
                _draw_rose(c, cx, y - 66, 46, region, expected)
                c.setFont("Helvetica", 6.5)
                exp_text = " / ".join(format_angle(e, axial=True) for e in expected) or "—"
                c.drawCentredString(cx, y - 128, f"expected {exp_text} ± {format_angle(d['tolerance_deg'])}")
                c.drawCentredString(cx, y - 136, f"measured {format_angle(d['lay_deg'], axial=True) if d['lay_deg'] is not None else 'no texture'}")

        layout.block(cell_h, draw, gap=4)


# ------------------------------------------------------------- summary page


def _sort_key(item: tuple[int, _PartFigures]):
    index, fig = item
    return _VERDICT_ORDER[fig.part.verdict], index


def _unique(values: Iterable) -> list:
    seen: dict = {}
    for v in values:
        seen.setdefault(v, None)
    return list(seen)


def _count_boxes(c: Canvas, y: float, counts: Mapping[PartVerdict, int]) -> None:
    w, h, gap = (_FRAME_W - 16) / 3, 46.0, 8.0
    for k, verdict in enumerate((PartVerdict.REJECT, PartVerdict.REVIEW, PartVerdict.ACCEPT)):
        x = _MARGIN + k * (w + gap)
        n = counts.get(verdict, 0)
        word, colour, shape = PART_LOOKS[verdict]
        c.saveState()
        c.setFillColor(_rl(colour) if n else colors.white)
        c.setStrokeColor(colors.black)
        c.setLineWidth(2.0 if n else 0.6)
        c.rect(x, y - h, w, h, stroke=1, fill=1)
        _verdict_icon(c, shape, x + 20, y - h / 2, 22)
        c.setFillColor(colors.black)
        c.setFont("Helvetica-Bold", 24)
        c.drawRightString(x + w - 10, y - h / 2 - 8, str(n))
        c.setFont("Helvetica-Bold", 11)
        c.drawString(x + 38, y - h / 2 - 4, word)
        c.restoreState()


def _titled_box(c: Canvas, y: float, height: float, title: str, *, line_width: float, title_size: float) -> None:
    c.setStrokeColor(colors.black)
    c.setLineWidth(line_width)
    c.rect(_MARGIN, y - height, _FRAME_W, height, stroke=1, fill=0)
    c.setFillColor(colors.black)
    c.setFont("Helvetica-Bold", title_size)
    c.drawString(_MARGIN + 8, y - 15, title)


def _signoff_block(c: Canvas, y: float, signoff: SignOff | None) -> None:
    c.saveState()
    _titled_box(c, y, 104.0, "SIGN-OFF", line_width=1.2, title_size=10)
    c.setFont("Helvetica", 7)
    status = (
        "NOT SIGNED: this report carries no sign-off yet."
        if signoff is None
        else "Signed electronically; the archive's verify command checks the signature."
    )
    c.drawString(_MARGIN + 70, y - 15, status)
    rows = [
        ("Name (printed)", None if signoff is None else signoff.signer_name),
        ("Meaning", None if signoff is None else signoff.meaning),
        ("Time (UTC)", None if signoff is None else signoff.signed_at_utc),
        ("Key fingerprint", None if signoff is None else signoff.key_fingerprint),
    ]
    if signoff is not None:
        rows.append(("Record SHA-256", signoff.record_sha256 or "—"))
        if signoff.comment:
            rows.append(("Comment", signoff.comment))
    else:
        rows.append(("Signature", None))
    line_y = y - 32
    for label, value in rows:
        c.setFont("Helvetica-Bold", 7.5)
        c.drawString(_MARGIN + 8, line_y, label)
        if value is None:
            c.setLineWidth(0.5)
            c.setDash([1, 2])
            c.line(_MARGIN + 90, line_y - 1, _MARGIN + _FRAME_W - 10, line_y - 1)
            c.setDash([])
            if label == "Meaning":
                c.setFont("Helvetica", 6.5)
                c.drawString(_MARGIN + _FRAME_W - 180, line_y + 1, "approved / rejected / reviewed")
        else:
            font = "Courier" if label in ("Key fingerprint", "Record SHA-256") else "Helvetica"
            c.setFont(font, 7.5)
            c.drawString(_MARGIN + 90, line_y, str(value))
        line_y -= 14.5
    c.restoreState()


def _legend(c: Canvas, y: float) -> None:
    """Angle convention, colours and shapes, explained once."""
    c.saveState()
    _titled_box(c, y, 200.0, "How to read the pictures", line_width=0.6, title_size=9)
    line_keys = [
        ("outline", PALETTE["pass"], None, "Region passes (outline solid)"),
        ("outline", PALETTE["fail"], REGION_LOOKS[RegionVerdict.FAIL].dash, "Region fails (outline dashed)"),
        ("outline", PALETTE["no-texture"], REGION_LOOKS[RegionVerdict.NO_TEXTURE].dash, "No measurable texture (dotted): review"),
        ("glyph", PALETTE["cell"], None, "Local lay of a cell (short line along the grain)"),
        ("glyph-deviating", PALETTE["cell-deviating"], None, "Cell whose lay deviates beyond tolerance"),
        ("expected", PALETTE["expected"], None, "Expected lay of the region (white double arrow)"),
        ("measured", PALETTE["measured"], None, "Measured lay of the region (blue double arrow)"),
    ]
    yy = y - 30
    for key, colour, dash, text in line_keys:
        w = STYLE_UNITS[key] * 0.55
        c.setLineCap(1)
        if key in ("outline", "expected", "glyph", "glyph-deviating"):  # drawn with a dark edge on the pictures
            c.setStrokeColor(colors.black)
            c.setLineWidth(w + (1.6 if key in ("outline", "expected") else 0.8))
            if dash:
                c.setDash([dash[0] * w, dash[1] * w])
            c.line(_MARGIN + 10, yy, _MARGIN + 46, yy)
        c.setStrokeColor(_rl(colour))
        c.setLineWidth(w)
        if dash:
            c.setDash([dash[0] * w, dash[1] * w])
        c.line(_MARGIN + 10, yy, _MARGIN + 46, yy)
        c.setDash([])
        c.setFillColor(colors.black)
        c.setFont("Helvetica", 7.5)
        c.drawString(_MARGIN + 54, yy - 2.5, text)
        yy -= 15
    c.setFillColor(colors.Color(0, 0, 0, 0.55))
    c.rect(_MARGIN + 18, yy - 5, 20, 10, stroke=0, fill=1)
    c.setFillColor(colors.black)
    c.drawString(_MARGIN + 54, yy - 2.5, "Excluded from the measurement (darkened)")
    yy -= 15
    c.setStrokeColor(_rl(PALETTE["patch"]))
    c.setLineWidth(2)
    c.rect(_MARGIN + 16, yy - 5, 24, 10, stroke=1, fill=0)
    c.drawString(_MARGIN + 54, yy - 2.5, "Deviating patch, numbered as in the patch table")
    yy -= 15
    c.setStrokeColor(colors.black)
    c.line(_MARGIN + 12, yy - 4, _MARGIN + 38, yy - 4)
    c.line(_MARGIN + 12, yy - 4, _MARGIN + 12, yy + 8)
    c.drawString(_MARGIN + 54, yy - 2.5, "Part frame X, Y (when found from the part's edges)")
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
        f"Printed with {ANGLE_DECIMALS} decimals, rounded from",
        "the values in the result file.",
    ):
        text.textLine(line)
    c.drawText(text)
    c.setFont("Helvetica-Bold", 8)
    c.drawString(x, y - 124, "Verdicts (word and shape)")
    yy = y - 140
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
) -> None:
    parts = [f.part for _, f in figs]
    counts = {v: sum(p.verdict is v for p in parts) for v in PartVerdict}

    def head(c: Canvas, y: float) -> None:
        c.setFillColor(colors.black)
        c.setFont("Helvetica-Bold", 17)
        c.drawString(_MARGIN, y - 17, title)
        c.setFont("Helvetica", 9)
        c.drawString(_MARGIN, y - 31, f"Report {report_id} · {len(parts)} part{'s' if len(parts) != 1 else ''} inspected")
        _count_boxes(c, y - 40, counts)

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
    layout.flowable(
        _table(info, [100, _FRAME_W - 100], [("FONT", (0, 0), (0, -1), "Helvetica-Bold", 7.5), ("BACKGROUND", (0, 0), (0, -1), colors.Color(0.93, 0.93, 0.93))], repeat_rows=0)
    )
    layout.block(104, lambda c, y: _signoff_block(c, y, signoff))
    rows = [["#", "Part", "Verdict", "Worst region", "Worst deviation", "First reason", "Page"]]
    style = []
    for k, (index, fig) in enumerate(figs, start=1):
        worst = fig.worst
        if worst is None:
            region_name, deviation = "—", "—"
        else:
            region, d = worst
            region_name = f"{region.name} ({REGION_LOOKS[region.verdict].word})"
            deviation = "no texture" if d["deviation_deg"] is None else format_signed_angle(d["deviation_deg"])
        reasons = [r for reg in fig.part.regions if reg.verdict is not RegionVerdict.PASS for r in reg.reasons]
        reasons = list(fig.part.reasons) + reasons
        word, colour, _ = PART_LOOKS[fig.part.verdict]
        rows.append(
            [
                str(k),
                Paragraph(escape(fig.part.name), _CELL_BOLD),
                word,
                region_name,
                deviation,
                Paragraph(escape(reasons[0]) if reasons else "—", _CELL),
                str(page_of.get(index, "")),
            ]
        )
        style += [
            ("BACKGROUND", (2, k), (2, k), _tint(colour, 0.55)),
            ("FONT", (2, k), (2, k), "Helvetica-Bold", 8),
        ]
        if fig.part.verdict is PartVerdict.REJECT:
            style.append(("LINEBEFORE", (0, k), (0, k), 2.5, colors.black))
    layout.text("<b>Parts</b> (rejected first, then review, then accepted)", gap=2)
    layout.flowable(_table(rows, [18, 96, 60, 90, 68, 161, 30], style + [("ALIGN", (4, 1), (4, -1), "RIGHT"), ("ALIGN", (-1, 1), (-1, -1), "RIGHT")]))
    layout.block(200, _legend)


# ----------------------------------------------------------- batch statistics


def _chart(c: Canvas, x, y_top, w, h, title, values, chart, *, spec=None, unit="", decimals=2, lower_zero=False) -> None:
    """One control chart: points in order, centre line, limits; points beyond the limits marked."""
    vals = np.asarray(values, dtype=float)
    finite = np.isfinite(vals)
    lines = [("CL", chart[0]), ("UCL", chart[1])] + ([] if chart[2] is None else [("LCL", chart[2])])
    span_vals = list(vals[finite]) + [v for _, v in lines] + list(spec or ())
    lo, hi = min(span_vals), max(span_vals)
    if lower_zero:
        lo = 0.0
    pad = (hi - lo) * 0.08 or 1.0
    lo, hi = (lo if lower_zero else lo - pad), hi + pad  # a moving range is never negative
    left, bottom = x + 34, y_top - h + 14
    pw, ph = w - 64, h - 30

    def px(i):
        return left + (pw * (i + 0.5) / max(1, len(vals)))

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
        c.line(left, py(v), left + pw, py(v))
        tags.append((py(v), f"{label} {v:.{decimals}f}{unit}"))
    c.setStrokeColor(_rl(PALETTE["pass"]))
    c.setDash([1, 1.5])
    for v in spec or ():
        c.line(left, py(v), left + pw, py(v))
        tags.append((py(v), f"spec {v:+.{decimals}f}{unit}"))
    c.setDash([])
    tags.sort()
    placed: list[float] = []
    for ty, text in tags:  # keep the labels of close lines apart
        ty = max(ty, placed[-1] + 6.5) if placed else ty
        placed.append(ty)
        c.drawString(left + pw + 2, ty - 2, text)
    c.setFont("Helvetica", 6)
    c.drawRightString(left - 2, bottom - 2, f"{lo:.{decimals}f}")
    c.drawRightString(left - 2, bottom + ph - 4, f"{hi:.{decimals}f}")
    c.setStrokeColor(colors.Color(0.3, 0.3, 0.3))
    c.setLineWidth(0.6)
    pts = [(px(i), py(v)) for i, v in enumerate(vals) if np.isfinite(v)]
    for (x1, y1), (x2, y2) in zip(pts[:-1], pts[1:]):
        c.line(x1, y1, x2, y2)
    outside = set(chart[3])
    step = max(1, len(vals) // 12)
    for i, v in enumerate(vals):
        if i % step == 0 or i == len(vals) - 1:
            c.setFillColor(colors.black)
            c.drawCentredString(px(i), bottom - 8, str(i + 1))
        if not np.isfinite(v):
            continue
        if i in outside:  # outside the limits: a large filled square, numbered
            c.setFillColor(_rl(PALETTE["fail"]))
            c.setStrokeColor(colors.black)
            c.rect(px(i) - 3, py(v) - 3, 6, 6, stroke=1, fill=1)
            c.setFillColor(colors.black)
            c.drawCentredString(px(i), py(v) + 4.5, f"#{i + 1}")
        else:
            c.setFillColor(colors.white)
            c.setStrokeColor(colors.black)
            c.circle(px(i), py(v), 1.8, stroke=1, fill=1)
    c.restoreState()


def _layout_batch_stats(layout: _Layout, parts: Sequence[PartResult]) -> None:
    from .spc import capability, individuals_chart

    layout.new_page()
    layout.block(20, lambda c, y: (c.setFont("Helvetica-Bold", 14), c.drawString(_MARGIN, y - 14, "Batch statistics")))
    layout.text(
        "Individuals (X) and moving-range (MR) charts per recipe region, parts in the order given "
        "(numbered 1..n along the axis). Limits from the mean moving range (Montgomery, ch. 6.4). "
        "Cp/Cpk of the lay deviation against the region's tolerance. Parts without measurable texture "
        "leave a gap.",
        _SMALL,
    )
    groups: dict[tuple[str, str], list[tuple[int, RegionResult, dict]]] = {}
    for i, part in enumerate(parts):
        for region in part.regions:
            groups.setdefault((part.recipe.name, region.name), []).append((i, region, region_to_dict(region)))
    for (recipe, name), members in groups.items():
        devs: list[float | None] = [None] * len(parts)
        cohs: list[float | None] = [None] * len(parts)
        for i, _, d in members:
            devs[i] = d["deviation_deg"]
            cohs[i] = d["coherence"] if d["lay_deg"] is not None else None
        tol = members[0][1].tolerance_deg
        header = f"<b>{escape(recipe)} / {escape(name)}</b> · tolerance ± {format_angle(tol)}"
        try:
            dev_chart = individuals_chart(devs)
            coh_chart = individuals_chart(cohs)
            cap = capability(devs, -tol, tol)
        except InputError as exc:
            layout.text(f"{header}: too few measured parts for control limits ({escape(str(exc))}).")
            continue
        cp = "—" if cap.cp is None else f"{cap.cp:.2f}"
        cpk = "—" if cap.cpk is None else f"{cap.cpk:.2f}"
        layout.text(
            f"{header} · n = {cap.n} · mean deviation {format_signed_angle(cap.mean)} · "
            f"within sigma {cap.sigma:.3f}° · <b>Cp {cp} · Cpk {cpk}</b>",
            gap=2,
        )
        charts = [
            ("Lay deviation (°): individuals", devs, (dev_chart.center, dev_chart.ucl, dev_chart.lcl, dev_chart.out_of_limits), (-tol, tol), "°", ANGLE_DECIMALS, False),
            ("Lay deviation: moving range", dev_chart.mr, (dev_chart.mr_bar, dev_chart.mr_ucl, None, dev_chart.mr_out_of_limits), None, "°", ANGLE_DECIMALS, True),
            ("Coherence: individuals", cohs, (coh_chart.center, coh_chart.ucl, coh_chart.lcl, coh_chart.out_of_limits), None, "", 3, False),
            ("Coherence: moving range", coh_chart.mr, (coh_chart.mr_bar, coh_chart.mr_ucl, None, coh_chart.mr_out_of_limits), None, "", 3, True),
        ]
        for row in (charts[:2], charts[2:]):
            def draw(c: Canvas, y: float, row=row) -> None:
                widths = (_FRAME_W * 0.6, _FRAME_W * 0.4)
                x = _MARGIN
                for (title, vals, lim, spec, unit, dec, zero), w in zip(row, widths):
                    _chart(c, x, y, w - 6, 112, title, vals, lim, spec=spec, unit=unit, decimals=dec, lower_zero=zero)
                    x += w

            layout.block(112, draw, gap=4)
        flagged = sorted(set(dev_chart.out_of_limits) | set(coh_chart.out_of_limits))
        if flagged:
            names = ", ".join(
                f"#{i + 1} {escape(parts[i].name)} ({format_signed_angle(devs[i])}, coherence "
                f"{'—' if cohs[i] is None else f'{cohs[i]:.3f}'})"
                for i in flagged
            )
            layout.text(f"<b>Outside control limits:</b> {names}", gap=10)
        else:
            layout.text("No part outside the control limits.", gap=10)


# ------------------------------------------------------------------ document


def _footer(c: Canvas, n: int, total: int, report_id: str) -> None:
    c.saveState()
    c.setStrokeColor(colors.Color(0.4, 0.4, 0.4))
    c.setLineWidth(0.5)
    c.line(_MARGIN, _MARGIN + 16, PAGE_SIZE[0] - _MARGIN, _MARGIN + 16)
    c.setFillColor(colors.black)
    c.setFont("Helvetica", 7.5)
    c.drawString(_MARGIN, _MARGIN + 6, f"Report {report_id}")
    c.drawRightString(PAGE_SIZE[0] - _MARGIN, _MARGIN + 6, f"Page {n} of {total}")
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
        Add the batch statistics page(s) after the part pages.
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
        or an empty ``report_id``.
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

    figs = [(i, _PartFigures(p, tuple(region_to_dict(r) for r in p.regions))) for i, p in enumerate(parts)]
    ordered = sorted(figs, key=_sort_key)
    summary_kwargs = dict(
        report_id=report_id, title=title, operator=operator, station=station, generated_at=generated_at, signoff=signoff
    )

    # pass 1 counts the summary's pages, so the part table can give each part's page
    probe = _Layout()
    _layout_summary(probe, ordered, {i: 999 for i, _ in figs}, **summary_kwargs)
    layout = _Layout()
    page_of: dict[int, int] = {}
    body = _Layout()
    first_part_page = len(probe.pages) + 1
    for i, fig in ordered:
        if not body.page_is_empty:
            body.new_page()
        page_of[i] = first_part_page + len(body.pages) - 1
        _layout_part(body, fig, images[i], f"part-{len(page_of)}")
    _layout_summary(layout, ordered, page_of, **summary_kwargs)
    if len(layout.pages) != len(probe.pages):  # pragma: no cover - row heights do not depend on page digits
        raise RuntimeError("summary pagination changed between passes")
    layout.pages.extend(body.pages)
    if batch_stats:
        _layout_batch_stats(layout, parts)
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
        _footer(c, n, len(pages), report_id)
        c.showPage()
    c.save()
    return buf.getvalue()


def _extra(c: Canvas, extra: ExtraPage) -> None:
    c.saveState()
    try:
        extra(c, PAGE_SIZE)
    finally:
        c.restoreState()


def write_report(path: str | os.PathLike, parts: Sequence[PartResult], images: Sequence[np.ndarray | None], **kwargs) -> None:
    """Render the report (:func:`render_report`, same keywords) and write it atomically."""
    fsutil.write_bytes_atomic(path, render_report(parts, images, **kwargs))
