"""Tests for surfinspect.archive.certificates and .pdf_signature: the owner as a small CA, PAdES signatures
made with Ed25519 keys and validated by pyHanko (an implementation of ISO 32000 / ETSI EN 319 142 signature
validation independent of our code)."""

from __future__ import annotations

import io
from datetime import datetime, timedelta, timezone

import pytest
from cryptography import x509
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
from pdfa_checks import assert_pdfa_2b
from pypdf import PdfReader

from surfinspect.archive import certificates as certs
from surfinspect.archive.pdf_signature import pdf_signatures, sign_pdf, signature_reason
from surfinspect.pdfa.document import DocumentInfo, archival_canvas, finish_archival

ARCHIVE = "3f2a9c1e"
# times in the past: pyHanko validates the certificate path at the present moment
ENROLLED = datetime(2025, 3, 1, 7, 0, tzinfo=timezone.utc)
SIGNED = datetime(2025, 3, 2, 10, 30, tzinfo=timezone.utc)


@pytest.fixture(scope="module")
def pki():
    owner_key = Ed25519PrivateKey.from_private_bytes(bytes(range(32)))  # fixed keys: certificates reproducible
    signer_key = Ed25519PrivateKey.from_private_bytes(bytes(range(1, 33)))
    owner = certs.owner_certificate(
        owner_key, printed_name="Olga Owner", archive_id=ARCHIVE, entry_no=1, issued_at=ENROLLED
    )
    raw = signer_key.public_key().public_bytes_raw()
    signer = certs.signer_certificate(
        owner_key,
        owner,
        raw,
        printed_name="Anna Berg",
        role="inspector",
        archive_id=ARCHIVE,
        entry_no=2,
        issued_at=ENROLLED,
    )
    return owner_key, owner, signer_key, signer


def _report() -> bytes:
    info = DocumentInfo(title="Surface lay inspection report B1", subject="surfinspect report B1", created=ENROLLED)
    buf = io.BytesIO()
    c = archival_canvas(buf, info)
    c.drawString(40, 800, "report B1")
    c.showPage()
    c.save()
    return finish_archival(buf.getvalue(), info)


def test_certificates_chain_owner_to_signer_and_name_the_register_entry(pki):
    owner_key, owner, signer_key, signer = pki
    # reference: cryptography's own path check of one link (signature and issuer name)
    owner.verify_directly_issued_by(owner)
    signer.verify_directly_issued_by(owner)
    assert owner.extensions.get_extension_for_class(x509.BasicConstraints).value.ca is True
    assert signer.extensions.get_extension_for_class(x509.BasicConstraints).value.ca is False
    assert signer.extensions.get_extension_for_class(x509.KeyUsage).value.content_commitment is True
    assert signer.not_valid_after_utc == certs.NO_EXPIRY  # RFC 5280, 4.1.2.5
    assert certs.certificate_name(signer) == "Anna Berg"
    assert certs.certificate_key_raw(signer) == signer_key.public_key().public_bytes_raw()
    assert (
        certs.certificate_problems(
            signer,
            owner,
            public_key_raw=signer_key.public_key().public_bytes_raw(),
            printed_name="Anna Berg",
            archive_id=ARCHIVE,
        )
        == []
    )
    # the same register entry gives the same certificate (Ed25519 is deterministic, RFC 8032)
    again = certs.owner_certificate(
        owner_key, printed_name="Olga Owner", archive_id=ARCHIVE, entry_no=1, issued_at=ENROLLED
    )
    assert certs.certificate_der(again) == certs.certificate_der(owner)
    assert certs.load_certificate(certs.certificate_der(owner)) == owner


def test_certificate_problems_name_a_foreign_issuer_key_name_and_archive(pki):
    owner_key, owner, signer_key, signer = pki
    stranger = Ed25519PrivateKey.from_private_bytes(bytes(range(2, 34)))
    fake_owner = certs.owner_certificate(
        stranger, printed_name="Olga Owner", archive_id=ARCHIVE, entry_no=1, issued_at=ENROLLED
    )
    problems = certs.certificate_problems(
        signer,
        fake_owner,
        public_key_raw=stranger.public_key().public_bytes_raw(),
        printed_name="Ana Berg",
        archive_id="other",
    )
    assert len(problems) == 4
    assert problems[0].startswith("not issued by the archive owner's certificate")
    assert problems[1] == "certifies another key than the register's"
    assert problems[2] == "names 'Anna Berg', the register 'Ana Berg'"
    assert problems[3].startswith("belongs to another archive")


def test_a_name_longer_than_a_common_name_may_be_is_kept_whole(pki):
    owner_key, owner, signer_key, _ = pki
    name = "Dr. " + "Maximiliane " * 8 + "Oberstleitner-Habsburg"
    cert = certs.signer_certificate(
        owner_key,
        owner,
        signer_key.public_key().public_bytes_raw(),
        printed_name=name,
        role="inspector",
        archive_id=ARCHIVE,
        entry_no=9,
        issued_at=ENROLLED,
    )
    assert certs.certificate_name(cert) == name
    (cn,) = cert.subject.get_attributes_for_oid(x509.oid.NameOID.COMMON_NAME)
    assert (
        len(cn.value.encode()) <= 64 and cn.value.endswith("…") and name.startswith(cn.value[:-1])
    )  # RFC 5280 ub-common-name


def test_pyhanko_validates_a_signed_edition_intact_chained_to_the_owner_with_name_and_reason(pki):
    owner_key, owner, signer_key, signer = pki

    def sign_once() -> bytes:
        reason = signature_reason("released", "checked against drawing 2")
        return sign_pdf(_report(), signer_key, signer, owner, field_name="signoff-1", reason=reason, signed_at=SIGNED)

    signed = sign_once()
    (check,) = pdf_signatures(signed, owner)
    assert check.ok, check
    assert (check.intact, check.valid, check.trusted) == (True, True, True)
    assert check.signer_name == "Anna Berg" and check.reason == "released: checked against drawing 2"
    assert check.signed_at == SIGNED and check.key_raw == signer_key.public_key().public_bytes_raw()
    assert_pdfa_2b(signed)  # the signature field is printable, metadata still agree (ModDate = signing time)
    meta = PdfReader(io.BytesIO(signed)).metadata
    assert meta["/ModDate"] == "D:20250302103000+00'00'"
    assert signed == sign_once()  # the same edition, key and time: the same bytes


def test_a_second_signoff_is_an_incremental_update_and_both_signatures_validate(pki):
    owner_key, owner, signer_key, signer = pki
    first = sign_pdf(_report(), signer_key, signer, owner, field_name="signoff-1", reason="released", signed_at=SIGNED)
    second = sign_pdf(
        first,
        signer_key,
        signer,
        owner,
        field_name="signoff-2",
        reason="examined",
        signed_at=SIGNED + timedelta(hours=1),
    )
    assert second.startswith(first)  # ISO 32000-1, 7.5.6: an incremental update appends
    checks = pdf_signatures(second, owner)
    assert [c.field_name for c in checks] == ["signoff-1", "signoff-2"]
    assert all(c.ok for c in checks), checks
    import hashlib

    assert checks[0].covered_sha256 == hashlib.sha256(first).hexdigest()  # reference: hashlib
    assert checks[1].covered_sha256 == hashlib.sha256(second).hexdigest()
    assert checks[0].modified_after == "FORM_FILLING" and checks[1].modified_after == "NONE"
    assert_pdfa_2b(second)


def test_one_flipped_byte_in_the_signed_range_fails_validation(pki):
    owner_key, owner, signer_key, signer = pki
    signed = bytearray(
        sign_pdf(_report(), signer_key, signer, owner, field_name="signoff-1", reason="released", signed_at=SIGNED)
    )
    at = signed.index(b"report B1") if b"report B1" in signed else 200  # inside the first byte range
    signed[at] ^= 0x01
    (check,) = pdf_signatures(bytes(signed), owner)
    assert not check.intact and not check.ok


def test_a_signature_from_another_authority_is_not_trusted(pki):
    owner_key, owner, signer_key, signer = pki
    signed = sign_pdf(_report(), signer_key, signer, owner, field_name="signoff-1", reason="released", signed_at=SIGNED)
    other = certs.owner_certificate(
        Ed25519PrivateKey.from_private_bytes(bytes(range(3, 35))),
        printed_name="Olga Owner",
        archive_id=ARCHIVE,
        entry_no=1,
        issued_at=ENROLLED,
    )
    (check,) = pdf_signatures(signed, other)
    assert check.intact and not check.trusted and not check.ok


def test_garbage_is_named_not_raised(pki):
    (check,) = pdf_signatures(b"%PDF-1.7\nnot really", pki[1])
    assert not check.ok and "pyHanko cannot read the document" in check.problems[0]
