"""Structural checks of PDF/A-2b (ISO 19005-2:2011) on a finished document, read back with pikepdf.

No PDF/A validator is packaged for Debian (veraPDF is not; the PDFBox preflight module checks
PDF/A-1b only), so the tests check the clauses our documents can break, each named by its clause
number, and run veraPDF as well when one is on the PATH (:func:`verapdf_verdict`).
"""

from __future__ import annotations

import io
import shutil
import subprocess
from pathlib import Path

import pikepdf

#: XMP properties equivalent to the document information entries (ISO 19005-2, 6.6.3; pikepdf's mapping).
_INFO_TO_XMP = {
    "/Title": "dc:title",
    "/Author": "dc:creator",
    "/Subject": "dc:description",
    "/Keywords": "pdf:Keywords",
    "/Creator": "xmp:CreatorTool",
    "/Producer": "pdf:Producer",
    "/CreationDate": "xmp:CreateDate",
    "/ModDate": "xmp:ModifyDate",
}
#: Annotation flags (ISO 32000-1, 12.5.3): Invisible 1, Hidden 2, Print 4, NoView 32, ToggleNoView 256.
_PRINT, _NOT_SHOWN = 4, 1 | 2 | 32 | 256
#: Actions and keys that reach outside the file or run code (ISO 19005-2, 6.5.1, 6.6.1, 6.8).
_FORBIDDEN_ACTIONS = {"/Launch", "/GoToR", "/GoToE", "/URI", "/JavaScript", "/ImportData", "/SubmitForm", "/Sound"}


def _fonts_of(resources, seen: set) -> list:
    """Every font dictionary reachable from a resource dictionary, through forms and Type 3 glyphs."""
    found = []
    if not isinstance(resources, pikepdf.Dictionary):
        return found
    for f in (resources.get("/Font") or {}).values():
        if f.objgen in seen and f.objgen != (0, 0):
            continue
        seen.add(f.objgen)
        found.append(f)
        if f.get("/Subtype") == "/Type3":
            found += _fonts_of(f.get("/Resources"), seen)
    for x in (resources.get("/XObject") or {}).values():
        if x.get("/Subtype") == "/Form" and x.objgen not in seen:
            seen.add(x.objgen)
            found += _fonts_of(x.get("/Resources"), seen)
    return found


def _shown_strings(page: pikepdf.Page):
    """(font resource name, bytes shown) for every text-showing operator of a page's content."""
    font = None
    for operands, op in pikepdf.parse_content_stream(page):
        name = str(op)
        if name == "Tf":
            font = str(operands[0])
        elif name in ("Tj", "'"):
            yield font, bytes(operands[-1])
        elif name == '"':
            yield font, bytes(operands[2])
        elif name == "TJ":
            for item in operands[0]:
                if isinstance(item, pikepdf.String):
                    yield font, bytes(item)


def _check_fonts(pdf: pikepdf.Pdf) -> list[str]:
    problems = []
    for n, page in enumerate(pdf.pages, 1):
        seen: set = set()
        fonts = _fonts_of(page.obj.get("/Resources"), seen)
        for annot in page.obj.get("/Annots") or []:  # appearance streams draw text too (a visible signature)
            for appearance in (annot.get("/AP") or {}).values():
                streams = [appearance] if isinstance(appearance, pikepdf.Stream) else list(appearance.values())
                for stream in streams:
                    fonts += _fonts_of(stream.get("/Resources"), seen)
        for f in fonts:
            descendants = f.get("/DescendantFonts") or [f]
            for d in descendants:
                fd = d.get("/FontDescriptor")
                if f.get("/Subtype") != "/Type3" and (
                    fd is None or not any(k in fd for k in ("/FontFile", "/FontFile2", "/FontFile3"))
                ):
                    problems.append(f"6.2.11.4: page {n}: font {f.get('/BaseFont')} is not embedded")
        # reportlab's TrueType subsets put .notdef at code 0 of every subset: a shown 0 byte draws it
        truetype = {
            str(k)
            for k, f in ((page.obj.get("/Resources") or {}).get("/Font") or {}).items()
            if f.Subtype == "/TrueType"
        }
        for font, shown in _shown_strings(page):
            if font in truetype and 0 in shown:
                problems.append(f"6.2.11.8: page {n}: text shows the .notdef glyph in font {font}")
    return problems


def _check_metadata(pdf: pikepdf.Pdf) -> list[str]:
    problems = []
    stream = pdf.Root.get("/Metadata")
    if stream is None:
        return ["6.6.2.1: no XMP metadata stream in the catalog"]
    if "/Filter" in stream:
        problems.append("6.6.2.1: the metadata stream is filtered")
    head = stream.read_bytes().split(b"?>", 1)[0]
    if b"bytes=" in head or b"encoding=" in head:
        problems.append("6.6.2.1: the xpacket header has a bytes or encoding attribute")
    meta = pdf.open_metadata(set_pikepdf_as_editor=False, update_docinfo=False)
    if meta.get("pdfaid:part") != "2" or meta.get("pdfaid:conformance") != "B":
        problems.append(f"6.6.4: pdfaid is {meta.get('pdfaid:part')}/{meta.get('pdfaid:conformance')}, not 2/B")
    info = pdf.trailer.get("/Info") or {}
    for key, prop in _INFO_TO_XMP.items():
        if key not in info:
            if prop in meta:
                problems.append(f"6.6.3: XMP has {prop} but the information dictionary no {key}")
            continue
        value, xmp = str(info[key]), meta.get(prop)
        if key == "/Author":
            xmp = ", ".join(xmp) if xmp else None
        if key in ("/CreationDate", "/ModDate"):
            value = pikepdf.models.metadata.decode_pdf_date(value).isoformat()
            xmp = xmp.replace("Z", "+00:00") if xmp else None
        if xmp != value:
            problems.append(f"6.6.3: {key} is {value!r} but XMP {prop} is {xmp!r}")
    return problems


def _check_output_intent(pdf: pikepdf.Pdf) -> list[str]:
    intents = [i for i in (pdf.Root.get("/OutputIntents") or []) if i.get("/S") == "/GTS_PDFA1"]
    if len(intents) != 1:
        return [f"6.2.3: {len(intents)} PDF/A output intents (allowed: one)"]
    profile = intents[0].get("/DestOutputProfile")
    if profile is None:
        return ["6.2.3: the output intent has no DestOutputProfile"]
    icc = profile.read_bytes()
    # ICC.1:2010, 7.2: header signature 'acsp' at byte 36, data colour space at 16
    if icc[36:40] != b"acsp" or icc[16:20] != b"RGB " or int(profile.get("/N", 0)) != 3:
        return ["6.2.3: the output profile is not an RGB ICC profile with /N 3"]
    return []


def _check_objects(pdf: pikepdf.Pdf) -> list[str]:
    problems = []
    if "/Encrypt" in pdf.trailer:
        problems.append("6.1.3: the document is encrypted")
    if "/ID" not in pdf.trailer:
        problems.append("6.1.3: the trailer has no /ID")
    for obj in pdf.objects:
        if not isinstance(obj, pikepdf.Dictionary) and not isinstance(obj, pikepdf.Stream):
            continue
        if obj.get("/S") in _FORBIDDEN_ACTIONS:
            problems.append(f"6.5.1: a {obj.get('/S')} action")
        if "/JS" in obj or "/AA" in obj or "/EmbeddedFiles" in obj or "/OPI" in obj:
            problems.append("6.5.2/6.8: JavaScript, additional actions, embedded files or OPI")
        if obj.get("/Subtype") == "/Image" and bool(obj.get("/Interpolate", False)):
            problems.append("6.2.8: an image with /Interpolate true")
        if obj.get("/Type") == "/Annot" or obj.get("/Subtype") == "/Widget":
            flags = int(obj.get("/F", 0))
            if not flags & _PRINT or flags & _NOT_SHOWN:
                problems.append(f"6.3.2: an annotation with flags {flags} (Print must be set, Hidden etc. clear)")
            rect = [float(v) for v in obj.get("/Rect", [0, 0, 0, 0])]
            if (rect[2] - rect[0]) * (rect[3] - rect[1]) != 0 and "/N" not in (obj.get("/AP") or {}):
                problems.append("6.3.3: an annotation with an area but no normal appearance")
    return problems


def pdfa_problems(data: bytes) -> list[str]:
    """What keeps ``data`` from PDF/A-2b among the clauses checked here; empty when none."""
    with pikepdf.open(io.BytesIO(data)) as pdf:
        return _check_objects(pdf) + _check_fonts(pdf) + _check_metadata(pdf) + _check_output_intent(pdf)


def assert_pdfa_2b(data: bytes) -> None:
    problems = pdfa_problems(data)
    assert not problems, "\n".join(problems)
    verdict = verapdf_verdict(data)
    assert verdict in (None, True), "veraPDF: not compliant with PDF/A-2b"


def verapdf_verdict(data: bytes, tmp: Path | None = None) -> bool | None:
    """veraPDF's verdict on ``data`` as PDF/A-2b, or None when no veraPDF is installed."""
    exe = shutil.which("verapdf")
    if exe is None:
        return None
    import tempfile

    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "doc.pdf"
        path.write_bytes(data)
        run = subprocess.run([exe, "--flavour", "2b", str(path)], capture_output=True, text=True, timeout=300)
    return 'isCompliant="true"' in run.stdout
