"""Electronic sign-off: Ed25519 key pairs, the canonical sign-off record, signatures.

A sign-off binds a person's printed name, the time (UTC), the meaning of the
signature and the SHA-256 of every record it covers (the batch report and each
part result) into one canonical byte string, and signs that string with the
signer's Ed25519 key [1]_. Because the covered hashes are inside the signed
bytes, a signature cannot be moved onto another record.

Key files
---------
``surfinspect keygen --out KEYFILE`` writes two small UTF-8 JSON documents:

``KEYFILE`` (the private key; mode 0600 from the moment it exists)::

    {"format": "surfinspect.signing-key/1",
     "signer_name": "A. N. INSPECTOR",
     "key_fingerprint": "<64 hex>",
     "passphrase_protected": true | false,
     "private_key_pem": "-----BEGIN (ENCRYPTED) PRIVATE KEY-----..."}

``KEYFILE.pub`` (the public key, to hand to auditors)::

    {"format": "surfinspect.public-key/1",
     "signer_name": ..., "key_fingerprint": ...,
     "public_key_pem": "-----BEGIN PUBLIC KEY-----..."}

The private key is PKCS #8 PEM, encrypted with the best scheme the
``cryptography`` package offers when a passphrase is given. The key
fingerprint is the SHA-256 of the raw 32-byte public key, in hex.

References
----------
.. [1] Josefsson, S. and Liusvaara, I. (2017). Edwards-Curve Digital Signature
   Algorithm (EdDSA). RFC 8032. https://doi.org/10.17487/RFC8032
"""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

from cryptography.exceptions import InvalidSignature
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey, Ed25519PublicKey

from ..errors import InputError
from ..fsutil import atomic_path
from ..results import SIGNOFF_MEANINGS

__all__ = [
    "MEANINGS",
    "RECORD_FORMAT",
    "SigningKey",
    "PublicKeyInfo",
    "key_fingerprint",
    "verify_signature",
    "write_key_pair",
    "load_signing_key",
    "load_public_key",
    "public_key_path_for",
    "passphrase_from_env",
    "make_signoff_record",
    "canonical_record_bytes",
    "sign_record",
    "verify_record",
]

#: Allowed meanings of a sign-off.
MEANINGS = SIGNOFF_MEANINGS
RECORD_FORMAT = "surfinspect.signoff-record/1"
PRIVATE_KEY_FORMAT = "surfinspect.signing-key/1"
PUBLIC_KEY_FORMAT = "surfinspect.public-key/1"

_RAW = serialization.Encoding.Raw, serialization.PublicFormat.Raw


def key_fingerprint(public_key_raw: bytes) -> str:
    """SHA-256 of the raw 32-byte Ed25519 public key, as 64 lower-case hex digits."""
    if len(public_key_raw) != 32:
        raise ValueError(f"an Ed25519 public key has 32 bytes (got {len(public_key_raw)})")
    return hashlib.sha256(public_key_raw).hexdigest()


@dataclass(frozen=True)
class SigningKey:
    """A signer's private key together with the printed name it belongs to."""

    signer_name: str
    private_key: Ed25519PrivateKey

    @classmethod
    def generate(cls, signer_name: str) -> "SigningKey":
        return cls(_check_name(signer_name), Ed25519PrivateKey.generate())

    @classmethod
    def from_secret_bytes(cls, secret_key: bytes, signer_name: str) -> "SigningKey":
        """Build a key from the 32-byte secret (the RFC 8032 "secret key")."""
        return cls(_check_name(signer_name), Ed25519PrivateKey.from_private_bytes(secret_key))

    @property
    def public_key_raw(self) -> bytes:
        return self.private_key.public_key().public_bytes(*_RAW)

    @property
    def fingerprint(self) -> str:
        return key_fingerprint(self.public_key_raw)

    def sign(self, message: bytes) -> bytes:
        """The 64-byte Ed25519 signature of ``message``."""
        return self.private_key.sign(message)


@dataclass(frozen=True)
class PublicKeyInfo:
    signer_name: str
    public_key_raw: bytes

    @property
    def fingerprint(self) -> str:
        return key_fingerprint(self.public_key_raw)


def verify_signature(public_key_raw: bytes, message: bytes, signature: bytes) -> bool:
    """True when ``signature`` is a valid Ed25519 signature of ``message`` under the key."""
    try:
        Ed25519PublicKey.from_public_bytes(public_key_raw).verify(signature, message)
    except (InvalidSignature, ValueError):
        return False
    return True


def _check_name(signer_name: str) -> str:
    name = " ".join(str(signer_name).split())
    if not name:
        raise InputError("--name: the signer's printed name is empty (give the name as it should appear on reports)")
    return name


# ----------------------------------------------------------------- key files


def public_key_path_for(key_path: str | os.PathLike) -> Path:
    """Where ``keygen`` puts the public key beside a private key file."""
    key_path = Path(key_path)
    return key_path.with_name(key_path.name + ".pub")


def write_key_pair(key_path: str | os.PathLike, signer_name: str, *, passphrase: bytes | None = None) -> SigningKey:
    """Generate a key pair and write ``key_path`` (private, mode 0600) and ``key_path.pub``.

    Raises
    ------
    InputError
        When ``key_path`` is a folder, either file already exists (a key is
        never overwritten) or the passphrase is empty.
    """
    key_path = Path(key_path)
    pub_path = public_key_path_for(key_path)
    if key_path.is_dir():
        raise InputError(f"--out {key_path}: is a folder (allowed: a new file name for the private key)")
    for p in (key_path, pub_path):
        if p.exists():
            raise InputError(f"{p}: file exists; a key file is never overwritten (choose another --out)")
    if passphrase is not None and not passphrase:
        raise InputError("passphrase: the passphrase is empty (set a non-empty value or leave out --passphrase-env)")
    key = SigningKey.generate(signer_name)
    encryption = serialization.BestAvailableEncryption(passphrase) if passphrase else serialization.NoEncryption()
    pem = key.private_key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8, encryption)
    private_doc = {
        "format": PRIVATE_KEY_FORMAT,
        "signer_name": key.signer_name,
        "key_fingerprint": key.fingerprint,
        "passphrase_protected": bool(passphrase),
        "private_key_pem": pem.decode("ascii"),
    }
    public_pem = key.private_key.public_key().public_bytes(
        serialization.Encoding.PEM, serialization.PublicFormat.SubjectPublicKeyInfo
    )
    public_doc = {
        "format": PUBLIC_KEY_FORMAT,
        "signer_name": key.signer_name,
        "key_fingerprint": key.fingerprint,
        "public_key_pem": public_pem.decode("ascii"),
    }
    with atomic_path(key_path, mode=0o600) as tmp:
        # owner-only from the start: set on the empty temporary file, before any key byte is written
        os.chmod(tmp, 0o600)
        tmp.write_text(json.dumps(private_doc, indent=2) + "\n", encoding="utf-8")
    with atomic_path(pub_path) as tmp:
        tmp.write_text(json.dumps(public_doc, indent=2) + "\n", encoding="utf-8")
    return key


def _read_key_document(path: Path, expected_format: str) -> dict:
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(f"{path}: key file not found") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"{path}: not a surfinspect key file ({exc})") from None
    if not isinstance(doc, dict) or doc.get("format") != expected_format:
        got = doc.get("format") if isinstance(doc, dict) else type(doc).__name__
        raise InputError(f"{path}: format: not a surfinspect key file (got {got!r}, allowed {expected_format!r})")
    return doc


def load_signing_key(key_path: str | os.PathLike, *, passphrase: bytes | None = None) -> SigningKey:
    """Read a private key file written by :func:`write_key_pair`.

    Raises
    ------
    InputError
        When the file is missing or malformed, the passphrase is missing or
        wrong, or the stored fingerprint does not belong to the key.
    """
    path = Path(key_path)
    doc = _read_key_document(path, PRIVATE_KEY_FORMAT)
    if doc.get("passphrase_protected") and not passphrase:
        raise InputError(
            f"{path}: the key is passphrase-protected; give --passphrase-env VAR naming a variable that holds it"
        )
    try:
        private = serialization.load_pem_private_key(
            str(doc["private_key_pem"]).encode("ascii"),
            password=passphrase if doc.get("passphrase_protected") else None,
        )
    except (KeyError, ValueError, TypeError) as exc:
        raise InputError(f"{path}: private_key_pem: cannot be read (wrong passphrase or damaged file: {exc})") from None
    if not isinstance(private, Ed25519PrivateKey):
        raise InputError(f"{path}: private_key_pem: not an Ed25519 key (got {type(private).__name__})")
    key = SigningKey(_check_name(doc.get("signer_name", "")), private)
    if doc.get("key_fingerprint") != key.fingerprint:
        raise InputError(f"{path}: key_fingerprint: does not match the key in the file (the file was altered)")
    return key


def load_public_key(path: str | os.PathLike) -> PublicKeyInfo:
    """Read a public key file written by :func:`write_key_pair`."""
    path = Path(path)
    doc = _read_key_document(path, PUBLIC_KEY_FORMAT)
    try:
        public = serialization.load_pem_public_key(str(doc["public_key_pem"]).encode("ascii"))
    except (KeyError, ValueError, TypeError) as exc:
        raise InputError(f"{path}: public_key_pem: cannot be read ({exc})") from None
    if not isinstance(public, Ed25519PublicKey):
        raise InputError(f"{path}: public_key_pem: not an Ed25519 key (got {type(public).__name__})")
    info = PublicKeyInfo(str(doc.get("signer_name", "")), public.public_bytes(*_RAW))
    if doc.get("key_fingerprint") != info.fingerprint:
        raise InputError(f"{path}: key_fingerprint: does not match the key in the file (the file was altered)")
    return info


# ----------------------------------------------------------- sign-off record


def make_signoff_record(
    *,
    signer_name: str,
    key_fingerprint: str,
    signed_at_utc: str,
    meaning: str,
    comment: str,
    batch_id: str,
    report_sha256: str,
    results_sha256: Mapping[str, str],
) -> dict:
    """The sign-off record as a plain dict (what :func:`canonical_record_bytes` serialises).

    ``results_sha256`` maps each part's key in the batch to the SHA-256 of its
    stored result JSON.

    Raises
    ------
    InputError
        For a meaning other than those in :data:`MEANINGS`.
    """
    if meaning not in MEANINGS:
        raise InputError(f"--meaning: unknown meaning (got {meaning!r}, allowed {', '.join(MEANINGS)})")
    return {
        "format": RECORD_FORMAT,
        "signer_name": signer_name,
        "key_fingerprint": key_fingerprint,
        "signed_at_utc": signed_at_utc,
        "meaning": meaning,
        "comment": comment,
        "batch_id": batch_id,
        "report_sha256": report_sha256,
        "results_sha256": dict(results_sha256),
    }


def canonical_record_bytes(record: Mapping[str, Any]) -> bytes:
    """The one byte string a record is signed as: JSON, sorted keys, no spaces, UTF-8.

    Only strings, integers, lists and objects are allowed, so that the bytes
    never depend on how a float is printed.
    """
    _check_canonical_value(record, "record")
    return json.dumps(record, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False).encode(
        "utf-8"
    )


def _check_canonical_value(value: Any, where: str) -> None:
    if isinstance(value, Mapping):
        for k, v in value.items():
            if not isinstance(k, str):
                raise ValueError(f"{where}: keys must be strings (got {k!r})")
            _check_canonical_value(v, f"{where}.{k}")
    elif isinstance(value, (list, tuple)):
        for i, v in enumerate(value):
            _check_canonical_value(v, f"{where}[{i}]")
    elif isinstance(value, bool) or value is None or isinstance(value, (str, int)):
        return
    else:
        raise ValueError(f"{where}: only strings, integers, lists and objects are signed (got {type(value).__name__})")


def sign_record(key: SigningKey, record: Mapping[str, Any]) -> bytes:
    """Sign a record with ``key``; the record must name this key and its signer."""
    if record.get("key_fingerprint") != key.fingerprint:
        raise ValueError("record.key_fingerprint does not belong to the signing key")
    if record.get("signer_name") != key.signer_name:
        raise ValueError("record.signer_name is not the name held with the signing key")
    return key.sign(canonical_record_bytes(record))


def verify_record(public_key_raw: bytes, record: Mapping[str, Any], signature: bytes) -> bool:
    """True when the signature holds over the record and the record names this key."""
    if record.get("key_fingerprint") != key_fingerprint(public_key_raw):
        return False
    return verify_signature(public_key_raw, canonical_record_bytes(record), signature)


def passphrase_from_env(variable: str | None) -> bytes | None:
    """The passphrase held in environment variable ``variable`` (None when no variable is named).

    Raises
    ------
    InputError
        When the variable is not set or is empty.
    """
    if variable is None:
        return None
    value = os.environ.get(variable)
    if not value:
        raise InputError(f"--passphrase-env: environment variable {variable!r} is not set or empty")
    return value.encode("utf-8")
