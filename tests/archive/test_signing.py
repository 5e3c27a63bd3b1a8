"""Tests for surfinspect.archive.signing: Ed25519 against RFC 8032, key files, canonical records."""

from __future__ import annotations

import json
import os
import stat

import pytest

from surfinspect.archive import signing
from surfinspect.archive.chain import canonical_bytes
from surfinspect.errors import InputError

# RFC 8032, section 7.1, "TEST 1" (https://doi.org/10.17487/RFC8032): an empty message.
RFC8032_SECRET_KEY = "9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60"
RFC8032_PUBLIC_KEY = "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a"
RFC8032_SIGNATURE = "e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065224901555fb8821590a33bacc61e39701cf9b46bd25bf5f0595bbe24655141438e7a100b"


def test_rfc8032_test_vector_1_through_project_functions():
    key = signing.SigningKey.from_secret_bytes(bytes.fromhex(RFC8032_SECRET_KEY), "RFC VECTOR")
    assert key.public_key_raw.hex() == RFC8032_PUBLIC_KEY
    signature = key.sign(b"")
    assert signature.hex() == RFC8032_SIGNATURE
    assert signing.verify_signature(bytes.fromhex(RFC8032_PUBLIC_KEY), b"", bytes.fromhex(RFC8032_SIGNATURE))
    # one flipped bit in the signature or a different message must fail
    bad = bytearray(bytes.fromhex(RFC8032_SIGNATURE))
    bad[0] ^= 1
    assert not signing.verify_signature(bytes.fromhex(RFC8032_PUBLIC_KEY), b"", bytes(bad))
    assert not signing.verify_signature(bytes.fromhex(RFC8032_PUBLIC_KEY), b"\x00", bytes.fromhex(RFC8032_SIGNATURE))


def test_rfc8032_test_vector_2_one_byte_message():
    # RFC 8032, section 7.1, "TEST 2" (https://doi.org/10.17487/RFC8032): the message is the one byte 0x72
    key = signing.SigningKey.from_secret_bytes(
        bytes.fromhex("4ccd089b28ff96da9db6c346ec114e0f5b8a319f35aba624da8cf6ed4fb8a6fb")
    )
    assert key.public_key_raw.hex() == "3d4017c3e843895a92b70aa74d1b7ebc9c982ccf2ec4968cc0cd55f12af4660c"
    expected = (
        "92a009a9f0d4cab8720e820b5f642540a2b27b5416503f8fb3762223ebdb69da"
        "085ac1e43e15996e458f3613d0f11d8c387b2eaeb4302aeeb00d291612bb0c00"
    )
    assert key.sign(b"\x72").hex() == expected
    assert signing.verify_signature(key.public_key_raw, b"\x72", bytes.fromhex(expected))


def test_fingerprint_is_sha256_of_raw_public_key():
    import hashlib  # reference: the plain SHA-256 of the 32 key bytes

    raw = bytes.fromhex(RFC8032_PUBLIC_KEY)
    assert signing.key_fingerprint(raw) == hashlib.sha256(raw).hexdigest()
    with pytest.raises(ValueError, match="32 bytes"):
        signing.key_fingerprint(raw[:31])


def _record(key: signing.SigningKey, **changes) -> dict:
    fields = dict(
        signer_name="R. OSTERMANN",
        key_fingerprint=key.fingerprint,
        signed_at_utc="2024-05-06T07:08:09Z",
        meaning="released",
        comment="Lot 17 released — ok",
        batch_id="LW220-0506",
        report_sha256="a" * 64,
        results_sha256={"LW-220-001.png": "b" * 64, "LW-220-002.png": "c" * 64},
    )
    fields.update(changes)
    return fields


def test_canonical_bytes_are_sorted_compact_utf8_and_order_independent():
    key = signing.SigningKey.generate()
    record = _record(key)
    data = canonical_bytes(record)
    reordered = dict(reversed(list(record.items())))
    assert canonical_bytes(reordered) == data
    # compared with the standard library's own compact, sorted form
    assert data == json.dumps(record, sort_keys=True, separators=(",", ":"), ensure_ascii=False).encode("utf-8")
    # worked by hand: keys sorted at every level, no blanks between tokens, non-ASCII as UTF-8
    nested = {"b": 1, "a": "\u00e9", "c": {"y": [1, 2], "x": "z"}}
    assert canonical_bytes(nested) == b'{"a":"\xc3\xa9","b":1,"c":{"x":"z","y":[1,2]}}'
    with pytest.raises(ValueError, match="only strings, integers"):
        canonical_bytes({**record, "x": 0.1})


def test_record_signature_binds_every_field():
    key = signing.SigningKey.generate()
    record = _record(key)
    signature = signing.sign_record(key, record)
    assert signing.verify_record(key.public_key_raw, record, signature)
    for field, value in [
        ("meaning", "withheld"),
        ("signed_at_utc", "2024-05-06T07:08:10Z"),
        ("batch_id", "LW220-0507"),
        ("report_sha256", "d" * 64),
        ("results_sha256", {"LW-220-001.png": "b" * 64}),
        ("signer_name", "SOMEONE ELSE"),
    ]:
        assert not signing.verify_record(key.public_key_raw, {**record, field: value}, signature), field
    other = signing.SigningKey.generate()
    assert not signing.verify_record(other.public_key_raw, record, signature)
    with pytest.raises(ValueError, match="does not belong to the signing key"):
        signing.sign_record(other, record)


def test_key_files_round_trip_with_owner_only_mode(tmp_path):
    path = tmp_path / "ostermann.key"
    key = signing.write_key_pair(path, "  R.  OSTERMANN ", passphrase=None)
    assert key.label == "R. OSTERMANN"
    assert stat.S_IMODE(os.stat(path).st_mode) == 0o600
    loaded = signing.load_signing_key(path)
    assert loaded.fingerprint == key.fingerprint and loaded.label == "R. OSTERMANN"
    public = signing.load_public_key(signing.public_key_path_for(path))
    assert public.public_key_raw == key.public_key_raw and public.label == "R. OSTERMANN"
    assert "PRIVATE" not in signing.public_key_path_for(path).read_text()
    with pytest.raises(InputError, match="file exists; a key file is never overwritten"):
        signing.write_key_pair(path, "R. OSTERMANN", passphrase=None)
    assert [p.name for p in sorted(tmp_path.iterdir())] == ["ostermann.key", "ostermann.key.pub"]
    with pytest.raises(InputError, match=r"^--out .*: is a folder \(allowed: a new file name for the private key\)$"):
        signing.write_key_pair(tmp_path, "R. OSTERMANN", passphrase=None)


def test_passphrase_protected_key(tmp_path):
    path = tmp_path / "k.key"
    key = signing.write_key_pair(path, "J. PIRES", passphrase=b"correct horse")
    assert "ENCRYPTED PRIVATE KEY" in path.read_text()
    with pytest.raises(InputError, match="passphrase-protected"):
        signing.load_signing_key(path)
    with pytest.raises(InputError, match="wrong passphrase or damaged file"):
        signing.load_signing_key(path, passphrase=b"wrong")
    assert signing.load_signing_key(path, passphrase=b"correct horse").fingerprint == key.fingerprint
    asked = []
    loaded = signing.load_signing_key(path, passphrase=lambda: asked.append(1) or b"correct horse")
    assert loaded.fingerprint == key.fingerprint and asked == [1]  # asked only for a protected key
    plain = tmp_path / "plain.key"
    signing.write_key_pair(plain, "", passphrase=None)
    signing.load_signing_key(plain, passphrase=lambda: pytest.fail("asked for an unprotected key"))


@pytest.mark.parametrize("mode", [0o644, 0o640, 0o604, 0o666, 0o660])
def test_private_key_readable_by_others_is_refused_with_the_chmod_to_run(tmp_path, mode):
    path = tmp_path / "k.key"
    signing.write_key_pair(path, "", passphrase=None)
    os.chmod(path, mode)
    with pytest.raises(InputError, match=rf"mode {mode:04o}, allowed 0600 or 0400\); run: chmod 600 .*k\.key$"):
        signing.load_signing_key(path)
    os.chmod(path, 0o400)
    assert signing.load_signing_key(path).fingerprint


def test_altered_key_file_is_refused(tmp_path):
    path = tmp_path / "k.key"
    signing.write_key_pair(path, "J. PIRES", passphrase=None)
    doc = json.loads(path.read_text())
    doc["key_fingerprint"] = "0" * 64
    path.write_text(json.dumps(doc))
    with pytest.raises(InputError, match="key_fingerprint: does not match the key in the file"):
        signing.load_signing_key(path)
    path.write_text("[]")
    with pytest.raises(InputError, match="format: not a surfinspect key file"):
        signing.load_signing_key(path)
    with pytest.raises(InputError, match="key file not found"):
        signing.load_signing_key(tmp_path / "missing.key")
