"""X.509 certificates for the archive's keys: the owner as a small certificate authority.

A PDF reader checks a PDF signature against certificates, not against our
signer register. So the register's keys get certificates (RFC 5280), built
with ``cryptography``'s X.509 builder:

- the **owner certificate**, self-signed with the owner's Ed25519 key when
  the archive gets its owner: a CA certificate (basic constraints CA, path
  length 0, key usage certificate and CRL signing) whose subject names the
  owner and the archive. A customer who trusts this one certificate trusts
  every signature made in the archive;
- a **signer certificate** for every enrolled key, issued and signed by the
  owner at enrolment: subject = the printed name the register gives (common
  name, and in full in the X.520 ``name`` attribute, since a common name is
  limited to 64 characters), the role, the archive; key usage digital
  signature and non-repudiation (content commitment).

Each holder has two keys (:mod:`.signing`): the Ed25519 identity key and a
PDF key (ECDSA P-256), since most PDF readers cannot verify Ed25519. So an
owner with a PDF key has a second CA certificate, self-signed with ECDSA
P-256 and SHA-256 (organisational unit ``owner, PDF signatures``), which
issues the certificates of the signers' PDF keys; that one is the
certificate customers trust. An owner without a PDF key (an archive set up
before PDF keys) issues the PDF-key certificates with its Ed25519 one.

Certificates carry no expiry (RFC 5280, 4.1.2.5: notAfter 99991231235959Z
"to indicate that a certificate has no well-defined expiration date"): a
report must still verify in ten years, and the register's revocation, not a
date, ends a key's use. The serial number is derived from the archive id and
the register entry number (unique per issuer, 4.1.2.2); Ed25519 signatures
are deterministic (RFC 8032), so the same entry gives the same certificate.

References
----------
RFC 5280, Internet X.509 Public Key Infrastructure Certificate and CRL Profile, 2008.
RFC 8410, Algorithm Identifiers for Ed25519, Ed448, X25519 and X448 for Use in the Internet X.509
Public Key Infrastructure, 2018.
"""

from __future__ import annotations

import hashlib
from datetime import datetime, timezone

from cryptography import x509
from cryptography.exceptions import InvalidSignature
from cryptography.hazmat.primitives import hashes, serialization
from cryptography.hazmat.primitives.asymmetric import ec
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey, Ed25519PublicKey
from cryptography.x509.oid import NameOID

__all__ = [
    "NO_EXPIRY",
    "owner_certificate",
    "signer_certificate",
    "certificate_der",
    "load_certificate",
    "certificate_key_raw",
    "certificate_spki",
    "PDF_OWNER_UNIT",
    "certificate_name",
    "certificate_problems",
    "certificate_sha256",
]

#: RFC 5280, 4.1.2.5: the notAfter of a certificate without a well-defined expiration date.
NO_EXPIRY = datetime(9999, 12, 31, 23, 59, 59, tzinfo=timezone.utc)
_CN_MAX = 64  # RFC 5280, Appendix A.1: ub-common-name (cryptography counts UTF-8 octets)
#: The organisational unit of the owner's CA certificate for PDF keys (its subject differs from the Ed25519 one's).
PDF_OWNER_UNIT = "owner, PDF signatures"


def _subject(printed_name: str, archive_id: str, role: str) -> x509.Name:
    cn = printed_name
    if len(cn.encode("utf-8")) > _CN_MAX:  # the bound counts UTF-8 octets
        while len(cn.encode("utf-8")) > _CN_MAX - 3:
            cn = cn[:-1]
        cn += "…"
    return x509.Name(
        [
            x509.NameAttribute(NameOID.COMMON_NAME, cn),
            x509.NameAttribute(x509.ObjectIdentifier("2.5.4.41"), printed_name),  # X.520 name, in full
            x509.NameAttribute(NameOID.ORGANIZATIONAL_UNIT_NAME, role),
            x509.NameAttribute(NameOID.ORGANIZATION_NAME, f"surfinspect archive {archive_id}"),
        ]
    )


def _key_usage(*, authority: bool) -> x509.KeyUsage:
    """An authority certifies keys and signs revocation lists; a signer signs and commits to content."""
    return x509.KeyUsage(
        digital_signature=True,
        content_commitment=not authority,
        key_encipherment=False,
        data_encipherment=False,
        key_agreement=False,
        key_cert_sign=authority,
        crl_sign=authority,
        encipher_only=False,
        decipher_only=False,
    )


def _serial(archive_id: str, entry_no: int, public) -> int:
    """A positive serial of at most 20 octets (RFC 5280, 4.1.2.2), unique per archive entry and key kind."""
    kind = "" if isinstance(public, Ed25519PublicKey) else "/pdf-key"
    digest = hashlib.sha256(f"{archive_id}/{entry_no}{kind}".encode()).digest()
    return int.from_bytes(digest[:16], "big") >> 1 | 1


def _utc(when: datetime) -> datetime:
    return (when if when.tzinfo else when.replace(tzinfo=timezone.utc)).astimezone(timezone.utc).replace(microsecond=0)


def _hash_for(key):
    """Ed25519 takes no separate hash (RFC 8410, 6); ECDSA P-256 signs with SHA-256 (RFC 5758, 3.2)."""
    return None if isinstance(key, Ed25519PrivateKey) else hashes.SHA256()


def owner_certificate(
    owner_key: Ed25519PrivateKey | ec.EllipticCurvePrivateKey,
    *,
    printed_name: str,
    archive_id: str,
    entry_no: int,
    issued_at: datetime,
) -> x509.Certificate:
    """The owner's self-signed CA certificate (path length 0: it certifies signers, not other CAs)."""
    public = owner_key.public_key()
    name = _subject(printed_name, archive_id, "owner" if isinstance(public, Ed25519PublicKey) else PDF_OWNER_UNIT)
    return (
        x509.CertificateBuilder()
        .subject_name(name)
        .issuer_name(name)
        .public_key(public)
        .serial_number(_serial(archive_id, entry_no, public))
        .not_valid_before(_utc(issued_at))
        .not_valid_after(NO_EXPIRY)
        .add_extension(x509.BasicConstraints(ca=True, path_length=0), critical=True)
        .add_extension(_key_usage(authority=True), critical=True)
        .add_extension(x509.SubjectKeyIdentifier.from_public_key(public), critical=False)
        .sign(owner_key, _hash_for(owner_key))
    )


def signer_certificate(
    owner_key: Ed25519PrivateKey | ec.EllipticCurvePrivateKey,
    owner_cert: x509.Certificate,
    subject_public: bytes,
    *,
    printed_name: str,
    role: str,
    archive_id: str,
    entry_no: int,
    issued_at: datetime,
) -> x509.Certificate:
    """A signer's certificate, issued by the owner: ``subject_public`` is the raw 32-byte Ed25519 key, or the
    DER SubjectPublicKeyInfo of the PDF key."""
    if len(subject_public) == 32:
        public = Ed25519PublicKey.from_public_bytes(subject_public)
    else:
        public = serialization.load_der_public_key(subject_public)
    return (
        x509.CertificateBuilder()
        .subject_name(_subject(printed_name, archive_id, role))
        .issuer_name(owner_cert.subject)
        .public_key(public)
        .serial_number(_serial(archive_id, entry_no, public))
        .not_valid_before(_utc(issued_at))
        .not_valid_after(NO_EXPIRY)
        .add_extension(x509.BasicConstraints(ca=False, path_length=None), critical=True)
        .add_extension(_key_usage(authority=False), critical=True)
        .add_extension(x509.SubjectKeyIdentifier.from_public_key(public), critical=False)
        .add_extension(
            x509.AuthorityKeyIdentifier.from_issuer_public_key(owner_cert.public_key()),  # type: ignore[arg-type]
            critical=False,
        )
        .sign(owner_key, _hash_for(owner_key))
    )


def certificate_der(cert: x509.Certificate) -> bytes:
    return cert.public_bytes(serialization.Encoding.DER)


def load_certificate(data: bytes) -> x509.Certificate:
    """A certificate from DER or PEM bytes."""
    if data.lstrip().startswith(b"-----BEGIN"):
        return x509.load_pem_x509_certificate(data)
    return x509.load_der_x509_certificate(data)


def certificate_sha256(cert: x509.Certificate) -> str:
    """The certificate's SHA-256 fingerprint in hex (what a customer compares when trusting it)."""
    return cert.fingerprint(hashes.SHA256()).hex()


def certificate_key_raw(cert: x509.Certificate) -> bytes | None:
    """The raw 32-byte Ed25519 public key the certificate certifies (None for another algorithm)."""
    key = cert.public_key()
    if not isinstance(key, Ed25519PublicKey):
        return None
    return key.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)


def certificate_spki(cert: x509.Certificate) -> bytes:
    """The DER SubjectPublicKeyInfo the certificate certifies (how records name a PDF key)."""
    return cert.public_key().public_bytes(serialization.Encoding.DER, serialization.PublicFormat.SubjectPublicKeyInfo)


def certificate_name(cert: x509.Certificate) -> str | None:
    """The printed name a certificate gives: its X.520 ``name`` attribute, else its common name."""
    for oid in (x509.ObjectIdentifier("2.5.4.41"), NameOID.COMMON_NAME):
        values = cert.subject.get_attributes_for_oid(oid)
        if values:
            return str(values[0].value)
    return None


def certificate_problems(
    cert: x509.Certificate,
    owner_cert: x509.Certificate,
    *,
    public_key_raw: bytes,
    printed_name: str,
    archive_id: str,
    pdf_public_der: bytes | None = None,
) -> list[str]:
    """What does not hold of a signer's certificate against the register's entry (empty when all holds)."""
    problems = []
    try:
        cert.verify_directly_issued_by(owner_cert)
    except (ValueError, TypeError, InvalidSignature) as exc:
        problems.append(
            f"not issued by the archive owner's certificate ({str(exc) or 'its signature does not verify'})"
        )
    if pdf_public_der is not None:
        if certificate_spki(cert) != pdf_public_der:
            problems.append("certifies another PDF key than the register's")
    elif certificate_key_raw(cert) != public_key_raw:
        problems.append("certifies another key than the register's")
    if certificate_name(cert) != printed_name:
        problems.append(f"names {certificate_name(cert)!r}, the register {printed_name!r}")
    orgs = [a.value for a in cert.subject.get_attributes_for_oid(NameOID.ORGANIZATION_NAME)]
    if orgs != [f"surfinspect archive {archive_id}"]:
        problems.append(f"belongs to another archive ({', '.join(map(str, orgs)) or 'none named'})")
    return problems
