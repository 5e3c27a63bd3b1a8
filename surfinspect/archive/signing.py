"""Ed25519 key pairs and key files, and signing canonical records.

A signature is made over the canonical bytes of a record
(:func:`.chain.canonical_bytes`) with the signer's Ed25519 key [1]_. Because
every covered hash is inside the signed bytes, a signature cannot be moved
onto another record.

Key files
---------
``surfinspect keygen --out KEYFILE`` writes two small UTF-8 JSON documents:

``KEYFILE`` (the private keys; mode 0600 from the moment it exists)::

    {"format": "surfinspect.signing-key/2",
     "signer_name": "a label for the key's holder (never printed on a record)",
     "key_fingerprint": "<64 hex>",
     "passphrase_protected": true | false,
     "private_key_pem": "-----BEGIN (ENCRYPTED) PRIVATE KEY-----...",
     "pdf_public_key_hex": "<DER SubjectPublicKeyInfo of the PDF key, hex>",
     "pdf_private_key_pem": "-----BEGIN (ENCRYPTED) PRIVATE KEY-----..."}

``KEYFILE.pub`` (the public keys, to hand to the archive's owner for enrolment)::

    {"format": "surfinspect.public-key/2",
     "signer_name": ..., "key_fingerprint": ...,
     "public_key_pem": "-----BEGIN PUBLIC KEY-----...",
     "pdf_public_key_pem": "-----BEGIN PUBLIC KEY-----...",
     "pdf_key_binding_hex": "<Ed25519 signature of the binding record, hex>"}

Two keys per holder: the **Ed25519 key** [1]_ is the identity: its
fingerprint is the key's name everywhere, it signs every record and chain
head. The **PDF key** (ECDSA on NIST P-256 [2]_, SHA-256) makes the PDF
signatures of the signed editions only, because most PDF readers (poppler,
and with it Evince and Okular; NSS) cannot verify Ed25519 in a PDF
signature. The public key file binds the two: the Ed25519 key signs the
canonical record ``{"format": "surfinspect.pdf-key-binding/1",
"key_fingerprint", "pdf_public_key_hex"}`` (:func:`pdf_key_binding`), and
the owner's register entry names both keys. Both private keys are encrypted
with the same passphrase.

Key files of format ``/1`` (an Ed25519 key only) still load; their PDF
signatures are Ed25519 ones, as before. ``surfinspect keygen --upgrade
KEYFILE`` adds a PDF key to such a file.

The private key is PKCS #8 PEM, encrypted with the best scheme the
``cryptography`` package offers (``BestAvailableEncryption``) unless the key
was made with ``--no-passphrase``. The key fingerprint is the SHA-256 of the
raw 32-byte public key, in hex. The ``signer_name`` in a key file is a label
only: the printed name on every signature comes from the archive's signer
register. A private key file that group or others may read is refused.

References
----------
.. [1] Josefsson, S. and Liusvaara, I. (2017). Edwards-Curve Digital Signature
   Algorithm (EdDSA). RFC 8032. https://doi.org/10.17487/RFC8032
.. [2] NIST (2023). Digital Signature Standard (DSS). FIPS 186-5. https://doi.org/10.6028/NIST.FIPS.186-5
"""

from __future__ import annotations

import hashlib
import json
import os
import stat
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Mapping

from cryptography.exceptions import InvalidSignature
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric import ec
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey, Ed25519PublicKey

from ..errors import InputError
from ..fsutil import atomic_path
from .chain import canonical_bytes

__all__ = [
    "PRIVATE_KEY_FORMAT",
    "PUBLIC_KEY_FORMAT",
    "SigningKey",
    "PublicKeyInfo",
    "key_fingerprint",
    "verify_signature",
    "write_key_pair",
    "load_signing_key",
    "load_public_key",
    "upgrade_key_file",
    "spki_der",
    "pdf_key_binding",
    "binding_holds",
    "UPGRADE_HINT",
    "public_key_path_for",
    "passphrase_from_env",
    "sign_record",
    "verify_record",
]

PRIVATE_KEY_FORMAT = "surfinspect.signing-key/2"
PUBLIC_KEY_FORMAT = "surfinspect.public-key/2"
#: Key files of the first format (an Ed25519 key only) still load.
OLD_PRIVATE_KEY_FORMAT = "surfinspect.signing-key/1"
OLD_PUBLIC_KEY_FORMAT = "surfinspect.public-key/1"
PDF_KEY_BINDING_FORMAT = "surfinspect.pdf-key-binding/1"
#: What a key file without a PDF key should do (printed where such a key signs or is enrolled).
UPGRADE_HINT = (
    "add a PDF key with `surfinspect keygen --upgrade KEYFILE`, then have the owner certify it with "
    "`surfinspect signers pdf-key --archive DIR --pub KEYFILE.pub --by OWNER_KEY`"
)

_RAW = serialization.Encoding.Raw, serialization.PublicFormat.Raw

Passphrase = bytes | Callable[[], bytes] | None


def key_fingerprint(public_key_raw: bytes) -> str:
    """SHA-256 of the raw 32-byte Ed25519 public key, as 64 lower-case hex digits."""
    if len(public_key_raw) != 32:
        raise ValueError(f"an Ed25519 public key has 32 bytes (got {len(public_key_raw)})")
    return hashlib.sha256(public_key_raw).hexdigest()


def spki_der(public_key) -> bytes:
    """A public key's DER SubjectPublicKeyInfo (RFC 5280, 4.1.2.7): how a PDF key is named in records."""
    return public_key.public_bytes(serialization.Encoding.DER, serialization.PublicFormat.SubjectPublicKeyInfo)


def pdf_key_binding(fingerprint: str, pdf_public_der: bytes) -> dict:
    """The record an Ed25519 key signs to claim a PDF key as its holder's."""
    return {
        "format": PDF_KEY_BINDING_FORMAT,
        "key_fingerprint": fingerprint,
        "pdf_public_key_hex": pdf_public_der.hex(),
    }


def binding_holds(public_key_raw: bytes, pdf_public_der: bytes, signature: bytes) -> bool:
    """True when the Ed25519 key signed the binding of this PDF key."""
    record = pdf_key_binding(key_fingerprint(public_key_raw), pdf_public_der)
    return verify_signature(public_key_raw, canonical_bytes(record), signature)


@dataclass(frozen=True)
class SigningKey:
    """A holder's private keys and the label its key file gives them (the label is never a printed name).

    ``pdf_key`` (ECDSA P-256) makes PDF signatures only; None for a key file of the first format.
    """

    private_key: Ed25519PrivateKey
    label: str = ""
    protected: bool = False  # read from a passphrase-protected key file
    pdf_key: ec.EllipticCurvePrivateKey | None = None

    @classmethod
    def generate(cls, label: str = "") -> "SigningKey":
        return cls(Ed25519PrivateKey.generate(), _fold(label), pdf_key=ec.generate_private_key(ec.SECP256R1()))

    @property
    def pdf_public_der(self) -> bytes | None:
        return spki_der(self.pdf_key.public_key()) if self.pdf_key is not None else None

    def pdf_binding_signature(self) -> bytes:
        return self.sign(canonical_bytes(pdf_key_binding(self.fingerprint, self.pdf_public_der)))

    @classmethod
    def from_secret_bytes(cls, secret_key: bytes, label: str = "") -> "SigningKey":
        """Build a key from the 32-byte secret (the RFC 8032 "secret key")."""
        return cls(Ed25519PrivateKey.from_private_bytes(secret_key), _fold(label))

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
    label: str
    public_key_raw: bytes
    pdf_public_der: bytes | None = None  # the PDF key (None in a public key file of the first format)
    pdf_binding: bytes = b""  # the Ed25519 key's signature of the binding (:func:`pdf_key_binding`)

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


def _fold(text: str) -> str:
    return " ".join(str(text).split())


# ----------------------------------------------------------------- key files


def public_key_path_for(key_path: str | os.PathLike) -> Path:
    """Where ``keygen`` puts the public key beside a private key file."""
    key_path = Path(key_path)
    return key_path.with_name(key_path.name + ".pub")


def write_key_pair(key_path: str | os.PathLike, label: str, *, passphrase: bytes | None) -> SigningKey:
    """Generate a key pair and write ``key_path`` (private, mode 0600) and ``key_path.pub``.

    ``passphrase`` None writes the private key unencrypted (``--no-passphrase``).

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
        raise InputError("passphrase: the passphrase is empty (give a non-empty one, or ask for --no-passphrase)")
    key = SigningKey.generate(label)
    _write_key_files(key_path, key, passphrase)
    return key


def upgrade_key_file(key_path: str | os.PathLike, *, passphrase: Passphrase) -> SigningKey:
    """Add a PDF key to a key file of the first format (and its ``.pub``), under the same passphrase.

    Raises
    ------
    InputError
        When the file is not a key file, the passphrase is wrong, or the file already has a PDF key.
    """
    key_path = Path(key_path)
    asked: list = []

    def once():  # asked for only when the key is protected, and only once
        if not asked:
            asked.append(passphrase() if callable(passphrase) else passphrase)
        return asked[0]

    key = load_signing_key(key_path, passphrase=once)
    if key.pdf_key is not None:
        raise InputError(f"{key_path}: the key file already holds a PDF key (nothing to upgrade)")
    key = SigningKey(key.private_key, key.label, key.protected, ec.generate_private_key(ec.SECP256R1()))
    _write_key_files(key_path, key, once() if key.protected else None)
    return key


def _write_key_files(key_path: Path, key: SigningKey, passphrase: bytes | None) -> None:
    def private_pem(private) -> str:
        encryption = serialization.BestAvailableEncryption(passphrase) if passphrase else serialization.NoEncryption()
        return private.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8, encryption).decode()

    def public_pem(public) -> str:
        return public.public_bytes(serialization.Encoding.PEM, serialization.PublicFormat.SubjectPublicKeyInfo).decode()

    private_doc = {
        "format": PRIVATE_KEY_FORMAT,
        "signer_name": key.label,
        "key_fingerprint": key.fingerprint,
        "passphrase_protected": bool(passphrase),
        "private_key_pem": private_pem(key.private_key),
        "pdf_public_key_hex": key.pdf_public_der.hex(),
        "pdf_private_key_pem": private_pem(key.pdf_key),
    }
    public_doc = {
        "format": PUBLIC_KEY_FORMAT,
        "signer_name": key.label,
        "key_fingerprint": key.fingerprint,
        "public_key_pem": public_pem(key.private_key.public_key()),
        "pdf_public_key_pem": public_pem(key.pdf_key.public_key()),
        "pdf_key_binding_hex": key.pdf_binding_signature().hex(),
    }
    with atomic_path(key_path, mode=0o600) as tmp:
        # owner-only from the start: set on the empty temporary file, before any key byte is written
        os.chmod(tmp, 0o600)
        tmp.write_text(json.dumps(private_doc, indent=2) + "\n", encoding="utf-8")
    with atomic_path(public_key_path_for(key_path)) as tmp:
        tmp.write_text(json.dumps(public_doc, indent=2) + "\n", encoding="utf-8")


def _read_key_document(path: Path, expected_format: str, old_format: str) -> dict:
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(f"{path}: key file not found") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"{path}: not a surfinspect key file ({exc})") from None
    if not isinstance(doc, dict) or doc.get("format") not in (expected_format, old_format):
        got = doc.get("format") if isinstance(doc, dict) else type(doc).__name__
        raise InputError(
            f"{path}: format: not a surfinspect key file (got {got!r}, allowed {expected_format!r} or {old_format!r})"
        )
    return doc


def check_private_key_file(path: Path) -> None:
    """Refuse a private key file that is not a regular file or that group or others may read or write."""
    try:
        info = path.stat()
    except FileNotFoundError:
        raise InputError(f"{path}: key file not found") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read the key file ({exc.strerror or exc})") from None
    if not stat.S_ISREG(info.st_mode):
        raise InputError(f"{path}: not a regular file (allowed: a private key file made by `surfinspect keygen`)")
    mode = stat.S_IMODE(info.st_mode)
    if mode & 0o077:
        raise InputError(
            f"{path}: the private key may be read by group or others (mode {mode:04o}, allowed 0600 or 0400); "
            f"run: chmod 600 {path}"
        )


def load_signing_key(key_path: str | os.PathLike, *, passphrase: Passphrase = None) -> SigningKey:
    """Read a private key file written by :func:`write_key_pair`.

    ``passphrase`` is the passphrase, or a function asked for it only when the
    key is protected (a no-echo prompt), or None.

    Raises
    ------
    InputError
        When the file is missing, malformed or readable by group or others,
        the passphrase is missing or wrong, or the stored fingerprint does not
        belong to the key.
    """
    path = Path(key_path)
    check_private_key_file(path)
    doc = _read_key_document(path, PRIVATE_KEY_FORMAT, OLD_PRIVATE_KEY_FORMAT)
    password = None
    if doc.get("passphrase_protected"):
        password = passphrase() if callable(passphrase) else passphrase
        if not password:
            raise InputError(
                f"{path}: the key is passphrase-protected; run on a terminal to be asked for it, "
                "or give --passphrase-env VAR naming a variable that holds it"
            )
    try:
        private = serialization.load_pem_private_key(str(doc["private_key_pem"]).encode("ascii"), password=password)
    except (KeyError, ValueError, TypeError) as exc:
        raise InputError(f"{path}: private_key_pem: cannot be read (wrong passphrase or damaged file: {exc})") from None
    if not isinstance(private, Ed25519PrivateKey):
        raise InputError(f"{path}: private_key_pem: not an Ed25519 key (got {type(private).__name__})")
    pdf_key = None
    if doc["format"] == PRIVATE_KEY_FORMAT:
        try:
            pdf_key = serialization.load_pem_private_key(str(doc["pdf_private_key_pem"]).encode("ascii"), password)
        except (KeyError, ValueError, TypeError) as exc:
            raise InputError(f"{path}: pdf_private_key_pem: cannot be read ({exc})") from None
        if not isinstance(pdf_key, ec.EllipticCurvePrivateKey) or pdf_key.curve.name != "secp256r1":
            raise InputError(f"{path}: pdf_private_key_pem: not an ECDSA P-256 key")
        if spki_der(pdf_key.public_key()).hex() != doc.get("pdf_public_key_hex"):
            raise InputError(
                f"{path}: pdf_public_key_hex: does not match the PDF key in the file (the file was altered)"
            )
    key = SigningKey(private, _fold(doc.get("signer_name", "")), bool(doc.get("passphrase_protected")), pdf_key)
    if doc.get("key_fingerprint") != key.fingerprint:
        raise InputError(f"{path}: key_fingerprint: does not match the key in the file (the file was altered)")
    return key


def load_public_key(path: str | os.PathLike) -> PublicKeyInfo:
    """Read a public key file written by :func:`write_key_pair`."""
    path = Path(path)
    doc = _read_key_document(path, PUBLIC_KEY_FORMAT, OLD_PUBLIC_KEY_FORMAT)
    try:
        public = serialization.load_pem_public_key(str(doc["public_key_pem"]).encode("ascii"))
    except (KeyError, ValueError, TypeError) as exc:
        raise InputError(f"{path}: public_key_pem: cannot be read ({exc})") from None
    if not isinstance(public, Ed25519PublicKey):
        raise InputError(f"{path}: public_key_pem: not an Ed25519 key (got {type(public).__name__})")
    raw = public.public_bytes(*_RAW)
    pdf_der, binding = None, b""
    if doc["format"] == PUBLIC_KEY_FORMAT:
        try:
            pdf_public = serialization.load_pem_public_key(str(doc["pdf_public_key_pem"]).encode("ascii"))
            binding = bytes.fromhex(str(doc["pdf_key_binding_hex"]))
        except (KeyError, ValueError, TypeError) as exc:
            raise InputError(f"{path}: pdf_public_key_pem: cannot be read ({exc})") from None
        if not isinstance(pdf_public, ec.EllipticCurvePublicKey) or pdf_public.curve.name != "secp256r1":
            raise InputError(f"{path}: pdf_public_key_pem: not an ECDSA P-256 key")
        pdf_der = spki_der(pdf_public)
        if not binding_holds(raw, pdf_der, binding):
            raise InputError(
                f"{path}: pdf_key_binding_hex: the Ed25519 key did not sign this PDF key (the file was altered)"
            )
    info = PublicKeyInfo(_fold(doc.get("signer_name", "")), raw, pdf_der, binding)
    if doc.get("key_fingerprint") != info.fingerprint:
        raise InputError(f"{path}: key_fingerprint: does not match the key in the file (the file was altered)")
    return info


# ------------------------------------------------------------------- records


def sign_record(key: SigningKey, record: Mapping[str, Any]) -> bytes:
    """Sign a record with ``key``; the record must name this key's fingerprint."""
    if record.get("key_fingerprint") != key.fingerprint:
        raise ValueError("record.key_fingerprint does not belong to the signing key")
    return key.sign(canonical_bytes(record))


def verify_record(public_key_raw: bytes, record: Mapping[str, Any], signature: bytes) -> bool:
    """True when the signature holds over the record and the record names this key."""
    try:
        if record.get("key_fingerprint") != key_fingerprint(public_key_raw):
            return False
        return verify_signature(public_key_raw, canonical_bytes(record), signature)
    except (ValueError, TypeError):
        return False


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
