"""The archive's certificates: issued with the register's entries, stored as files, found by key.

The owner's certificate and every signer's are stored as files of media type
``application/pkix-cert`` (RFC 2585), catalogued and recorded in the audit
chain in the same event as the register entry they belong to, so that
``verify`` covers them like every other stored file. Because a certificate
is a deterministic function of its register entry and the owner's key
(:mod:`.certificates`), the owner of an archive set up before certificates
existed gets its own certificate at the next enrolment, from its original
entry, with nothing else changed.
"""

from __future__ import annotations

from datetime import datetime

from cryptography import x509

from . import certificates as certs
from .register import Register, Signer

__all__ = [
    "CERTIFICATE_MEDIA_TYPE",
    "stored_certificates",
    "owner_certificate_of",
    "certificate_of",
    "owner_pdf_certificate_of",
    "pdf_certificate_of",
    "trust_roots",
    "owner_certificate_for",
    "signer_certificate_for",
]

#: RFC 2585, 4.1: the media type of a DER certificate.
CERTIFICATE_MEDIA_TYPE = "application/pkix-cert"


def utc(text: str) -> datetime:
    """A register or sign-off time (ISO 8601 ending in Z) as an aware datetime."""
    return datetime.fromisoformat(text.replace("Z", "+00:00"))


def stored_certificates(archive) -> list[x509.Certificate]:
    """Every certificate the archive stores, in the order they were catalogued; unreadable ones left out."""
    found = []
    for row in archive.index.select("files", {"media_type": CERTIFICATE_MEDIA_TYPE}, order_by=("stored_at", "sha256")):
        try:
            found.append(certs.load_certificate(archive.read_object(row["sha256"])))
        except (OSError, ValueError):
            continue  # ``verify`` names a damaged or missing file
    return found


def _is_ca(cert: x509.Certificate) -> bool:
    try:
        return bool(cert.extensions.get_extension_for_class(x509.BasicConstraints).value.ca)
    except x509.ExtensionNotFound:
        return False


def owner_certificate_of(archive, register: Register | None = None) -> x509.Certificate | None:
    """The owner's self-signed CA certificate for the owner's key in the register (None when not issued yet)."""
    register = register or archive.register()
    if register.owner is None:
        return None
    raw = bytes.fromhex(register.owner.public_key_hex)
    for cert in stored_certificates(archive):
        if _is_ca(cert) and certs.certificate_key_raw(cert) == raw and cert.issuer == cert.subject:
            return cert
    return None


def certificate_of(archive, fingerprint: str, register: Register | None = None) -> x509.Certificate | None:
    """The signer certificate of an enrolled key (None when none was issued)."""
    register = register or archive.register()
    signer = register.signers.get(fingerprint)
    if signer is None:
        return None
    raw = bytes.fromhex(signer.public_key_hex)
    for cert in stored_certificates(archive):
        if not _is_ca(cert) and certs.certificate_key_raw(cert) == raw:
            return cert
    return None


def _by_spki(archive, spki_hex: str | None, *, ca: bool) -> x509.Certificate | None:
    if spki_hex is None:
        return None
    der = bytes.fromhex(spki_hex)
    for cert in stored_certificates(archive):
        if _is_ca(cert) == ca and certs.certificate_spki(cert) == der and (not ca or cert.issuer == cert.subject):
            return cert
    return None


def owner_pdf_certificate_of(archive, register: Register | None = None) -> x509.Certificate | None:
    """The owner's CA certificate for its PDF key (None when the owner has no PDF key certified)."""
    register = register or archive.register()
    return None if register.owner is None else _by_spki(archive, register.owner.pdf_public_key_hex, ca=True)


def pdf_certificate_of(archive, fingerprint: str, register: Register | None = None) -> x509.Certificate | None:
    """The certificate of an enrolled holder's PDF key (None when it has none)."""
    register = register or archive.register()
    signer = register.signers.get(fingerprint)
    return None if signer is None else _by_spki(archive, signer.pdf_public_key_hex, ca=False)


def trust_roots(archive, register: Register | None = None) -> list[x509.Certificate]:
    """The owner's CA certificates: the PDF key's (what readers check) first, then the Ed25519 one's."""
    register = register or archive.register()
    found = [owner_pdf_certificate_of(archive, register), owner_certificate_of(archive, register)]
    return [c for c in found if c is not None]


def owner_certificate_for(owner_key, owner: Signer, archive_id: str) -> x509.Certificate:
    """The owner's certificate as its register entry implies it."""
    return certs.owner_certificate(
        owner_key,
        printed_name=owner.printed_name,
        archive_id=archive_id,
        entry_no=owner.entry_no,
        issued_at=utc(owner.enrolled_at_utc),
    )


def signer_certificate_for(
    owner_key,
    owner_cert: x509.Certificate,
    public_key: bytes,
    *,
    printed_name: str,
    role: str,
    archive_id: str,
    entry_no: int,
    recorded_at_utc: str,
) -> x509.Certificate:
    """A signer's certificate for an enrolment entry (``public_key``: raw Ed25519, or a PDF key's DER)."""
    return certs.signer_certificate(
        owner_key,
        owner_cert,
        public_key,
        printed_name=printed_name,
        role=role,
        archive_id=archive_id,
        entry_no=entry_no,
        issued_at=utc(recorded_at_utc),
    )
