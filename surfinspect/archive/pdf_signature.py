"""PDF signatures (PAdES baseline B-B, ETSI EN 319 142-1) on the signed editions, made and checked with pyHanko.

A signed edition carries one PDF signature per sign-off: a CMS signature
(``ETSI.CAdES.detached``) by the signer's PDF key (ECDSA P-256 with SHA-256,
which poppler/NSS and other common readers verify) or, for a holder whose
key file predates PDF keys, by the enrolled Ed25519 key (RFC 8419: Ed25519
in CMS, digest SHA-512), with the signer's certificate and the issuing
owner certificate embedded, the meaning and comment as the signature's
reason, the sign-off's UTC time as its time (``/M``; B-B carries no
signing-time attribute, EN 319 142-1, 5.2.1). The field is invisible (zero
rectangle) but printable, as PDF/A-2 wants of every annotation (ISO 19005-2,
6.3.2). A later sign-off is an incremental update of the previous edition
(ISO 32000-1, 7.5.6): the bytes an earlier signature covers stay as they were,
so every earlier signature stays valid.

The incremental update also sets the document's modification date to the
signing time, in the information dictionary and the XMP metadata alike, so the
edition stays PDF/A-2b (6.6.3); pyHanko's own metadata update would write the
current time and a producer that differs between the two. The second part of
the document id is derived from the previous revision, so that the same
edition signed at the same time by the same key is the same bytes.

Validation (:func:`pdf_signatures`) is pyHanko's: the integrity of the signed
byte ranges, the CMS signature, the certificate path to the archive owner's
certificate as the only trust root (no fetching, no revocation service: the
register is the revocation record), and the difference analysis of what the
later revisions changed.

References
----------
ETSI EN 319 142-1 V1.1.1 (2016), PAdES digital signatures, Part 1: Building blocks and PAdES baseline signatures.
RFC 8419, Use of Edwards-Curve Digital Signature Algorithm (EdDSA) Signatures in the Cryptographic
Message Syntax (CMS), 2018.
"""

from __future__ import annotations

import hashlib
import io
import re
from dataclasses import dataclass, field
from datetime import datetime, timezone

import pikepdf
from asn1crypto import keys as asn1_keys
from asn1crypto import x509 as asn1_x509
from cryptography import x509
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric import ec
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
from pyhanko.pdf_utils import content, generic, layout
from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter
from pyhanko.pdf_utils.reader import PdfFileReader
from pyhanko.sign import fields, signers
from pyhanko.sign.signers.pdf_signer import PdfSigner
from pyhanko.sign.validation import validate_pdf_signature
from pyhanko.stamp import StaticStampStyle
from pyhanko_certvalidator import ValidationContext
from pyhanko_certvalidator.registry import SimpleCertificateStore

from .certificates import certificate_der, certificate_key_raw, certificate_name, certificate_spki

__all__ = [
    "SIGNATURE_FIELD_PREFIX",
    "PdfSignatureCheck",
    "outline_pages",
    "sign_pdf",
    "pdf_signatures",
    "signature_reason",
]

#: Signature fields are named after the sign-off they carry: ``signoff-1``, ``signoff-2``, ...
SIGNATURE_FIELD_PREFIX = "signoff-"


def signature_reason(meaning: str, comment: str) -> str:
    """The signature's reason: the sign-off's meaning, then its comment."""
    return f"{meaning}: {comment}" if comment else meaning


def _asn1(cert: x509.Certificate) -> asn1_x509.Certificate:
    return asn1_x509.Certificate.load(certificate_der(cert))


def _pdf_date(when: datetime) -> str:
    return when.astimezone(timezone.utc).strftime("D:%Y%m%d%H%M%S+00'00'")


class _ArchivalIncrementalWriter(IncrementalPdfFileWriter):
    """An incremental update that keeps PDF/A's metadata in step and its bytes reproducible."""

    signed_at: datetime

    @classmethod
    def _handle_id(cls, prev):
        # ISO 32000-1, 14.4: the first part stays; the second changes with each revision (here: a hash of it)
        id1 = prev.trailer["/ID"][0]
        prev.stream.seek(0)
        id2 = hashlib.md5(prev.stream.read(), usedforsecurity=False).digest()
        return generic.ArrayObject([generic.ByteStringObject(bytes(id1.original_bytes)), generic.ByteStringObject(id2)])

    def _update_meta(self):
        when = _pdf_date(self.signed_at)
        if self._info is not None:
            info = self._info.get_object()
            info["/ModDate"] = generic.pdf_string(when)
            self.mark_update(self._info)
        meta = self.root.get("/Metadata")
        if meta is not None:
            xmp = meta.get_object().data.decode("utf-8")
            stamp = self.signed_at.astimezone(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S+00:00")
            element = f"<xmp:ModifyDate>{stamp}</xmp:ModifyDate>"
            xmp, found = re.subn(r"<xmp:ModifyDate>[^<]*</xmp:ModifyDate>", element, xmp)
            if not found:  # an undated document gets its modification date in both places
                xmp = xmp.replace("</rdf:Description>", f"  {element}\n  </rdf:Description>", 1)
            stream = generic.StreamObject(
                {generic.pdf_name("/Type"): generic.pdf_name("/Metadata"), "/Subtype": generic.pdf_name("/XML")},
                stream_data=xmp.encode("utf-8"),
            )
            self.root["/Metadata"] = self.add_object(stream)
            self.update_root()


class _TimedSigner(PdfSigner):
    """pyHanko's signer with the signing time given (the sign-off's), not the clock's."""

    def __init__(self, *args, signed_at: datetime, **kwargs):
        super().__init__(*args, **kwargs)
        self._signed_at = signed_at

    def init_signing_session(self, pdf_out, existing_fields_only=False):
        session = super().init_signing_session(pdf_out, existing_fields_only)
        session.system_time = self._signed_at
        return session


def sign_pdf(
    pdf: bytes,
    key: Ed25519PrivateKey | ec.EllipticCurvePrivateKey,
    certificate: x509.Certificate,
    owner_certificate: x509.Certificate,
    *,
    field_name: str,
    reason: str,
    signed_at: datetime,
    appearance: bytes | None = None,
    box: tuple[float, float, float, float] | None = None,
    on_page: int = -1,
) -> bytes:
    """``pdf`` with one more PAdES B-B signature, appended as an incremental update.

    Parameters
    ----------
    pdf : bytes
        The edition to sign (the report, or the previous signed edition).
    key : Ed25519PrivateKey or EllipticCurvePrivateKey
        The signer's PDF key (P-256) or Ed25519 key; ``certificate`` certifies it, issued by ``owner_certificate``.
    field_name : str
        The new signature field's name (``signoff-N``).
    reason : str
        The signature's reason (:func:`signature_reason`).
    signed_at : datetime
        The signing time written into the signature (the sign-off's time).
    appearance, box : bytes, tuple, optional
        A one-page PDF drawn as the signature's visible appearance in ``box`` (x1, y1, x2, y2, points) on
        page ``on_page`` (0-based; -1, the default, is the last page); without them the signature is invisible
        (but printable).
    """
    key_info = asn1_keys.PrivateKeyInfo.load(
        key.private_bytes(serialization.Encoding.DER, serialization.PrivateFormat.PKCS8, serialization.NoEncryption())
    )
    signer = signers.SimpleSigner(
        signing_cert=_asn1(certificate),
        signing_key=key_info,
        cert_registry=SimpleCertificateStore.from_certs([_asn1(owner_certificate)]),
    )
    meta = signers.PdfSignatureMetadata(
        field_name=field_name,
        reason=reason,
        # RFC 8419, 3.1: Ed25519 with SHA-512 in CMS; RFC 5754, 3.3: ECDSA P-256 with SHA-256
        md_algorithm="sha512" if isinstance(key, Ed25519PrivateKey) else "sha256",
        subfilter=fields.SigSeedSubFilter.PADES,
    )
    writer = _ArchivalIncrementalWriter(io.BytesIO(pdf))
    writer.signed_at = signed_at
    style = None
    if appearance is not None and box is not None:
        page = on_page if on_page >= 0 else int(writer.root["/Pages"]["/Count"]) + on_page
        spec = fields.SigFieldSpec(field_name, on_page=page, box=box)
        style = StaticStampStyle(
            background=_PdfPageBytes(appearance, field_name),
            border_width=0,
            background_layout=layout.SimpleBoxLayoutRule(  # drawn 1:1 into its box, no margins
                x_align=layout.AxisAlignment.ALIGN_MIN, y_align=layout.AxisAlignment.ALIGN_MIN, margins=layout.Margins()
            ),
        )
    else:
        spec = fields.SigFieldSpec(
            field_name, invis_sig_settings=fields.InvisSigSettings(set_print_flag=True, set_hidden_flag=False)
        )
    out = _TimedSigner(meta, signer, new_field_spec=spec, signed_at=signed_at, stamp_style=style).sign_pdf(writer)
    return out.getvalue()


def outline_pages(pdf: bytes) -> dict[str, int]:
    """The page (0-based) each top-level outline entry (bookmark) of ``pdf`` goes to, by title; the last page
    under the key ``""``. Entries whose destination is not a page of the document are left out."""
    with pikepdf.open(io.BytesIO(pdf)) as doc:
        pages = {page.obj.objgen: k for k, page in enumerate(doc.pages)}
        found = {"": len(doc.pages) - 1}
        item = doc.Root.get("/Outlines", {}).get("/First") if "/Outlines" in doc.Root else None
        for _ in range(1000):  # a bounded walk: a damaged outline may loop
            if item is None:
                break
            dest = item.get("/Dest")
            if isinstance(dest, pikepdf.Array) and len(dest) and dest[0].objgen in pages:
                found.setdefault(str(item.get("/Title", "")), pages[dest[0].objgen])
            item = item.get("/Next")
    return found


class _PdfPageBytes(content.PdfContent):
    """The first page of a PDF held in memory, as a form XObject (pyHanko's ``ImportedPdfPage`` reads a file and
    names the resource at random; this one is named after the field, so the same input gives the same bytes)."""

    def __init__(self, pdf: bytes, name: str):
        self.pdf, self.name = pdf, name
        super().__init__()

    def render(self) -> bytes:
        xobj = self._ensure_writer.import_page_as_xobject(PdfFileReader(io.BytesIO(self.pdf)), page_ix=0)
        resource = "/Appearance" + re.sub(r"[^A-Za-z0-9]", "", self.name)
        self.resources.xobject[resource] = xobj
        x1, y1, x2, y2 = xobj.get_object()["/BBox"]
        self.box = layout.BoxConstraints(width=abs(x1 - x2), height=abs(y1 - y2))
        return resource.encode("ascii") + b" Do"


@dataclass(frozen=True)
class PdfSignatureCheck:
    """One PDF signature of a document as pyHanko validated it against the owner's certificate."""

    field_name: str
    intact: bool  # the signed byte ranges hash to the signed digest
    valid: bool  # the CMS signature verifies with the certificate's key
    trusted: bool  # the certificate path ends at the owner's certificate
    signer_name: str | None
    key_raw: bytes | None  # the raw Ed25519 key certified (None for a PDF key)
    key_spki: bytes | None  # the DER SubjectPublicKeyInfo certified (any algorithm)
    reason: str | None
    signed_at: datetime | None
    covered_sha256: str  # SHA-256 of the file up to the end of the revision the signature covers
    whole_revision: bool  # the byte ranges cover the whole revision but the signature's own contents
    modified_after: str  # pyHanko's modification level of the later revisions (NONE, FORM_FILLING, ...)
    problems: tuple[str, ...] = field(default=())

    @property
    def ok(self) -> bool:
        return self.intact and self.valid and self.trusted and self.whole_revision and not self.problems


def pdf_signatures(pdf: bytes, owner_certificate: x509.Certificate | list[x509.Certificate]) -> list[PdfSignatureCheck]:
    """Every PDF signature of ``pdf``, validated by pyHanko with the owner's certificates as the only trust roots.

    A document pyHanko cannot read gives one check with the reason in ``problems``.
    """
    roots = owner_certificate if isinstance(owner_certificate, list) else [owner_certificate]
    context = ValidationContext(
        trust_roots=[_asn1(c) for c in roots], allow_fetching=False, revocation_mode="soft-fail"
    )
    try:
        reader = PdfFileReader(io.BytesIO(pdf), strict=False)
        embedded = list(reader.embedded_signatures)
    except Exception as exc:  # a damaged edition must be named, not crash verify
        return [_unreadable(pdf, f"pyHanko cannot read the document ({type(exc).__name__}: {exc})")]
    return [_check(sig, pdf, context) for sig in embedded]


def _unreadable(pdf: bytes, why: str) -> PdfSignatureCheck:
    return PdfSignatureCheck(
        "", False, False, False, None, None, None, None, None, hashlib.sha256(pdf).hexdigest(), False, "", (why,)
    )


def _check(sig, pdf: bytes, context: ValidationContext) -> PdfSignatureCheck:
    problems = []
    try:
        status = validate_pdf_signature(sig, context)
        intact, valid, trusted = bool(status.intact), bool(status.valid), bool(status.trusted)
        level = status.modification_level.name if status.modification_level is not None else "UNKNOWN"
        cert = x509.load_der_x509_certificate(status.signing_cert.dump())
        whole = status.coverage is not None and status.coverage.name in ("ENTIRE_REVISION", "ENTIRE_FILE")
    except Exception as exc:  # malformed CMS or byte ranges: named as a problem
        problems.append(f"pyHanko could not validate it ({type(exc).__name__}: {exc})")
        intact = valid = trusted = whole = False
        level, cert = "UNKNOWN", None
    byte_range = [int(v) for v in sig.sig_object.get("/ByteRange", [0, 0, 0, 0])]
    end = byte_range[2] + byte_range[3] if len(byte_range) == 4 else len(pdf)
    reason = sig.sig_object.get("/Reason")
    when = sig.sig_object.get("/M")
    return PdfSignatureCheck(
        field_name=str(sig.field_name),
        intact=intact,
        valid=valid,
        trusted=trusted,
        signer_name=certificate_name(cert) if cert is not None else None,
        key_raw=certificate_key_raw(cert) if cert is not None else None,
        key_spki=certificate_spki(cert) if cert is not None else None,
        reason=str(reason) if reason is not None else None,
        signed_at=_parse_pdf_date(str(when)) if when is not None else None,
        covered_sha256=hashlib.sha256(pdf[:end]).hexdigest(),
        whole_revision=whole,
        modified_after=level,
        problems=tuple(problems),
    )


def _parse_pdf_date(text: str) -> datetime | None:
    try:
        return generic.parse_pdf_date(text).astimezone(timezone.utc)
    except Exception:
        return None
