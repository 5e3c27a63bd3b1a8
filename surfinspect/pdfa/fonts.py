"""The fonts of every PDF surfinspect writes: Liberation Sans and Mono, shipped in ``data/`` and embedded.

PDF/A (ISO 19005-2, 6.2.11.4) wants every font embedded, so the report no
longer names the PDF standard fonts (Helvetica, Courier), which readers
substitute from their own. Liberation Sans has the advance widths of Arial,
and Arial those of Helvetica; Liberation Mono those of Courier New. Text set
in them takes the room it took before, so the layout keeps its look.

reportlab embeds a subset of each face holding only the glyphs drawn
(:class:`reportlab.pdfbase.ttfonts.TTFont`). A character the face has no
glyph for would be drawn with the ``.notdef`` glyph, an empty box, which
PDF/A forbids (6.2.11.8); :class:`_ArchivalFont` draws and measures '?'
in its place instead, so no text can produce one, whatever its source.
"""

from __future__ import annotations

import unicodedata
from importlib import resources

from reportlab.lib.fonts import addMapping
from reportlab.pdfbase import pdfmetrics
from reportlab.pdfbase.ttfonts import TTFont

__all__ = ["SANS", "SANS_BOLD", "SANS_OBLIQUE", "MONO", "REPLACEMENT", "printable", "register_fonts"]

#: reportlab names of the shipped faces (the PDF's /BaseFont comes from the font file).
SANS = "LiberationSans"
SANS_BOLD = "LiberationSans-Bold"
SANS_OBLIQUE = "LiberationSans-Italic"
MONO = "LiberationMono"

#: Shown in place of a character a face has no glyph for.
REPLACEMENT = "?"

_FILES = {
    SANS: "LiberationSans-Regular.ttf",
    SANS_BOLD: "LiberationSans-Bold.ttf",
    SANS_OBLIQUE: "LiberationSans-Italic.ttf",
    MONO: "LiberationMono-Regular.ttf",
}


class _ArchivalFont(TTFont):
    """A TrueType font that shows :data:`REPLACEMENT` for every character it has no glyph for."""

    def shown(self, text: str | bytes) -> str:
        """``text`` as this face draws it: characters without a glyph, and control characters, as '?'."""
        if isinstance(text, bytes):
            text = text.decode("utf-8")
        glyphs = self.face.charToGlyph
        return "".join(ch if has_glyph(glyphs, ch) else REPLACEMENT for ch in text)

    def splitString(self, text, doc, encoding="utf-8"):  # noqa: N802 - reportlab's name
        return super().splitString(self.shown(text), doc, encoding)

    def stringWidth(self, text, size, encoding="utf8"):  # noqa: N802 - reportlab's name
        return super().stringWidth(self.shown(text), size, encoding)


def has_glyph(glyphs: dict[int, int], ch: str) -> bool:
    """Whether a face with the character map ``glyphs`` draws ``ch`` (control characters never)."""
    if unicodedata.category(ch).startswith("C"):
        return False
    code = 32 if ch == "\xa0" else ord(ch)  # reportlab sets a no-break space as a space
    return glyphs.get(code, 0) != 0


def register_fonts() -> None:
    """Register the shipped faces with reportlab (once per process), with ``<b>``/``<i>`` mapped for paragraphs."""
    if all(name in pdfmetrics.getRegisteredFontNames() for name in _FILES):
        return
    folder = resources.files(__package__) / "data"
    for name, file in _FILES.items():
        with resources.as_file(folder / file) as path:
            pdfmetrics.registerFont(_ArchivalFont(name, str(path)))
    # Paragraph markup: <b> and <i> within the sans family; bold italic is not shipped and falls back to bold
    for bold, italic, name in ((0, 0, SANS), (1, 0, SANS_BOLD), (0, 1, SANS_OBLIQUE), (1, 1, SANS_BOLD)):
        addMapping(SANS, bold, italic, name)
    for bold in (0, 1):
        for italic in (0, 1):
            addMapping(MONO, bold, italic, MONO)


def font(name: str) -> _ArchivalFont:
    """The registered face called ``name`` (one of :data:`SANS`, :data:`SANS_BOLD`, :data:`SANS_OBLIQUE`, :data:`MONO`)."""
    register_fonts()
    if name not in _FILES:
        raise KeyError(f"font: unknown (got {name!r}, allowed {', '.join(_FILES)})")
    return pdfmetrics.getFont(name)


def printable(text: str, names: tuple[str, ...] = (SANS, SANS_BOLD, SANS_OBLIQUE)) -> tuple[str, bool]:
    """``text`` with every character one of the faces ``names`` cannot show replaced by '?'; and whether any was."""
    maps = [font(n).face.charToGlyph for n in names]
    out = "".join(ch if all(has_glyph(m, ch) for m in maps) else REPLACEMENT for ch in text)
    return out, out != text


register_fonts()
