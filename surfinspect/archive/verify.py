"""Verification: run the named checks of :mod:`.checks` and, given one, an anchor kept outside the archive.

A finding is a *problem* (the archive is not as it was recorded: exit 1) or
a *warning* (it is intact, but part of it is protected by the hash chain
only: a batch closed without a station key, records after the last signed
head). A damaged index, a dropped table or an unreadable object is a
problem, never a crash.

Anchor file
-----------
``verify --export-anchor FILE`` writes the head the archive has reached
(after the check is recorded), for keeping outside the archive (printed,
mailed to the customer, in another system)::

    {"format": "surfinspect.anchor/1", "archive_id", "owner_fingerprint",
     "events", "head_sha256", "exported_at_utc"}

``verify --anchor FILE`` then checks that the archive still holds that
event with that hash under the same owner: a trail cut back to an earlier
state, or re-chained from scratch, no longer does.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from ..errors import InputError
from ..fsutil import write_text_atomic
from . import checks, legacy_v1, pdf_checks, signed_checks
from .backend import IndexBusy, IndexDamaged
from .checks import Context
from .location import ArchiveLocation, parse_location
from .sqlite_backend import INDEX_NAME, SQLiteBackend
from .store import Archive, utc_now

__all__ = ["ANCHOR_FORMAT", "CHECKS", "VerifyReport", "verify", "verify_archive", "export_anchor", "read_anchor"]

ANCHOR_FORMAT = "surfinspect.anchor/1"

#: The checks in the order they run (and their findings are listed).
CHECKS: tuple[tuple[str, Callable[[Context], None]], ...] = (
    ("index structure", checks.check_index_structure),
    ("audit chain", checks.check_chain),
    ("index rows against the audit trail", checks.check_rows_against_trail),
    ("signer register", signed_checks.check_register),
    ("signed chain heads", signed_checks.check_signed_heads),
    ("stored files", checks.check_files),
    ("results against the index", checks.check_results),
    ("sign-offs", signed_checks.check_signoffs),
    ("dispositions", signed_checks.check_dispositions),
    ("PDF signatures of the signed editions", pdf_checks.check_pdf_signatures),
)


@dataclass
class VerifyReport:
    problems: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)

    @property
    def intact(self) -> bool:
        return not self.problems


def _run_checks(ctx: Context) -> None:
    for name, check in CHECKS:
        try:
            check(ctx)
        except Exception as exc:  # noqa: BLE001 - whatever a damaged archive makes a check meet is a finding
            ctx.fail(f"{name}: the check could not be completed ({type(exc).__name__}: {exc})")


def _check_anchor(ctx: Context, anchor: dict[str, Any]) -> None:
    n, head = anchor.get("events"), anchor.get("head_sha256")
    if anchor.get("archive_id") != ctx.archive.archive_id:
        ctx.fail(
            f"anchor: it belongs to archive {anchor.get('archive_id')!r}, not this one ({ctx.archive.archive_id!r})"
        )
        return
    reg = ctx.register
    owner = reg.owner.key_fingerprint if reg is not None and reg.owner is not None else None
    if anchor.get("owner_fingerprint") and anchor.get("owner_fingerprint") != owner:
        ctx.fail(
            f"anchor: the archive's owner key is not the one anchored ({str(anchor.get('owner_fingerprint'))[:16]}…)"
        )
    last = max(ctx.event_sha, default=0)
    if not isinstance(n, int) or n > last:
        ctx.fail(
            f"anchor: the trail ends at event {last}, the anchor holds event {n}: records were removed from the end"
        )
    elif ctx.event_sha.get(n) != head:
        ctx.fail(f"anchor: audit event {n} is not the one anchored: the history up to it was rewritten or re-chained")


def _unreadable_index(where: ArchiveLocation, exc: InputError) -> str | None:
    """Why an index that is there cannot be opened as an archive, in the database's own words where it has
    some; None when there is no index at all (the location is not an archive: a usage error)."""
    if where.is_database:
        from .postgres_backend import PostgresBackend

        try:
            backend = PostgresBackend(where.conninfo)
        except InputError:
            return None  # no server or no database: a usage error, as it was
        try:
            return str(exc) if backend.columns_found() else None
        except (IndexDamaged, IndexBusy):
            return str(exc)
        finally:
            backend.close()
    index = where.root / INDEX_NAME
    if not (index.is_file() and index.stat().st_size > 0):
        return None
    try:
        backend = SQLiteBackend(where.root)
    except IndexDamaged as damaged:
        return f"{INDEX_NAME} cannot be opened ({damaged})"
    try:
        problems = backend.integrity_problems()
    finally:
        backend.close()
    if problems:
        return f"{INDEX_NAME} is damaged ({problems[0]})"
    return str(exc)


def verify_archive(
    archive: Archive | str | os.PathLike,
    batch_id: str | None = None,
    *,
    anchor: dict[str, Any] | None = None,
    shared_only: bool = False,
) -> VerifyReport:
    """Check the archive (or one batch and everything shared: chain, rows, register, heads).

    ``shared_only`` checks what is shared and no batch's files, results or
    signatures (what a register entry depends on; no stored file is hashed).

    Raises
    ------
    InputError
        When the folder is not an archive or the batch does not exist. An
        index that exists but cannot be read is a problem in the report.
    """
    if not isinstance(archive, Archive):
        where = parse_location(archive)
        root = where.root
        if not where.is_database and legacy_v1.format_of(root) == legacy_v1.FORMAT_1:
            if anchor is not None:
                raise InputError("--anchor: anchors are kept for archives of the current format only")
            return VerifyReport(*legacy_v1.verify_format_1(root, batch_id))
        try:
            arc = Archive(archive)
        except InputError as exc:
            reason = _unreadable_index(where, exc)
            if reason is not None:
                return VerifyReport([f"index: {reason}; nothing recorded in it can be checked"])
            raise
        try:
            return verify_archive(arc, batch_id, anchor=anchor, shared_only=shared_only)
        finally:
            arc.close()
    if batch_id is not None:
        try:
            archive.batch(batch_id)
        except (IndexDamaged, IndexBusy):
            pass  # named by the checks
    ctx = Context(archive, batch_id, shared_only=shared_only)
    _run_checks(ctx)
    if anchor is not None:
        _check_anchor(ctx, anchor)
    return VerifyReport(ctx.problems, ctx.warnings)


def verify(archive: Archive | str | os.PathLike, batch_id: str | None = None) -> list[str]:
    """The problems :func:`verify_archive` finds, one sentence each (empty when everything holds)."""
    return verify_archive(archive, batch_id).problems


def export_anchor(archive: Archive, path: str | os.PathLike) -> dict[str, Any]:
    """Write the archive's current head to ``path`` (atomically) and return it."""
    events, head = archive.chain_head()
    owner = archive.register().owner
    doc = {
        "format": ANCHOR_FORMAT,
        "archive_id": archive.archive_id,
        "owner_fingerprint": owner.key_fingerprint if owner is not None else "",
        "events": events,
        "head_sha256": head,
        "exported_at_utc": utc_now(),
    }
    write_text_atomic(path, json.dumps(doc, indent=2) + "\n")
    return doc


def read_anchor(path: str | os.PathLike) -> dict[str, Any]:
    path = Path(path)
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(f"--anchor {path}: file not found") from None
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise InputError(f"--anchor {path}: not an anchor file ({exc})") from None
    if not isinstance(doc, dict) or doc.get("format") != ANCHOR_FORMAT:
        got = doc.get("format") if isinstance(doc, dict) else type(doc).__name__
        raise InputError(f"--anchor {path}: format: not an anchor file (got {got!r}, allowed {ANCHOR_FORMAT!r})")
    if not isinstance(doc.get("events"), int) or not isinstance(doc.get("head_sha256"), str):
        raise InputError(f"--anchor {path}: events and head_sha256 are required (an integer and 64 hex digits)")
    return doc
