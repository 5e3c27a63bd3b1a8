"""The two write actions of the review station, each done as an enrolled signer with their key.

The key comes from the station's key folder (``--key-dir``: the page offers
the enrolled persons' keys found there, chosen by fingerprint, never by a file
name from the request) or from a key file uploaded with the form. The
passphrase is used to open the key and then dropped: never stored, logged or
sent back. The calls are the ones ``surfinspect disposition`` and
``surfinspect sign`` make, so the archive checks the same things (the key is
enrolled and not revoked, the archive verifies) and a refused act records
nothing.
"""

from __future__ import annotations

import os
import tempfile
from dataclasses import dataclass
from pathlib import Path

from ..archive import signatures, signing
from ..archive import store as archive
from ..errors import InputError
from ..station import batch as station_batch

#: Largest key file accepted by upload (a key file is about 500 bytes).
MAX_KEY_BYTES = 16 * 1024


@dataclass(frozen=True)
class KeyChoice:
    fingerprint: str
    printed_name: str
    role: str
    path: Path


def folder_keys(arc: archive.Archive, key_dir: Path | None) -> list[KeyChoice]:
    """The private keys in ``key_dir`` whose public key is enrolled for a person and not revoked."""
    if key_dir is None or not key_dir.is_dir():
        return []
    register = arc.register()
    out = []
    for pub in sorted(key_dir.glob("*.pub")):
        private = pub.with_suffix("")
        try:
            info = signing.load_public_key(pub)
        except InputError:
            continue
        holder = register.signers.get(info.fingerprint)  # persons and stations; the owner's key signs no acts
        if holder is None or holder.is_station or holder.revoked_at_utc is not None or not private.is_file():
            continue
        out.append(KeyChoice(info.fingerprint, holder.printed_name, holder.role, private))
    return out


def open_key(
    arc: archive.Archive,
    key_dir: Path | None,
    *,
    fingerprint: str,
    upload: bytes | None,
    passphrase: str,
) -> signing.SigningKey:
    """Open the chosen key with the passphrase; an :class:`InputError` in words when it cannot be opened."""
    secret = passphrase.encode("utf-8")
    if upload:
        return _open_uploaded(upload, secret)
    for choice in folder_keys(arc, key_dir):
        if choice.fingerprint == fingerprint:
            return _open_path(choice.path, secret, "the chosen key")
    raise InputError("key: choose a key from the station's key folder or upload your key file")


def _open_path(path: Path, secret: bytes, what: str) -> signing.SigningKey:
    try:
        key = signing.load_signing_key(path, passphrase=secret or None)
    except InputError as exc:
        text = str(exc).replace(str(path), what)
        if "cannot be read" in text:
            text = f"{what}: the passphrase is wrong or the key file is damaged"
        raise InputError(text) from None
    return key


def _open_uploaded(data: bytes, secret: bytes) -> signing.SigningKey:
    if len(data) > MAX_KEY_BYTES:
        raise InputError(f"key file: larger than a key file ({len(data)} bytes; allowed up to {MAX_KEY_BYTES})")
    with tempfile.TemporaryDirectory(prefix="surfinspect-key-") as folder:
        path = Path(folder) / "uploaded.key"
        fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        return _open_path(path, secret, "the uploaded key file")


def record_disposition(
    arc: archive.Archive, batch_id: str, part_key: str, key: signing.SigningKey, *, decision: str, comment: str
) -> archive.DispositionRow:
    """``surfinspect disposition``'s call; a comment is required on the page."""
    if not comment.strip():
        raise InputError("comment: required - say why (what was seen, what was decided)")
    return signatures.record_disposition(arc, batch_id, part_key, key, decision=decision, comment=comment)


def sign_batch(
    arc: archive.Archive, batch_id: str, key: signing.SigningKey, *, meaning: str, comment: str
) -> archive.SignoffRow:
    """``surfinspect sign``'s call, with the same signed edition of the report."""
    return signatures.sign_batch(
        arc,
        batch_id,
        key,
        meaning=meaning,
        comment=comment,
        render_edition=lambda signoff: station_batch.render_batch_report(arc, batch_id, signoff=signoff),
    )
