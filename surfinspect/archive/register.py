"""The signer register: who may sign in this archive, under which printed name and role.

An archive gets an owner (the quality manager) once, by ``surfinspect owner
init``: a self-signed ``owner`` entry. From then on only the owner's key adds
(``enrol``) or withdraws (``revoke``) a signer's key, each as a register entry
signed by the owner. Every entry is a row of the ``register`` table, recorded
whole in the audit chain, and its record binds the archive id, the entry
number, the key and the chain head when it was made, so it cannot be copied
into another archive or moved in this one.

The register, never a key file, gives the printed name of a signature
(21 CFR Part 11 §11.50: the printed name of the signer, the date and time,
the meaning). A key enrolled with role ``station`` signs chain heads only
(unattended batch closes); people's keys sign off batches, record
dispositions and sign the chain head with each.

Record (canonical JSON, signed by the owner's key)::

    {"format": "surfinspect.register-entry/1", "archive_id", "entry_no",
     "action": "owner" | "enrol" | "revoke" | "pdf-key", "key_fingerprint", "public_key_hex",
     "printed_name", "role", "reason", "recorded_at_utc", "by_fingerprint",
     "audit_events", "audit_head_sha256"[, "pdf_public_key_hex", "pdf_key_binding_hex"]}

The two optional fields bind the holder's PDF key (ECDSA P-256, DER
SubjectPublicKeyInfo in hex) to the same person as the Ed25519 key, with
the Ed25519 key's own signature of that binding (:func:`.signing.pdf_key_binding`).
``owner`` and ``enrol`` entries carry them when the key file has a PDF key;
a ``pdf-key`` entry adds a PDF key to an enrolled holder (or the owner) whose
key was made before PDF keys. They are fields of the signed record only (no
index column), so entries made before them read and verify unchanged.
"""

from __future__ import annotations

import json
import unicodedata
from dataclasses import dataclass, replace
from typing import Iterable

from ..errors import InputError
from .schema import RegisterRow

__all__ = [
    "ENTRY_FORMAT",
    "STATION_ROLE",
    "OWNER_ROLE",
    "Signer",
    "Register",
    "entry_record",
    "pdf_key_of",
    "PDF_KEY_ACTION",
    "ACTIONS",
    "check_printed_text",
]

ENTRY_FORMAT = "surfinspect.register-entry/1"
#: The register action that certifies a PDF key for a holder enrolled before PDF keys.
PDF_KEY_ACTION = "pdf-key"
ACTIONS = ("owner", "enrol", "revoke", PDF_KEY_ACTION)
STATION_ROLE = "station"
OWNER_ROLE = "owner"
_MAX_NAME = 120


def pdf_key_of(row: RegisterRow) -> str | None:
    """The PDF key (DER SubjectPublicKeyInfo in hex) an entry's signed record names, or None."""
    try:
        value = json.loads(row.record_json).get("pdf_public_key_hex")
    except (ValueError, TypeError, AttributeError):
        return None
    return value if isinstance(value, str) and value else None


def check_printed_text(flag: str, text: str, *, max_len: int = _MAX_NAME) -> str:
    """Whitespace folded; 1..max_len printable characters, no control or bidirectional-override characters."""
    folded = " ".join(str(text).split())
    bad = [c for c in folded if unicodedata.category(c) in ("Cc", "Cf", "Cs", "Co", "Cn")]
    if not folded or len(folded) > max_len or bad:
        shown = f"control/format character U+{ord(bad[0]):04X}" if bad else f"{len(folded)} characters"
        raise InputError(f"{flag}: {shown} (allowed 1-{max_len} printable characters)")
    return folded


@dataclass(frozen=True)
class Signer:
    key_fingerprint: str
    public_key_hex: str
    printed_name: str
    role: str
    enrolled_at_utc: str
    entry_no: int
    revoked_at_utc: str | None = None
    revoked_entry_no: int | None = None
    pdf_public_key_hex: str | None = None  # the PDF key the owner certified for this holder (None: none yet)

    @property
    def is_station(self) -> bool:
        return self.role == STATION_ROLE

    def active_at(self, at_utc: str) -> bool:
        """Enrolled at ``at_utc`` and not yet revoked (ISO UTC strings of one shape compare as times)."""
        return self.enrolled_at_utc <= at_utc and (self.revoked_at_utc is None or at_utc < self.revoked_at_utc)


class Register:
    """The register's state, from its rows in entry order (what the rows say; ``verify`` checks them)."""

    def __init__(self, rows: Iterable[RegisterRow]):
        self.owner: Signer | None = None
        self.signers: dict[str, Signer] = {}
        self.entries: list[RegisterRow] = sorted(rows, key=lambda r: r.entry_no)
        for row in self.entries:
            self._apply(row)

    def _apply(self, row: RegisterRow) -> None:
        pdf_key = pdf_key_of(row)
        if row.action == "owner" and self.owner is None:
            self.owner = Signer(
                row.key_fingerprint,
                row.public_key_hex,
                row.printed_name,
                OWNER_ROLE,
                row.recorded_at_utc,
                row.entry_no,
                pdf_public_key_hex=pdf_key,
            )
        elif row.action == "enrol" and row.key_fingerprint not in self.signers:
            self.signers[row.key_fingerprint] = Signer(
                row.key_fingerprint,
                row.public_key_hex,
                row.printed_name,
                row.role,
                row.recorded_at_utc,
                row.entry_no,
                pdf_public_key_hex=pdf_key,
            )
        elif row.action == PDF_KEY_ACTION and pdf_key is not None:
            if self.owner is not None and row.key_fingerprint == self.owner.key_fingerprint:
                self.owner = replace(self.owner, pdf_public_key_hex=pdf_key)
            elif row.key_fingerprint in self.signers:
                self.signers[row.key_fingerprint] = replace(
                    self.signers[row.key_fingerprint], pdf_public_key_hex=pdf_key
                )
        elif row.action == "revoke" and row.key_fingerprint in self.signers:
            old = self.signers[row.key_fingerprint]
            if old.revoked_at_utc is None:
                self.signers[row.key_fingerprint] = Signer(
                    **{**old.__dict__, "revoked_at_utc": row.recorded_at_utc, "revoked_entry_no": row.entry_no}
                )

    @property
    def next_entry_no(self) -> int:
        return 1 + max((r.entry_no for r in self.entries), default=0)

    def key_holder(self, fingerprint: str) -> Signer | None:
        """The signer (or the owner) holding this key, whatever its state."""
        if fingerprint in self.signers:
            return self.signers[fingerprint]
        if self.owner is not None and self.owner.key_fingerprint == fingerprint:
            return self.owner
        return None

    def require_owner(self, fingerprint: str, where: str) -> Signer:
        if self.owner is None:
            raise InputError(
                f"{where}: the archive has no owner yet; its quality manager sets one once with "
                "`surfinspect owner init --archive DIR --name NAME --key OWNER_KEY`"
            )
        if fingerprint != self.owner.key_fingerprint:
            raise InputError(
                f"{where}: this key (fingerprint {fingerprint[:16]}…) is not the archive owner's key "
                f"({self.owner.printed_name}, {self.owner.key_fingerprint[:16]}…)"
            )
        return self.owner

    def require_signer(self, fingerprint: str, at_utc: str, where: str, *, station_allowed: bool) -> Signer:
        """The enrolled, unrevoked signer of this key; an InputError saying what to do otherwise."""
        if self.owner is None:
            raise InputError(
                f"{where}: nothing can be signed in this archive until it has an owner and the signer is enrolled "
                "(`surfinspect owner init`, then `surfinspect signers add`)"
            )
        signer = self.signers.get(fingerprint)
        if signer is None and fingerprint == self.owner.key_fingerprint:
            raise InputError(
                f"{where}: this is the archive owner's key ({self.owner.printed_name}); it certifies the signer "
                "register and signs nothing else: sign with a key of your own (`surfinspect keygen`), enrolled with "
                "`surfinspect signers add ... --by OWNER_KEY`"
            )
        if signer is None:
            raise InputError(
                f"{where}: this key (fingerprint {fingerprint[:16]}…) is not enrolled in the archive's signer register; "
                "the owner enrols it with `surfinspect signers add --archive DIR --pub KEY.pub --name NAME --role ROLE "
                "--by OWNER_KEY`"
            )
        if signer.revoked_at_utc is not None and signer.revoked_at_utc <= at_utc:
            raise InputError(
                f"{where}: the key of {signer.printed_name} ({fingerprint[:16]}…) was revoked at "
                f"{signer.revoked_at_utc} (register entry {signer.revoked_entry_no}); it signs nothing any more"
            )
        if signer.is_station and not station_allowed:
            raise InputError(
                f"{where}: the key of {signer.printed_name} is enrolled as a station key; it signs chain heads only, "
                "a sign-off or disposition needs a person's key"
            )
        return signer


def entry_record(
    *,
    archive_id: str,
    entry_no: int,
    action: str,
    key_fingerprint: str,
    public_key_hex: str,
    printed_name: str,
    role: str,
    reason: str,
    recorded_at_utc: str,
    by_fingerprint: str,
    audit_events: int,
    audit_head_sha256: str,
    pdf_public_key_hex: str | None = None,
    pdf_key_binding_hex: str | None = None,
) -> dict:
    """The register entry's record, as the owner signs it (the PDF key's fields only when there is one)."""
    pdf = (
        {}
        if pdf_public_key_hex is None
        else {
            "pdf_public_key_hex": pdf_public_key_hex,
            "pdf_key_binding_hex": pdf_key_binding_hex,
        }
    )
    return pdf | {
        "format": ENTRY_FORMAT,
        "archive_id": archive_id,
        "entry_no": entry_no,
        "action": action,
        "key_fingerprint": key_fingerprint,
        "public_key_hex": public_key_hex,
        "printed_name": printed_name,
        "role": role,
        "reason": reason,
        "recorded_at_utc": recorded_at_utc,
        "by_fingerprint": by_fingerprint,
        "audit_events": audit_events,
        "audit_head_sha256": audit_head_sha256,
    }
