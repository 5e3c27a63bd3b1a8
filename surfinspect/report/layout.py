"""Page geometry, paragraph styles, fonts, tables and verdict badges of the PDF report: the pieces every page uses."""

from __future__ import annotations

from decimal import Decimal
from typing import Callable, Iterable

from reportlab.lib import colors
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle
from reportlab.pdfgen.canvas import Canvas
from reportlab.platypus import Flowable, Paragraph, Table, TableStyle

from ..formatting import format_fixed
from ..pdfa.fonts import SANS, SANS_BOLD, printable
from ..results import (
    PartVerdict,
    RegionVerdict,
)
from .scene import PART_LOOKS, RGB

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

_BODY = ParagraphStyle("body", fontName=SANS, fontSize=8, leading=10)
_SMALL = ParagraphStyle("small", fontName=SANS, fontSize=7, leading=8.6)
_CELL = ParagraphStyle("cell", fontName=SANS, fontSize=7.5, leading=9)
_CELL_BOLD = ParagraphStyle("cellb", parent=_CELL, fontName=SANS_BOLD)


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
    base = [("FONT", (0, 0), (-1, -1), SANS, 7.5)]
    if repeat_rows:
        base += [
            ("FONT", (0, 0), (-1, repeat_rows - 1), SANS_BOLD, 7.5),
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
    c.setFont(SANS_BOLD, size)
    c.drawString(x + h, y + h / 2 - size * 0.35, label or word)
    c.restoreState()


def _fit_text(c: Canvas, text: str, font: str, size: float, width: float) -> str:
    if c.stringWidth(text, font, size) <= width:
        return text
    while text and c.stringWidth(text + "…", font, size) > width:
        text = text[:-1]
    return text + "…"


def _unique(values: Iterable) -> list:
    seen: dict = {}
    for v in values:
        seen.setdefault(v, None)
    return list(seen)


def _titled_box(c: Canvas, y: float, height: float, title: str, *, line_width: float, title_size: float) -> None:
    c.setStrokeColor(colors.black)
    c.setLineWidth(line_width)
    c.rect(_MARGIN, y - height, _FRAME_W, height, stroke=1, fill=0)
    c.setFillColor(colors.black)
    c.setFont(SANS_BOLD, title_size)
    c.drawString(_MARGIN + 8, y - 15, title)


REPLACED_CHARACTERS_NOTE = "(characters the report's font lacks shown as ?; the signed record keeps the exact text)"


def printable_text(text: str) -> tuple[str, bool]:
    """``text`` with every character the report's fonts cannot show replaced by '?'; and whether any was.

    The report's faces (Liberation Sans, :mod:`surfinspect.pdfa.fonts`) hold
    the Latin, Greek and Cyrillic alphabets and common symbols; any other
    character (CJK, most symbols) and any control character prints as '?'.
    The fonts do that by themselves for every text; this function tells the
    caller that it happened, so the page can say so.
    """
    return printable(text)
