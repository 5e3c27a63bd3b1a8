"""The last pages of a signed edition: the dispositions it covers, and boxes for the later sign-offs.

Sign-off 1 renders the signed edition; every later sign-off is an incremental
update of it (ISO 32000-1, 7.5.6), which may add a signature field but not
redraw a page without breaking the earlier signatures. So the first signed
edition ends with a page of empty boxes, one per later sign-off
(:data:`LATER_SLOTS`), and a later sign-off's PDF signature gets a visible
appearance in its box (:func:`slot_appearance`): the signer's printed name,
meaning, time, comment and fingerprint, and the dispositions recorded since
the sign-off before it. A reader sees them on the page; a validator sees a
signature field added, which is what a later signature may add.
"""

from __future__ import annotations

import io

from reportlab.lib import colors
from reportlab.lib.utils import simpleSplit
from reportlab.pdfgen.canvas import Canvas

from ..pdfa.document import DocumentInfo, archival_canvas
from ..pdfa.fonts import SANS, SANS_BOLD, SANS_OBLIQUE
from ..results import DispositionNote, SignOff
from .layout import _FRAME_W, _MARGIN, PAGE_SIZE, _fit_text, printable_text
from .signoff import _signoff_rows

__all__ = ["LATER_SLOTS", "slot_box", "signoff_pages", "slot_appearance"]

#: Later sign-offs that get a box on the last page (sign-offs 2 .. LATER_SLOTS + 1).
LATER_SLOTS = 4
_TOP = PAGE_SIZE[1] - _MARGIN - 62  # below the page's title and explanation
_SLOT_GAP = 8.0
_SLOT_H = (_TOP - 60 - (LATER_SLOTS - 1) * _SLOT_GAP) / LATER_SLOTS
_ROW = 9.0
_BOX_LEAVES_OUT = ("Covers report",)  # the same unsigned report for every sign-off: printed in sign-off 1's block
_SIZE = 7.0


def slot_box(signoff_no: int) -> tuple[float, float, float, float] | None:
    """(x1, y1, x2, y2) in points of sign-off ``signoff_no``'s box on the last page; None without one."""
    k = signoff_no - 2
    if not 0 <= k < LATER_SLOTS:
        return None
    top = round(_TOP - k * (_SLOT_H + _SLOT_GAP))  # whole points: the signature field's rectangle is stored so
    return (round(_MARGIN), top - round(_SLOT_H), round(_MARGIN + _FRAME_W), top)


def _dispositions_rows(notes: tuple[DispositionNote, ...], width: float) -> list[tuple[str, str]]:
    """(font, line) of each disposition, its comment wrapped under it."""
    rows = []
    for d in notes:
        head = f"{d.part_key}: {d.decision.upper()} by {d.signer_name}, {d.decided_at_utc}"
        rows.append((SANS_BOLD, printable_text(head)[0]))
        for line in simpleSplit(printable_text(d.comment)[0] or "(no comment)", SANS, _SIZE, width - 12):
            rows.append((SANS, "    " + line))
    return rows


def signoff_pages(signoff: SignOff):
    """Extra pages (``render_report(extra_pages=...)``) of the first signed edition: dispositions, then the boxes."""

    def dispositions_page(c: Canvas, size, rows, first: bool, last: bool) -> None:
        y = size[1] - _MARGIN - 14
        c.setFont(SANS_BOLD, 12)
        c.drawString(_MARGIN, y, "Dispositions" + ("" if first else " (continued)"))
        c.setFont(SANS, 7.5)
        y -= 14
        if first:
            c.drawString(_MARGIN, y, f"What is to become of each doubtful part, as recorded up to sign-off "
                                     f"{signoff.signoff_no} ({len(signoff.dispositions)} disposition(s)); "
                                     "the archive's verify command checks each record.")  # fmt: skip
            y -= 16
        if not rows:
            c.setFont(SANS_OBLIQUE, 8)
            c.drawString(_MARGIN + 8, y, "No disposition was recorded before this sign-off.")
        for font, line in rows:
            c.setFont(font, _SIZE + 0.5)
            c.drawString(_MARGIN + 8, y, line)
            y -= _ROW + 1

    def slots_page(c: Canvas, size) -> None:
        y = size[1] - _MARGIN - 14
        c.setFont(SANS_BOLD, 12)
        c.drawString(_MARGIN, y, "Later sign-offs")
        c.setFont(SANS, 7.5)
        for k, text in enumerate(
            (
                "Each later sign-off is added to this edition as an incremental update with its own PDF signature; "
                "its box below then shows",
                "who signed, with what meaning, when, the comment, and the dispositions recorded since the sign-off "
                f"before it. Sign-offs after the {LATER_SLOTS + 1}th",
                "carry a PDF signature without a box (the signature panel of the PDF reader and the archive list them).",
            )
        ):
            c.drawString(_MARGIN, y - 14 - k * 10, text)
        for n in range(2, LATER_SLOTS + 2):
            x1, y1, x2, y2 = slot_box(n)
            c.setStrokeColor(colors.Color(0.6, 0.6, 0.6))
            c.setDash([2, 3])
            c.setLineWidth(0.6)
            c.rect(x1 + 3, y1 + 3, x2 - x1 - 6, y2 - y1 - 6, stroke=1, fill=0)  # inside the box a signature fills
            c.setDash([])
            c.setFillColor(colors.Color(0.45, 0.45, 0.45))
            c.setFont(SANS_BOLD, 9)
            c.drawString(x1 + 8, y2 - 15, f"SIGN-OFF {n}")
            c.setFont(SANS, 7)
            c.drawString(x1 + 80, y2 - 15, "not signed yet")
            c.setFillColor(colors.black)

    rows = _dispositions_rows(signoff.dispositions, _FRAME_W - 8)
    per_page = int((PAGE_SIZE[1] - 2 * _MARGIN - 80) // (_ROW + 1))
    chunks = [rows[i : i + per_page] for i in range(0, len(rows), per_page)] or [[]]
    pages = [
        (lambda c, size, chunk=chunk, k=k: dispositions_page(c, size, chunk, k == 0, k == len(chunks) - 1))
        for k, chunk in enumerate(chunks)
    ]
    return pages + [slots_page]


def slot_appearance(signoff: SignOff, since: tuple[DispositionNote, ...]) -> bytes:
    """A one-page PDF the size of sign-off ``signoff.signoff_no``'s box: its appearance on the last page.

    ``since`` are the dispositions recorded after the sign-off before it. What does not fit is counted.
    """
    x1, y1, x2, y2 = slot_box(signoff.signoff_no)
    w, h = x2 - x1, y2 - y1
    buf = io.BytesIO()
    c = archival_canvas(buf, DocumentInfo(title=f"sign-off {signoff.signoff_no}"), pagesize=(w, h))
    c.setStrokeColor(colors.black)
    c.setFillColor(colors.white)  # covers the empty box drawn beneath it
    c.setLineWidth(1.2)
    c.rect(0.6, 0.6, w - 1.2, h - 1.2, stroke=1, fill=1)
    c.setFillColor(colors.black)
    c.setFont(SANS_BOLD, 9)
    c.drawString(8, h - 15, f"SIGN-OFF {signoff.signoff_no}")
    c.setFont(SANS, 7)
    c.drawString(
        80, h - 15, "Signed electronically (PDF signature of this box; the archive's verify checks the record)."
    )
    y = h - 28
    for label, value, font in _signoff_rows(signoff):  # the sign-off block's own rows, less the report's hash
        if label in _BOX_LEAVES_OUT:
            continue
        c.setFont(SANS_BOLD, _SIZE)
        c.drawString(8, y, label)
        c.setFont(font, _SIZE)
        c.drawString(84, y, _fit_text(c, str(value), font, _SIZE, w - 92))
        y -= _ROW
    c.setFont(SANS_BOLD, _SIZE)
    c.drawString(8, y, f"Dispositions since sign-off {signoff.signoff_no - 1}: {len(since) or 'none'}")
    y -= _ROW
    rows = _dispositions_rows(since, w - 16)
    room = max(0, int((y - 6) // _ROW))
    if len(rows) > room:
        shown = rows[: max(0, room - 1)]
        left = len(since) - sum(1 for f, _ in shown if f == SANS_BOLD)
        shown.append((SANS_OBLIQUE, f"… and {left} more disposition(s): the archive holds every record"))
        rows = shown
    for font, line in rows:
        c.setFont(font, _SIZE)
        c.drawString(14, y, line)
        y -= _ROW
    c.showPage()
    c.save()
    return buf.getvalue()
