"""Tests for surfinspect.archive.pdf_checks: each way a signed edition can disagree with the archive's
sign-off records is named, and an intact pair of editions gives no finding."""

from __future__ import annotations

import hashlib
from dataclasses import replace
from datetime import timedelta

import pytest
from test_pdf_signature import SIGNED, _report, pki  # noqa: F401 - the fixture

from surfinspect.archive.pdf_checks import Revocation, SignedEdition, edition_findings
from surfinspect.archive.pdf_signature import sign_pdf, signature_reason


@pytest.fixture(scope="module")
def editions(pki):  # noqa: F811 - the fixture of test_pdf_signature
    owner_key, owner, signer_key, signer = pki
    fp = hashlib.sha256(signer_key.public_key().public_bytes_raw()).hexdigest()
    times = [SIGNED, SIGNED + timedelta(hours=2)]
    first = sign_pdf(
        _report(),
        signer_key,
        signer,
        owner,
        field_name="signoff-1",
        reason=signature_reason("released", "ok"),
        signed_at=times[0],
    )
    second = sign_pdf(first, signer_key, signer, owner, field_name="signoff-2", reason="examined", signed_at=times[1])
    return [
        SignedEdition(
            1, "Anna Berg", fp, "released", "ok", "2025-03-02T10:30:00Z", hashlib.sha256(first).hexdigest(), first
        ),
        SignedEdition(
            2, "Anna Berg", fp, "examined", "", "2025-03-02T12:30:00Z", hashlib.sha256(second).hexdigest(), second
        ),
    ]


def test_intact_editions_have_no_finding(pki, editions):  # noqa: F811
    assert edition_findings("B1", editions, pki[1], {}) == ([], [])


def test_a_flipped_byte_in_the_first_signed_range_is_named_in_both_editions(pki, editions):  # noqa: F811
    first, second = editions
    at = 300
    bad1 = bytearray(first.edition)
    bad1[at] ^= 1
    bad2 = bytearray(second.edition)
    bad2[at] ^= 1
    tampered = [replace(first, edition=bytes(bad1)), replace(second, edition=bytes(bad2))]
    problems, _ = edition_findings("B1", tampered, pki[1], {})
    assert any(
        p.startswith("batch B1: signed edition 1 (SHA-256 ")
        and "PDF signature 1 (Anna Berg): its signed bytes were changed" in p
        for p in problems
    ), problems
    assert any(
        "signed edition 2" in p and "PDF signature 1 (Anna Berg): its signed bytes were changed" in p for p in problems
    )


def test_a_record_that_says_otherwise_than_the_signature_is_named(pki, editions):  # noqa: F811
    first, second = editions
    lied = [replace(first, meaning="withheld", signer_name="Ana Berg", signed_at_utc="2025-03-02T10:31:00Z"), second]
    problems, _ = edition_findings("B1", lied, pki[1], {})
    text = "\n".join(problems)
    assert "PDF signature 1 (Ana Berg): its certificate names 'Anna Berg', the record 'Ana Berg'" in text
    assert "its reason is 'released: ok', the record's meaning and comment 'withheld: ok'" in text
    assert "its time is 2025-03-02T10:30:00Z, the record's 2025-03-02T10:31:00Z" in text


def test_an_edition_that_is_not_the_earlier_one_plus_a_signature_is_named(pki, editions):  # noqa: F811
    first, second = editions
    # the archive's record of edition 1 names other bytes than signature 1 of edition 2 covers
    problems, _ = edition_findings("B1", [replace(first, edition_sha256="0" * 64), second], pki[1], {})
    assert any(
        "signed edition 2" in p and "are not signed edition 1 as recorded (0000000000000000…)" in p for p in problems
    ), problems


def test_an_edition_with_a_signature_missing_is_named(pki, editions):  # noqa: F811
    first, second = editions
    problems, _ = edition_findings("B1", [first, replace(second, edition=first.edition)], pki[1], {})
    assert any(
        "signed edition 2" in p
        and "carries PDF signatures ['signoff-1'], the archive records ['signoff-1', 'signoff-2']" in p
        for p in problems
    ), problems


def test_a_revoked_signers_certificate_is_reported(pki, editions):  # noqa: F811
    fp = editions[0].key_fingerprint
    later = {fp: Revocation("Anna Berg", "2025-03-05T00:00:00Z", 7)}
    problems, warnings = edition_findings("B1", editions, pki[1], later)
    assert problems == [] and len(warnings) == 2
    assert (
        "PDF signature 1: the certificate of Anna Berg was revoked at 2025-03-05T00:00:00Z (register entry 7), "
        "after it signed" in warnings[0]
    )
    before = {fp: Revocation("Anna Berg", "2025-03-02T11:00:00Z", 7)}
    problems, warnings = edition_findings("B1", editions, pki[1], before)
    assert any(
        "signed edition 2" in p and "revoked at 2025-03-02T11:00:00Z (register entry 7), before it signed" in p
        for p in problems
    )


def test_an_unreadable_edition_is_named(pki, editions):  # noqa: F811
    problems, _ = edition_findings("B1", [replace(editions[0], edition=None)], pki[1], {})
    assert problems == [
        f"batch B1: signed edition 1 (SHA-256 {editions[0].edition_sha256[:16]}…): cannot be read, "
        "its PDF signatures are not checked"
    ]
