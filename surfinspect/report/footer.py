"""The footer of every page: report id, where the sign-offs are, page n of N and the caution."""

from __future__ import annotations

from reportlab.lib import colors
from reportlab.pdfgen.canvas import Canvas

from ..pdfa.fonts import SANS, SANS_BOLD, SANS_OBLIQUE
from ..results import (
    CAUTION,
    SignOff,
)
from .layout import _FRAME_W, _MARGIN, PAGE_SIZE, _fit_text
from .signoff import signoff_state


def _footer(c: Canvas, n: int, total: int, report_id: str, signoff: SignOff | None) -> None:
    """Report id, where the sign-offs are (or NOT SIGNED) and page n of N on every page, and the caution under them."""
    c.saveState()
    c.setStrokeColor(colors.Color(0.4, 0.4, 0.4))
    c.setLineWidth(0.5)
    c.line(_MARGIN, _MARGIN + 16, PAGE_SIZE[0] - _MARGIN, _MARGIN + 16)
    c.setFillColor(colors.black)
    c.setFont(SANS, 7.5)
    left = f"Report {report_id}"
    right = f"Page {n} of {total}"
    c.drawString(_MARGIN, _MARGIN + 6, left)
    c.drawRightString(PAGE_SIZE[0] - _MARGIN, _MARGIN + 6, right)
    # a page printed or filed on its own still says whether the report it belongs to was signed
    room = _FRAME_W - 2 * max(c.stringWidth(left, SANS, 7.5), c.stringWidth(right, SANS, 7.5)) - 24
    c.setFont(SANS_BOLD, 7.5)
    c.drawCentredString(
        PAGE_SIZE[0] / 2, _MARGIN + 6, _fit_text(c, signoff_state(signoff, total), SANS_BOLD, 7.5, room)
    )
    c.setFont(SANS_OBLIQUE, 6.8)
    c.drawCentredString(PAGE_SIZE[0] / 2, _MARGIN - 4, CAUTION)
    c.restoreState()
