"""The sign-off block: who signed, with what meaning and when, or that nobody has yet."""

from __future__ import annotations

from reportlab.lib.utils import simpleSplit
from reportlab.pdfgen.canvas import Canvas

from ..pdfa.fonts import MONO, SANS, SANS_BOLD, SANS_OBLIQUE
from ..results import SIGNOFF_MEANINGS, SignOff
from .layout import _FRAME_W, _MARGIN, REPLACED_CHARACTERS_NOTE, _fit_text, _titled_box, printable_text
from .signoff_page import SHEET_PAGES

_SIGNOFF_LINE = 14.5
_SIGNOFF_VALUE_X = 90.0
_SIGNOFF_VALUE_W = _FRAME_W - _SIGNOFF_VALUE_X - 10
_SIGNOFF_TEXT_SIZE = 7.5


def _signoff_rows(signoff: SignOff | None) -> list[tuple[str, str | None, str]]:
    """(label, value or None for an empty line, font) of the sign-off block; long comments wrap."""
    if signoff is None:
        return [
            (label, None, SANS) for label in ("Name (printed)", "Meaning", "Time (UTC)", "Key fingerprint", "Signature")
        ]
    name, name_replaced = printable_text(signoff.signer_name)
    comment, comment_replaced = printable_text(signoff.comment)
    rows = [
        ("Name (printed)", name, SANS_BOLD),
        *([("Role", printable_text(signoff.role)[0], SANS)] if signoff.role else []),
        ("Meaning", signoff.meaning.upper(), SANS_BOLD),
        ("Time (UTC)", signoff.signed_at_utc, SANS),
        ("Key fingerprint", signoff.key_fingerprint, MONO),
        ("Record SHA-256", signoff.record_sha256 or "—", MONO),
        ("Covers report", f"SHA-256 {signoff.report_sha256}" if signoff.report_sha256 else "—", MONO),
    ]
    if signoff.chain_head:
        rows.append(("Audit chain head", f"event {signoff.chain_head}", MONO))
    if comment:
        for k, line in enumerate(simpleSplit(comment, SANS, _SIGNOFF_TEXT_SIZE, _SIGNOFF_VALUE_W)):
            rows.append(("Comment" if k == 0 else "", line, SANS))
    if name_replaced or comment_replaced:
        rows.append(("", REPLACED_CHARACTERS_NOTE, SANS_OBLIQUE))
    return rows


def _signoff_height(signoff: SignOff | None) -> float:
    return 26.0 + len(_signoff_rows(signoff)) * _SIGNOFF_LINE


def _signoff_block(c: Canvas, y: float, signoff: SignOff | None) -> None:
    c.saveState()
    height = _signoff_height(signoff)
    title = "SIGN-OFF" if signoff is None else f"SIGN-OFF {signoff.signoff_no}"  # a fact of this edition, not a state
    _titled_box(c, y, height, title, line_width=1.2, title_size=10)
    if signoff is None:
        c.setFont(SANS_BOLD, 8.5)
        c.drawString(_MARGIN + 70, y - 15, "NOT SIGNED")
        c.setFont(SANS, 7)
        c.drawString(_MARGIN + 128, y - 15, "this report carries no sign-off yet; the lines below are left empty.")
    else:
        c.setFont(SANS, 7)
        c.drawString(
            _MARGIN + 92,
            y - 15,
            f"Sign-off {signoff.signoff_no}, as it signed this edition; every sign-off, later ones too, is on the "
            "sign-off sheet at the end.",
        )
    line_y = y - 32
    for label, value, font in _signoff_rows(signoff):
        c.setFont(SANS_BOLD, _SIGNOFF_TEXT_SIZE)
        c.drawString(_MARGIN + 8, line_y, label)
        if value is None:
            c.setLineWidth(0.5)
            c.setDash([1, 2])
            c.line(_MARGIN + _SIGNOFF_VALUE_X, line_y - 1, _MARGIN + _FRAME_W - 10, line_y - 1)
            c.setDash([])
            if label == "Meaning":
                c.setFont(SANS, 6.5)
                c.drawString(_MARGIN + _FRAME_W - 180, line_y + 1, " / ".join(SIGNOFF_MEANINGS))
        else:
            size = 9 if label == "Meaning" else _SIGNOFF_TEXT_SIZE
            c.setFont(font, size)
            c.drawString(_MARGIN + _SIGNOFF_VALUE_X, line_y, _fit_text(c, str(value), font, size, _SIGNOFF_VALUE_W))
        line_y -= _SIGNOFF_LINE
    c.restoreState()


def signoff_state(signoff: SignOff | None, pages: int | None = None) -> str:
    """What the footer of every page says of the sign-offs, in one line.

    An unsigned report says so (it is never signed itself: a sign-off renders a signed edition). A signed
    edition prints no state, which a later sign-off (an incremental update) could not redraw: it points to the
    sign-off sheet, the last :data:`.signoff_page.SHEET_PAGES` of its ``pages``.
    """
    if signoff is None:
        return "NOT SIGNED"
    if pages is None:
        return "Signed edition: every sign-off is on the sign-off sheet at the end"
    return f"Signed edition: every sign-off is on the sign-off sheet, pages {pages - SHEET_PAGES + 1}-{pages}"
