"""The last pages of a signed edition: the dispositions it covers, and the sign-off sheet.

Sign-off 1 of a report edition renders the signed edition; every later one is
an incremental update of it (ISO 32000-1, 7.5.6), which may add a signature
field with its widget to an existing page but may neither redraw a page nor
add one without the earlier signatures rating the change beyond form filling
(pyHanko's difference analysis: "Unexpected change to page tree structure").
So the first signed edition ends with a sign-off sheet of :data:`SHEET_PAGES`
pages fixed at that moment, with one box per sign-off in :data:`SHEET_ROWS`
rows a page: the first box is printed with sign-off 1, every later sign-off's
PDF signature gets a visible appearance in the next box
(:func:`slot_appearance`): number, meaning, printed name and role, time, key
fingerprint, record hash, comment, and the dispositions it covers (all of them
counted, those recorded since the sign-off before it listed). The last place
of the sheet says, from the start, what happens to the sign-offs that find no
box (:data:`BOXED` and later): their PDF signatures stay invisible fields and
the archive's ``verify`` checks them like every other.

Page footers of a signed edition print no sign-off state (a later sign-off
could not change them): they point to this sheet.
"""

from __future__ import annotations

import io

from reportlab.lib import colors
from reportlab.lib.utils import simpleSplit
from reportlab.pdfgen.canvas import Canvas

from ..pdfa.document import DocumentInfo, archival_canvas
from ..pdfa.fonts import MONO, SANS, SANS_BOLD, SANS_OBLIQUE
from ..results import DispositionNote, SignOff
from .layout import _FRAME_W, _MARGIN, PAGE_SIZE, _fit_text, printable_text

__all__ = [
    "BOXED",
    "SHEET_OUTLINE",
    "SHEET_PAGES",
    "SHEET_ROWS",
    "legacy_slot_box",
    "sheet_slot",
    "signoff_pages",
    "slot_appearance",
]

#: Pages of the sign-off sheet, and boxes on each; the last place of the sheet holds the note on the limit.
SHEET_PAGES = 2
SHEET_ROWS = 11
#: Sign-offs of one signed edition that get a box (the first ``BOXED``; the sheet's last place is the note).
BOXED = SHEET_PAGES * SHEET_ROWS - 1
#: Outline (bookmark) titles of the sheet's pages: a later sign-off finds its page by them.
SHEET_OUTLINE = tuple(f"Sign-off sheet, page {k + 1} of {SHEET_PAGES}" for k in range(SHEET_PAGES))

_SHEET_TOP = round(PAGE_SIZE[1] - _MARGIN - 44)  # below the sheet's title and explanation
_SLOT_H = 60
_SLOT_PITCH = 64  # 11 rows end 62 pt above the page's edge, clear of the footer (its rule at 52 pt)
_X1, _X2 = round(_MARGIN), round(_MARGIN + _FRAME_W)
_SIZE = 7.0
_ROW = 9.0
_LINE = 8.0  # a box's line pitch

# the boxes of editions signed before the sheet: four on the last page (sign-offs 2-5)
_OLD_SLOTS = 4
_OLD_TOP = PAGE_SIZE[1] - _MARGIN - 62
_OLD_H = (_OLD_TOP - 60 - (_OLD_SLOTS - 1) * 8.0) / _OLD_SLOTS


def sheet_slot(position: int) -> tuple[int, tuple[int, int, int, int]] | None:
    """(sheet page 0.., (x1, y1, x2, y2) in points) of the box of the ``position``-th sign-off; None beyond the sheet.

    Whole points: the signature field's rectangle is stored so.
    """
    if not 1 <= position <= BOXED:
        return None
    page, row = divmod(position - 1, SHEET_ROWS)
    top = _SHEET_TOP - row * _SLOT_PITCH
    return page, (_X1, top - _SLOT_H, _X2, top)


def legacy_slot_box(position: int) -> tuple[int, int, int, int] | None:
    """The box of the ``position``-th sign-off on the last page of an edition signed before the sheet (2-5)."""
    k = position - 2
    if not 0 <= k < _OLD_SLOTS:
        return None
    top = round(_OLD_TOP - k * (_OLD_H + 8.0))
    return (_X1, top - round(_OLD_H), _X2, top)


def _dispositions_rows(notes: tuple[DispositionNote, ...], width: float) -> list[tuple[str, str]]:
    """(font, line) of each disposition, its comment wrapped under it."""
    rows = []
    for d in notes:
        head = f"{d.part_key}: {d.decision.upper()} by {d.signer_name}, {d.decided_at_utc}"
        rows.append((SANS_BOLD, printable_text(head)[0]))
        for line in simpleSplit(printable_text(d.comment)[0] or "(no comment)", SANS, _SIZE, width - 12):
            rows.append((SANS, "    " + line))
    return rows


def _who(signoff: SignOff) -> str:
    name = printable_text(signoff.signer_name)[0]
    role = printable_text(signoff.role)[0]
    return f"{name}, {role}" if role else name


def _draw_entry(c: Canvas, signoff: SignOff, since: tuple[DispositionNote, ...], w: float, h: float) -> None:
    """Sign-off ``signoff`` in a box ``w`` x ``h`` with its lower left corner at the origin."""
    c.setStrokeColor(colors.black)
    c.setFillColor(colors.white)  # covers the empty box drawn beneath it
    c.setLineWidth(1.0)
    c.rect(0.5, 0.5, w - 1, h - 1, stroke=1, fill=1)
    c.setFillColor(colors.black)
    y = h - 10
    c.setFont(SANS_BOLD, 8)
    c.drawString(6, y, f"SIGN-OFF {signoff.signoff_no}")
    meaning = signoff.meaning.upper()
    c.drawString(66, y, meaning)
    x = 66 + c.stringWidth(meaning, SANS_BOLD, 8) + 10
    c.setFont(SANS, 7.5)
    c.drawString(x, y, _fit_text(c, f"{_who(signoff)}  ·  {signoff.signed_at_utc}", SANS, 7.5, w - x - 6))
    y -= 9
    c.setFont(SANS_BOLD, 5.8)
    c.drawString(6, y, "Key")
    c.drawString(244, y, "Record SHA-256")
    c.setFont(MONO, 5.6)
    c.drawString(22, y, signoff.key_fingerprint)
    c.drawString(296, y, _fit_text(c, signoff.record_sha256 or "—", MONO, 5.6, w - 300))
    comment, replaced = printable_text(signoff.comment)
    lines = simpleSplit(comment or "(no comment)", SANS, 6.8, w - 56)
    if len(lines) > 2:  # the whole comment is also the PDF signature's reason, and in the signed record
        lines = [lines[0], _fit_text(c, " ".join(lines[1:]), SANS, 6.8, w - 56)]
    for k, line in enumerate(lines):
        y -= _LINE
        if k == 0:
            c.setFont(SANS_BOLD, 6.8)
            c.drawString(6, y, "Comment")
        c.setFont(SANS_OBLIQUE if not comment or replaced else SANS, 6.8)
        c.drawString(50, y, line)
    _draw_covered(c, signoff, since, w, y - _LINE)


def _draw_covered(c: Canvas, signoff: SignOff, since: tuple[DispositionNote, ...], w: float, y: float) -> None:
    """The dispositions line(s) of a box from baseline ``y`` down: the count covered, those new since the last."""
    total = len(signoff.dispositions)
    c.setFont(SANS_BOLD, 6.8)
    if signoff.dispositions and since == signoff.dispositions:
        head = f"Covers the {total} disposition(s) recorded up to it"
    else:
        head = f"Covers {total} disposition(s); new since the sign-off before it: {len(since) or 'none'}"
    c.drawString(6, y, head)
    rows = [
        f"{d.part_key}: {d.decision.upper()} by {d.signer_name}, {d.decided_at_utc}: {d.comment or '(no comment)'}"
        for d in since
    ]
    room = int((y - 3) // _LINE)  # baselines at least 3 pt above the box's edge
    if len(rows) > room:
        rows = rows[: max(0, room - 1)] + [
            f"… and {len(rows) - max(0, room - 1)} more: the dispositions page or the archive record lists each"
        ]
    c.setFont(SANS, 6.5)
    for line in rows:
        y -= _LINE
        c.drawString(14, y, _fit_text(c, printable_text(line)[0], SANS, 6.5, w - 20))


def _draw_limit_note(c: Canvas, first: int) -> None:
    """The sheet's last place: what becomes of the sign-offs after the last box, said when the sheet is fixed."""
    top = _SHEET_TOP - (SHEET_ROWS - 1) * _SLOT_PITCH
    x1, y1, x2, y2 = _X1, top - _SLOT_H, _X2, top
    c.setFillColor(colors.Color(0.93, 0.93, 0.93))
    c.setStrokeColor(colors.black)
    c.setLineWidth(0.6)
    c.rect(x1, y1, x2 - x1, y2 - y1, stroke=1, fill=1)
    c.setFillColor(colors.black)
    later = first + BOXED
    c.setFont(SANS_BOLD, 8)
    c.drawString(x1 + 6, y2 - 10, f"SIGN-OFFS {later} AND LATER: SEE THE ARCHIVE RECORD")
    c.setFont(SANS, 7)
    for k, text in enumerate(
        (
            f"This sheet was fixed when sign-off {first} signed: a later signature may add its field to a page, but a "
            "new page would break",
            f"the signatures before it. Sign-offs {later} and later therefore carry a PDF signature without a box "
            "(the reader's signature",
            "panel lists each: signer, time, meaning and comment). The archive holds every sign-off record in full; "
            "run `surfinspect verify`",
            "to check each of them and each PDF signature of this edition, and `surfinspect show` to list them.",
        )
    ):
        c.drawString(x1 + 6, y2 - 22 - k * 9, text)


def signoff_pages(signoff: SignOff):
    """Extra pages (``render_report(extra_pages=...)``) of the first signed edition: dispositions, then the sheet."""

    def dispositions_page(c: Canvas, size, rows, first: bool) -> None:
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

    rows = _dispositions_rows(signoff.dispositions, _FRAME_W - 8)
    per_page = int((PAGE_SIZE[1] - 2 * _MARGIN - 80) // (_ROW + 1))
    chunks = [rows[i : i + per_page] for i in range(0, len(rows), per_page)] or [[]]
    pages = [
        (lambda c, size, chunk=chunk, k=k: dispositions_page(c, size, chunk, k == 0)) for k, chunk in enumerate(chunks)
    ]
    return pages + [(lambda c, size, k=k: _sheet_page(c, size, signoff, k)) for k in range(SHEET_PAGES)]


def _sheet_page(c: Canvas, size, signoff: SignOff, k: int) -> None:
    """Page ``k`` of the sign-off sheet: sign-off 1 of the edition in the first box, the others open."""
    name = f"signoff-sheet-{k + 1}"
    c.bookmarkPage(name, fit="Fit")
    c.addOutlineEntry(SHEET_OUTLINE[k], name, level=0)
    first = signoff.signoff_no
    y = size[1] - _MARGIN - 14
    c.setFont(SANS_BOLD, 12)
    c.drawString(_MARGIN, y, "Sign-off sheet" + ("" if k == 0 else " (continued)"))
    c.setFont(SANS, 7.5)
    c.drawRightString(_MARGIN + _FRAME_W, y, f"page {k + 1} of {SHEET_PAGES}")
    for i, text in enumerate(
        (
            f"Every sign-off of this edition in order: sign-off {first} printed when it signed the edition, each "
            "later one added as an incremental update",
            "whose PDF signature draws its box. Read the sign-off state here: no other page of this edition prints "
            "one, since a later sign-off cannot change them.",
        )
    ):
        c.drawString(_MARGIN, y - 13 - i * 9, text)
    for row in range(SHEET_ROWS):
        position = k * SHEET_ROWS + row + 1
        if position > BOXED:
            _draw_limit_note(c, first)
        elif position == 1:
            x1, y1, x2, y2 = sheet_slot(1)[1]
            c.saveState()
            c.translate(x1, y1)
            _draw_entry(c, signoff, signoff.dispositions, x2 - x1, y2 - y1)
            c.restoreState()
        else:
            _draw_open(c, position, first + position - 1)


def _draw_open(c: Canvas, position: int, number: int) -> None:
    """The empty box of the ``position``-th sign-off (numbered ``number``), which its signature appearance fills."""
    x1, y1, x2, y2 = sheet_slot(position)[1]
    c.setStrokeColor(colors.Color(0.6, 0.6, 0.6))
    c.setDash([2, 3])
    c.setLineWidth(0.6)
    c.rect(x1 + 2, y1 + 2, x2 - x1 - 4, y2 - y1 - 4, stroke=1, fill=0)
    c.setDash([])
    c.setFillColor(colors.Color(0.45, 0.45, 0.45))
    c.setFont(SANS_BOLD, 8)
    c.drawString(x1 + 6, y2 - 10, f"SIGN-OFF {number}")
    c.setFont(SANS, 7)
    c.drawString(x1 + 66, y2 - 10, "kept for this sign-off: the appearance of its PDF signature fills the box")
    c.setFillColor(colors.black)


def slot_appearance(signoff: SignOff, since: tuple[DispositionNote, ...], box: tuple[int, int, int, int]) -> bytes:
    """A one-page PDF the size of ``box``: sign-off ``signoff``'s appearance on the sheet.

    ``since`` are the dispositions recorded after the sign-off before it. What does not fit is counted.
    """
    x1, y1, x2, y2 = box
    w, h = x2 - x1, y2 - y1
    buf = io.BytesIO()
    c = archival_canvas(buf, DocumentInfo(title=f"sign-off {signoff.signoff_no}"), pagesize=(w, h))
    _draw_entry(c, signoff, since, w, h)
    c.showPage()
    c.save()
    return buf.getvalue()
