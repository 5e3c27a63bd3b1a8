"""Archival PDF documents (PDF/A-2b, ISO 19005-2:2011): the canvas every surfinspect PDF is drawn on,
and the finishing step that makes reportlab's output conform.

reportlab (the open-source toolkit) writes no PDF/A by itself: it has no
output intent and no XMP metadata stream. So a document is drawn on
:func:`archival_canvas` (embedded fonts only, see :mod:`.fonts`; fixed dates
and document id) and then :func:`finish_archival` rewrites it with pikepdf
(qpdf), adding what PDF/A-2b requires at document level:

- an output intent (``/GTS_PDFA1``) with the sRGB IEC 61966-2.1 ICC profile
  shipped in ``data/`` (6.2.3), so that the DeviceRGB and DeviceGray colours
  the pages use are defined (6.2.4.3);
- an XMP metadata stream, uncompressed (6.6.2.1), with ``pdfaid:part`` 2 and
  ``pdfaid:conformance`` B (6.6.4) and the title, author, subject, keywords,
  creator tool, producer and dates that the document information dictionary
  carries, in the equivalent XMP properties (6.6.3, ISO 16684-1 / XMP);
- the document information dictionary rewritten from the same values, so the
  two cannot disagree.

Nothing else is changed: no encryption is added (6.1.3 forbids it), and
nothing refers outside the file. The output is deterministic: the dates come
from the caller (no date at all when it gives none), the /ID from qpdf's
content hash, the XMP text from a fixed template.

References
----------
ISO 19005-2:2011, Document management — Electronic document file format for
long-term preservation — Part 2: Use of ISO 32000-1 (PDF/A-2).
ISO 32000-1:2008, 14.3.2 (metadata streams), 14.11.5 (output intents).
"""

from __future__ import annotations

import io
from dataclasses import dataclass
from datetime import datetime, timezone
from importlib import resources
from xml.sax.saxutils import escape

import pikepdf
import reportlab
from reportlab.lib.pagesizes import A4
from reportlab.pdfgen.canvas import Canvas

from .._version import __version__
from . import fonts

__all__ = ["DocumentInfo", "archival_canvas", "finish_archival", "srgb_profile", "SRGB_CONDITION"]

#: The ICC profile's description, used as the output condition identifier (ISO 32000-1, 14.11.5).
SRGB_CONDITION = "sRGB IEC61966-2.1"
PDFA_PART = 2
PDFA_CONFORMANCE = "B"


@dataclass(frozen=True)
class DocumentInfo:
    """What a document says about itself, in its information dictionary and its XMP metadata alike.

    ``created`` None leaves the dates out (a document drawn from inputs that
    carry no time, such as a sheet of targets, stays the same bytes).
    """

    title: str
    subject: str = ""
    author: str = ""
    keywords: str = ""
    creator: str = f"surfinspect {__version__}"
    created: datetime | None = None

    @property
    def producer(self) -> str:
        return f"surfinspect {__version__} (ReportLab {reportlab.Version}, pikepdf {pikepdf.__version__})"


def archival_canvas(target, info: DocumentInfo, *, pagesize=A4) -> Canvas:
    """A reportlab canvas for an archival document: invariant (fixed id and dates), compressed pages.

    The shipped fonts are registered; draw text only in them
    (:data:`.fonts.SANS` and its siblings). Pass the canvas's bytes to
    :func:`finish_archival` with the same ``info``.
    """
    fonts.register_fonts()
    c = Canvas(target, pagesize=pagesize, invariant=1, pageCompression=1, initialFontName=fonts.SANS)
    stamp = _pdf_date(info.created) if info.created else "D:20000101000000+00'00'"
    c.setDateFormatter(lambda *_: stamp)
    c.setTitle(info.title)
    c.setSubject(info.subject)  # enters reportlab's document id
    c.setAuthor(info.author)
    c.setCreator(info.creator)
    c.setKeywords(info.keywords)
    return c


def finish_archival(pdf: bytes, info: DocumentInfo) -> bytes:
    """Make a document drawn on :func:`archival_canvas` PDF/A-2b: output intent, XMP, matching information."""
    with pikepdf.open(io.BytesIO(pdf)) as doc:
        if doc.is_encrypted:  # pragma: no cover - our canvases never encrypt
            raise ValueError("archival PDF: the document is encrypted (PDF/A forbids encryption)")
        doc.trailer.Info = doc.make_indirect(_information(info))
        metadata = pikepdf.Stream(doc, _xmp(info).encode("utf-8"))
        metadata.Type, metadata.Subtype = pikepdf.Name.Metadata, pikepdf.Name.XML
        doc.Root.Metadata = doc.make_indirect(metadata)
        doc.Root.OutputIntents = pikepdf.Array([doc.make_indirect(_output_intent(doc))])
        out = io.BytesIO()
        # qpdf leaves /Metadata streams uncompressed when it compresses the rest (PDF/A-2, 6.6.2.1)
        doc.save(out, deterministic_id=True, compress_streams=True, object_stream_mode=pikepdf.ObjectStreamMode.disable)
    return out.getvalue()


def srgb_profile() -> bytes:
    """The shipped ICC profile (see ``data/LICENSE-sRGB.txt``)."""
    return (resources.files(__package__) / "data" / "sRGB.icc").read_bytes()


def _output_intent(doc: pikepdf.Pdf) -> pikepdf.Dictionary:
    profile = pikepdf.Stream(doc, srgb_profile())
    profile.N = 3  # RGB
    return pikepdf.Dictionary(
        Type=pikepdf.Name.OutputIntent,
        S=pikepdf.Name.GTS_PDFA1,
        OutputConditionIdentifier=SRGB_CONDITION,
        Info=SRGB_CONDITION,
        DestOutputProfile=doc.make_indirect(profile),
    )


def _information(info: DocumentInfo) -> pikepdf.Dictionary:
    entries = {
        "/Title": info.title,
        "/Subject": info.subject,
        "/Author": info.author,
        "/Keywords": info.keywords,
        "/Creator": info.creator,
        "/Producer": info.producer,
    }
    d = pikepdf.Dictionary({k: pikepdf.String(_xml_safe(v)) for k, v in entries.items() if v})
    if info.created:
        d["/CreationDate"] = d["/ModDate"] = pikepdf.String(_pdf_date(info.created))
    return d


def _xmp(info: DocumentInfo) -> str:
    """The XMP packet (ISO 16684-1) with the PDF/A identification and the information dictionary's values."""

    def alt(value: str) -> str:
        return f'<rdf:Alt><rdf:li xml:lang="x-default">{_text(value)}</rdf:li></rdf:Alt>'

    props = [
        f"<pdfaid:part>{PDFA_PART}</pdfaid:part>",
        f"<pdfaid:conformance>{PDFA_CONFORMANCE}</pdfaid:conformance>",
        "<dc:format>application/pdf</dc:format>",
        f"<dc:title>{alt(info.title)}</dc:title>",
    ]
    if info.author:
        props.append(f"<dc:creator><rdf:Seq><rdf:li>{_text(info.author)}</rdf:li></rdf:Seq></dc:creator>")
    if info.subject:
        props.append(f"<dc:description>{alt(info.subject)}</dc:description>")
    if info.keywords:
        props.append(f"<pdf:Keywords>{_text(info.keywords)}</pdf:Keywords>")
    props.append(f"<pdf:Producer>{_text(info.producer)}</pdf:Producer>")
    props.append(f"<xmp:CreatorTool>{_text(info.creator)}</xmp:CreatorTool>")
    if info.created:
        when = _xmp_date(info.created)
        props += [f"<xmp:CreateDate>{when}</xmp:CreateDate>", f"<xmp:ModifyDate>{when}</xmp:ModifyDate>"]
    body = "\n    ".join(props)
    return (
        '<?xpacket begin="\ufeff" id="W5M0MpCehiHzreSzNTczkc9d"?>\n'
        '<x:xmpmeta xmlns:x="adobe:ns:meta/">\n'
        '<rdf:RDF xmlns:rdf="http://www.w3.org/1999/02/22-rdf-syntax-ns#">\n'
        '  <rdf:Description rdf:about=""\n'
        '      xmlns:pdfaid="http://www.aiim.org/pdfa/ns/id/"\n'
        '      xmlns:dc="http://purl.org/dc/elements/1.1/"\n'
        '      xmlns:pdf="http://ns.adobe.com/pdf/1.3/"\n'
        '      xmlns:xmp="http://ns.adobe.com/xap/1.0/">\n'
        f"    {body}\n"
        "  </rdf:Description>\n"
        "</rdf:RDF>\n"
        "</x:xmpmeta>\n"
        '<?xpacket end="w"?>'
    )


def _xml_safe(text: str) -> str:
    """``text`` without the characters XML 1.0 cannot hold (C0 controls but tab, CR, LF; surrogates), as U+FFFD."""
    return "".join(
        "\ufffd"
        if (ord(ch) < 0x20 and ch not in "\t\n\r") or 0xD800 <= ord(ch) <= 0xDFFF or ch in "\ufffe\uffff"
        else ch
        for ch in str(text)
    )


def _text(value: str) -> str:
    return escape(_xml_safe(value))


def _utc(when: datetime) -> datetime:
    return (when if when.tzinfo else when.replace(tzinfo=timezone.utc)).astimezone(timezone.utc)


def _pdf_date(when: datetime) -> str:
    """ISO 32000-1, 7.9.4: D:YYYYMMDDHHmmSS with the offset from UTC."""
    return _utc(when).strftime("D:%Y%m%d%H%M%S+00'00'")


def _xmp_date(when: datetime) -> str:
    """The same instant as :func:`_pdf_date` in XMP's date form (ISO 8601, to the second)."""
    return _utc(when).strftime("%Y-%m-%dT%H:%M:%S+00:00")
