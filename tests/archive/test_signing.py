"""Tests for surfinspect.archive.signing: Ed25519 against RFC 8032, key files, canonical records."""

from __future__ import annotations

import json
import os
import stat

import pytest

from surfinspect.archive import signing
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


def test_fingerprint_is_sha256_of_raw_public_key():
    import hashlib  # reference: the plain SHA-256 of the 32 key bytes

    raw = bytes.fromhex(RFC8032_PUBLIC_KEY)
    assert signing.key_fingerprint(raw) == hashlib.sha256(raw).hexdigest()
    with pytest.raises(ValueError, match="32 bytes"):
        signing.key_fingerprint(raw[:31])


def _record(key: signing.SigningKey, **changes) -> dict:
    fields = dict(
        signer_name=key.signer_name,
        key_fingerprint=key.fingerprint,
        signed_at_utc="2024-05-06T07:08:09Z",
        meaning="released",
        comment="Lot 17 released — ok",
        batch_id="LW220-0506",
        report_sha256="a" * 64,
        results_sha256={"LW-220-001.png": "b" * 64, "LW-220-002.png": "c" * 64},
    )
    fields.update(changes)
    return signing.make_signoff_record(**fields)


def test_canonical_bytes_are_sorted_compact_utf8_and_order_independent():
    key = signing.SigningKey.generate("R. OSTERMANN")
    record = _record(key)
    data = signing.canonical_record_bytes(record)
    reordered = dict(reversed(list(record.items())))
    assert signing.canonical_record_bytes(reordered) == data
    # compared with the standard library's own compact, sorted form
    assert data == json.dumps(record, sort_keys=True, separators=(",", ":"), ensure_ascii=False).encode("utf-8")
    # worked by hand: keys sorted at every level, no blanks between tokens, non-ASCII as UTF-8
    nested = {"b": 1, "a": "\u00e9", "c": {"y": [1, 2], "x": "z"}}
    assert signing.canonical_record_bytes(nested) == b'{"a":"\xc3\xa9","b":1,"c":{"x":"z","y":[1,2]}}'
    with pytest.raises(ValueError, match="only strings, integers"):
        signing.canonical_record_bytes({**record, "x": 0.1})


def test_record_signature_binds_every_field():
    key = signing.SigningKey.generate("R. OSTERMANN")
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
    other = signing.SigningKey.generate("R. OSTERMANN")
    assert not signing.verify_record(other.public_key_raw, record, signature)


def test_record_meaning_is_checked():
    key = signing.SigningKey.generate("R. OSTERMANN")
    with pytest.raises(
        InputError, match=r"--meaning: unknown meaning \(got 'ok', allowed released, withheld, examined\)"
    ):
        _record(key, meaning="ok")


def test_key_files_round_trip_with_owner_only_mode(tmp_path):
    path = tmp_path / "ostermann.key"
    key = signing.write_key_pair(path, "  R.  OSTERMANN ")
    assert key.signer_name == "R. OSTERMANN"
    assert stat.S_IMODE(os.stat(path).st_mode) == 0o600
    loaded = signing.load_signing_key(path)
    assert loaded.fingerprint == key.fingerprint and loaded.signer_name == "R. OSTERMANN"
    public = signing.load_public_key(signing.public_key_path_for(path))
    assert public.public_key_raw == key.public_key_raw and public.signer_name == "R. OSTERMANN"
    assert "PRIVATE" not in signing.public_key_path_for(path).read_text()
    with pytest.raises(InputError, match="file exists; a key file is never overwritten"):
        signing.write_key_pair(path, "R. OSTERMANN")
    assert [p.name for p in sorted(tmp_path.iterdir())] == ["ostermann.key", "ostermann.key.pub"]
    with pytest.raises(InputError, match=r"^--out .*: is a folder \(allowed: a new file name for the private key\)$"):
        signing.write_key_pair(tmp_path, "R. OSTERMANN")


def test_passphrase_protected_key(tmp_path):
    path = tmp_path / "k.key"
    key = signing.write_key_pair(path, "J. PIRES", passphrase=b"correct horse")
    assert "ENCRYPTED PRIVATE KEY" in path.read_text()
    with pytest.raises(InputError, match="passphrase-protected"):
        signing.load_signing_key(path)
    with pytest.raises(InputError, match="wrong passphrase or damaged file"):
        signing.load_signing_key(path, passphrase=b"wrong")
    assert signing.load_signing_key(path, passphrase=b"correct horse").fingerprint == key.fingerprint


def test_altered_key_file_is_refused(tmp_path):
    path = tmp_path / "k.key"
    signing.write_key_pair(path, "J. PIRES")
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
