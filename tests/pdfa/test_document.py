"""Tests for surfinspect.pdfa: the archival canvas and finishing step, checked clause by clause
(tests/pdfa_checks.py) and read back with pikepdf, an XMP parser independent of our template."""

from __future__ import annotations

import io
from datetime import datetime, timezone

import pikepdf
import pytest
from pdfa_checks import assert_pdfa_2b, pdfa_problems, verapdf_verdict
from pypdf import PdfReader
from reportlab.pdfgen.canvas import Canvas

from surfinspect.pdfa.document import DocumentInfo, archival_canvas, finish_archival, srgb_profile
from surfinspect.pdfa.fonts import MONO, SANS, SANS_BOLD, SANS_OBLIQUE

WHEN = datetime(2031, 4, 2, 9, 0, tzinfo=timezone.utc)
INFO = DocumentInfo(
    title="Surface lay inspection report A-1 <&>",  # XML specials must survive the XMP
    subject="surfinspect report A-1",
    author="Ana Łukasiewicz",
    keywords="report A-1; generated 2031-04-02T09:00:00Z",
    created=WHEN,
)


def _document(info: DocumentInfo = INFO, text: str = "Lay 90.00° ± 0.12° — accepted · Müller") -> bytes:
    buf = io.BytesIO()
    c = archival_canvas(buf, info)
    for y, face in zip((800, 780, 760, 740), (SANS, SANS_BOLD, SANS_OBLIQUE, MONO)):
        c.setFont(face, 10)
        c.drawString(40, y, text)
    c.setFillColorRGB(0.8, 0.1, 0.1, 0.4)  # transparency is allowed in PDF/A-2 (6.4) with an output intent
    c.rect(40, 600, 100, 50, fill=1, stroke=0)
    c.showPage()
    c.save()
    return finish_archival(buf.getvalue(), info)


def test_a_finished_document_passes_every_checked_clause():
    assert_pdfa_2b(_document())


def test_the_checks_see_what_plain_reportlab_output_lacks():
    """The checks must be able to fail: reportlab's own output (base fonts, no XMP, no intent) fails each."""
    buf = io.BytesIO()
    c = Canvas(buf)
    c.setFont("Helvetica", 10)
    c.drawString(40, 800, "not archival")
    c.showPage()
    c.save()
    problems = "\n".join(pdfa_problems(buf.getvalue()))
    assert "6.2.11.4: page 1: font /Helvetica is not embedded" in problems
    assert "6.6.2.1: no XMP metadata stream" in problems
    assert "6.2.3: 0 PDF/A output intents" in problems


def test_xmp_and_information_dictionary_say_the_same_read_back_by_pikepdf():
    with pikepdf.open(io.BytesIO(_document())) as pdf:
        meta = pdf.open_metadata(set_pikepdf_as_editor=False, update_docinfo=False)
        assert meta["pdfaid:part"] == "2" and meta["pdfaid:conformance"] == "B"
        assert meta["dc:title"] == INFO.title == str(pdf.docinfo["/Title"])
        assert meta["dc:creator"] == [INFO.author] and str(pdf.docinfo["/Author"]) == INFO.author
        assert meta["dc:description"] == INFO.subject and meta["pdf:Keywords"] == INFO.keywords
        assert meta["xmp:CreateDate"] == "2031-04-02T09:00:00+00:00" == meta["xmp:ModifyDate"]
        assert str(pdf.docinfo["/CreationDate"]) == "D:20310402090000+00'00'"
        assert "/Trapped" not in pdf.docinfo and "/Encrypt" not in pdf.trailer
        (intent,) = pdf.Root.OutputIntents
        assert intent.S == "/GTS_PDFA1" and str(intent.OutputConditionIdentifier) == "sRGB IEC61966-2.1"
        assert intent.DestOutputProfile.read_bytes() == srgb_profile()


def test_same_inputs_same_bytes_and_no_dates_without_a_time():
    assert _document() == _document()
    other = DocumentInfo(title="t", subject="other")
    undated = _document(other)
    assert undated == _document(other) != _document()
    with pikepdf.open(io.BytesIO(undated)) as pdf:
        assert "/CreationDate" not in pdf.docinfo and "/ModDate" not in pdf.docinfo
        assert "xmp:CreateDate" not in pdf.open_metadata(set_pikepdf_as_editor=False, update_docinfo=False)
    assert_pdfa_2b(undated)


def test_every_font_is_an_embedded_truetype_subset_and_the_text_reads_back():
    data = _document()
    with pikepdf.open(io.BytesIO(data)) as pdf:
        fonts = list(pdf.pages[0].Resources.Font.values())
        assert {str(f.BaseFont).split("+")[1] for f in fonts} == {
            "LiberationSans",
            "LiberationSans-Bold",
            "LiberationSans-Italic",
            "LiberationMono",
        }
        assert all(f.Subtype == "/TrueType" and "/FontFile2" in f.FontDescriptor for f in fonts)
    text = PdfReader(io.BytesIO(data)).pages[0].extract_text()
    assert text.count("Lay 90.00° ± 0.12° — accepted · Müller") == 4


def test_a_character_no_face_has_prints_as_a_question_mark_never_as_notdef():
    data = _document(text="検査 ok \x07")
    assert_pdfa_2b(data)  # 6.2.11.8: no .notdef glyph shown
    assert PdfReader(io.BytesIO(data)).pages[0].extract_text().count("?? ok ?") == 4


def test_control_characters_in_the_metadata_do_not_break_the_xmp():
    data = _document(DocumentInfo(title="bad\x00title\x1b", author="x"))
    assert_pdfa_2b(data)
    with pikepdf.open(io.BytesIO(data)) as pdf:
        assert pdf.open_metadata()["dc:title"] == "bad\ufffdtitle\ufffd" == str(pdf.docinfo.Title)


def test_verapdf_verdict_where_a_validator_is_installed():
    verdict = verapdf_verdict(_document())
    if verdict is None:
        pytest.skip(
            "no PDF/A validator on this machine: veraPDF is not packaged for Debian, and the PDFBox preflight "
            "module Debian could offer checks PDF/A-1b only; the structural checks of tests/pdfa_checks.py stand in"
        )
    assert verdict is True


#: The 14 standard fonts of PDF (ISO 32000-1, 9.6.2.2): never embedded by reportlab, so never PDF/A.
_BASE_FONTS = {
    f"{family}{style}"
    for family, styles in (
        ("Helvetica", ("", "-Bold", "-Oblique", "-BoldOblique")),
        ("Courier", ("", "-Bold", "-Oblique", "-BoldOblique")),
        ("Times", ("-Roman", "-Bold", "-Italic", "-BoldItalic")),
    )
    for style in styles
} | {"Symbol", "ZapfDingbats"}


def test_no_module_names_a_standard_pdf_font():
    """A base-font name written into new code (or brought in by a merge) would make that text non-archival."""
    import ast
    import re
    from pathlib import Path

    package = Path(__file__).resolve().parents[2] / "surfinspect"
    found = []
    for path in sorted(package.rglob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Constant) and isinstance(node.value, str):
                named = _BASE_FONTS & ({node.value} | set(re.findall(r"name=['\"]?([\w-]+)", node.value)))
                if named:
                    found.append(f"{path.relative_to(package.parent)}:{node.lineno}: {sorted(named)}")
    assert not found, "use surfinspect.pdfa.fonts.SANS, SANS_BOLD, SANS_OBLIQUE or MONO:\n" + "\n".join(found)


def test_the_checks_see_a_base_font_in_an_annotations_appearance():
    """A visible signature draws its text in an appearance stream: its fonts must be embedded as well."""
    with pikepdf.open(io.BytesIO(_document())) as pdf:
        font = pdf.make_indirect(
            pikepdf.Dictionary(Type=pikepdf.Name.Font, Subtype=pikepdf.Name.Type1, BaseFont=pikepdf.Name.Helvetica)
        )
        resources = pikepdf.Dictionary(Font=pikepdf.Dictionary(F9=font))
        look = pdf.make_stream(
            b"BT /F9 8 Tf (x) Tj ET", Resources=resources, Subtype=pikepdf.Name.Form, BBox=[0, 0, 9, 9]
        )
        annot = pikepdf.Dictionary(
            Type=pikepdf.Name.Annot, Subtype=pikepdf.Name.Square, Rect=[0, 0, 9, 9], F=4, AP=pikepdf.Dictionary(N=look)
        )
        pdf.pages[0].obj.Annots = pikepdf.Array([pdf.make_indirect(annot)])
        out = io.BytesIO()
        pdf.save(out)
    assert pdfa_problems(out.getvalue()) == ["6.2.11.4: page 1: font /Helvetica is not embedded"]
