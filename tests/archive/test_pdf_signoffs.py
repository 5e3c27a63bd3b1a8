"""The PDF signatures of sign-offs through the archive and the command line: enrolment issues certificates,
sign-offs PDF-sign their editions (later ones incrementally), ``owner-certificate`` exports the trust root,
and ``verify`` checks every signed edition with pyHanko against the archive's records."""

from __future__ import annotations

import hashlib

import pytest
from archive_helpers import BATCH, full_archive, render
from pdfa_checks import assert_pdfa_2b

from surfinspect.archive import certificates as certs
from surfinspect.archive import pki, signatures
from surfinspect.archive import store as arc
from surfinspect.archive.pdf_signature import pdf_signatures
from surfinspect.archive.verify import verify_archive
from surfinspect.cli.main import main


@pytest.fixture
def signed(tmp_path):
    root, keys = full_archive(tmp_path, disposition=False)
    return root, keys


def _editions(root) -> list[bytes]:
    with arc.Archive(root) as a:
        return [a.read_object(s.signed_report_sha256) for s in a.signoffs(BATCH)]


def _exported_owner_certificate(root, out, capsys):
    # the helper's person has no PDF key: its PDF signatures chain to the owner's Ed25519 certificate
    assert main(["owner-certificate", "--archive", str(root), "--out", str(out), "--algorithm", "ed25519"]) == 0
    printed = capsys.readouterr().out
    cert = certs.load_certificate(out.read_bytes())
    assert f"SHA-256 fingerprint {certs.certificate_sha256(cert)}" in printed
    return cert


def test_enrolment_issues_certificates_that_chain_to_the_owner(signed):
    root, keys = signed
    with arc.Archive(root) as a:
        register = a.register()
        owner = pki.owner_certificate_of(a, register)
        person = pki.certificate_of(a, keys.person.fingerprint, register)
        station = pki.certificate_of(a, keys.station.fingerprint, register)
    owner.verify_directly_issued_by(owner)  # reference: cryptography's check of one certificate link
    person.verify_directly_issued_by(owner)
    station.verify_directly_issued_by(owner)
    assert certs.certificate_name(owner) == "M. QUALITY" and certs.certificate_name(person) == "R. OSTERMANN"
    assert certs.certificate_key_raw(person) == keys.person.public_key_raw


def test_pyhanko_validates_the_signed_edition_against_the_exported_owner_certificate(signed, tmp_path, capsys):
    root, _ = signed
    owner = _exported_owner_certificate(root, tmp_path / "owner.pem", capsys)
    (edition,) = _editions(root)
    (check,) = pdf_signatures(edition, owner)
    assert check.ok and check.intact and check.valid and check.trusted
    with arc.Archive(root) as a:
        (row,) = a.signoffs(BATCH)
    assert check.signer_name == row.signer_name == "R. OSTERMANN"
    assert check.reason == f"{row.meaning}: {row.comment}" == "released: lot 17"
    assert hashlib.sha256(check.key_raw).hexdigest() == row.key_fingerprint
    assert check.covered_sha256 == row.signed_report_sha256
    assert_pdfa_2b(edition)
    # DER export: the same certificate
    der = _exported_owner_certificate(root, tmp_path / "owner.cer", capsys)
    assert der == owner and (tmp_path / "owner.cer").read_bytes() == certs.certificate_der(owner)


def test_a_second_signoff_keeps_both_signatures_valid(signed, tmp_path, capsys):
    root, keys = signed
    with arc.Archive(root) as a:
        signatures.sign_batch(a, BATCH, keys.person, meaning="examined", comment="second look", render_edition=render)
    first, second = _editions(root)
    assert second.startswith(first)  # an incremental update of the first edition
    owner = _exported_owner_certificate(root, tmp_path / "owner.pem", capsys)
    checks = pdf_signatures(second, owner)
    assert [c.ok for c in checks] == [True, True]
    assert [c.reason for c in checks] == ["released: lot 17", "examined: second look"]
    assert_pdfa_2b(second)
    assert verify_archive(root).problems == []


def test_one_flipped_byte_in_the_signed_range_fails_validation_and_verify(signed, tmp_path, capsys):
    root, _ = signed
    with arc.Archive(root) as a:
        (row,) = a.signoffs(BATCH)
        path = a.object_path(row.signed_report_sha256)
    data = bytearray(path.read_bytes())
    data[400] ^= 0x01  # inside the first byte range (the range ends where the signature's contents begin)
    path.chmod(0o600)
    path.write_bytes(bytes(data))
    assert main(["verify", "--archive", str(root)]) == 1
    out = capsys.readouterr().out
    assert (
        f"batch {BATCH}: signed edition 1 (SHA-256 {row.signed_report_sha256[:16]}…): PDF signature 1 "
        "(R. OSTERMANN): its signed bytes were changed" in out
    )


def test_a_revoked_signers_certificate_is_reported_by_verify(signed, tmp_path, capsys):
    root, keys = signed
    with arc.Archive(root) as a:
        signatures.revoke_signer(a, keys.owner, keys.person.fingerprint, "left the company")
    assert main(["verify", "--archive", str(root)]) == 0  # signed before the revocation: still valid
    captured = capsys.readouterr()
    assert "PDF signature 1: the certificate of R. OSTERMANN was revoked at" in captured.err + captured.out
    assert "after it signed" in captured.err + captured.out
    assert main(["verify", "--strict", "--archive", str(root)]) == 1


def test_owner_certificate_refuses_what_it_cannot_write(tmp_path, capsys):
    empty = tmp_path / "empty"
    assert main(["keygen", "--out", str(tmp_path / "o.key"), "--no-passphrase"]) == 0
    assert (
        main(["owner", "init", "--archive", str(empty), "--name", "M. QUALITY", "--key", str(tmp_path / "o.key")]) == 0
    )
    capsys.readouterr()
    assert main(["owner-certificate", "--archive", str(empty), "--out", str(tmp_path / "o.txt")]) == 2
    assert "--out" in capsys.readouterr().err
    assert main(["owner-certificate", "--archive", str(empty), "--out", str(tmp_path / "o.pem")]) == 0
    bare = tmp_path / "bare"
    bare.mkdir()
    assert main(["owner-certificate", "--archive", str(bare), "--out", str(tmp_path / "b.pem")]) == 2
