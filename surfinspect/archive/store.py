"""The archive: an indexed, content-addressed, audit-chained store of batches, sign-offs and dispositions.

An archive is one folder (or a PostgreSQL index and an object folder: :mod:`.location`)::

    DIR/index.sqlite        the index (tables in :mod:`.schema`), behind :class:`.backend.IndexBackend`
    DIR/objects/ab/cdef...  every stored file, named by the SHA-256 of its bytes (:mod:`.objects`)

Every write is one index transaction that adds its rows and the audit event
recording them whole (:mod:`.chain`), so the trail is the index's history.
Writes that carry a signature (register entries, sign-offs, dispositions,
a batch closed with a station key) append, in the same transaction, a
``head signed`` event: the signer's Ed25519 signature over the chain head
just reached. ``verify`` (:mod:`.verify`) checks all of it.
"""

from __future__ import annotations

import contextlib
import json
import os
import uuid
from pathlib import Path
from typing import Any, Iterator, Mapping, Sequence

from ..errors import InputError
from ..fsutil import sha256_bytes
from . import chain, signing
from .backend import IndexBackend, IndexBusy, IndexDamaged
from .batch_writes import BatchPlan, BatchWritesMixin
from .chain import GENESIS_SHA256, EventKind
from .editions import EditionsMixin
from .location import check_folder, open_index, parse_location
from .objects import ObjectStore
from .records import (
    ERROR_SCHEMA,
    ERROR_VERDICT,
    check_batch_id,
    error_record_json,
    image_set_sha256,
    index_rows_of,
    utc_now,
    verdict_counts,
)
from .register import Register
from .schema import (
    ARCHIVE_FORMAT,
    BatchRow,
    DispositionRow,
    EventRow,
    PartRow,
    RegisterRow,
    SignoffRow,
    row_type,
)
from .sqlite_backend import INDEX_NAME

__all__ = [
    "ARCHIVE_FORMAT",
    "ERROR_SCHEMA",
    "ERROR_VERDICT",
    "INDEX_NAME",
    "Archive",
    "BatchPlan",
    "image_set_sha256",
    "error_record_json",
    "check_batch_id",
    "index_rows_of",
    "verdict_counts",
    "utc_now",
]


class Archive(BatchWritesMixin, EditionsMixin):
    """An archive folder; open with ``create=True`` to make it when missing.

    Making it is one index transaction (tables, meta, the first event), so no
    process ever finds half an archive, and processes opening one new archive
    with ``create=True`` at once queue on the index's write lock: the first
    makes it, the others open what it made.

    Raises
    ------
    InputError
        When the folder is not an archive (and ``create`` is false), or holds
        an archive of another format.
    """

    def __init__(self, root: str | os.PathLike, *, create: bool = False, backend: IndexBackend | None = None):
        where = parse_location(root)
        self.location = where.display  # for messages: the folder, or the database URL without a password
        self.opened_as = where.text  # to open the same archive in another process (a URL keeps its password)
        self.root = where.root
        if where.is_database:
            self.objects = ObjectStore.at(where.objects_dir)
        else:
            check_folder(self.root, create=create, has_backend=backend is not None)
            self.objects = ObjectStore(self.root)
        backend = backend or open_index(where)
        self.index = backend
        try:
            # an index that is there is only checked, never written (PostgreSQL: a newer schema is refused here)
            if not self.index.exists() and create:
                self._create()
            self._check_format()
        except BaseException:
            self.index.close()
            raise

    # -- opening

    def _create(self) -> None:
        """Tables, meta and the first event in one transaction; nothing when another process made the index first."""
        self.objects.make()
        try:
            with self.index.creating() as new:
                if not new:
                    return  # made meanwhile by a creator that took the lock first (or not ours: checked next)
                # what meta holds besides the chain's own head is recorded in the first event
                created = {"format": ARCHIVE_FORMAT, "archive_id": str(uuid.uuid4()), "created_at": utc_now()}
                for key, value in (*created.items(), ("chain_length", "0"), ("chain_head_sha256", GENESIS_SHA256)):
                    self.index.insert("meta", {"key": key, "value": value})
                self._append_event(EventKind.ARCHIVE_CREATED, None, None, created)
        except (IndexDamaged, IndexBusy) as exc:
            raise InputError(f"{self.index.location}: cannot write the archive index ({exc})") from None

    def _check_format(self) -> None:
        try:
            fmt = self._meta("format")
        except IndexDamaged as exc:
            raise InputError(
                f"{self.index.location}: not a surfinspect archive index ({exc}); allowed: the index of an archive "
                "made by `surfinspect batch`, or a new --archive folder"
            ) from None
        if fmt == "surfinspect.archive/1":
            raise InputError(
                f"{self.index.location}: meta.format: an archive of the first format ({fmt!r}), made before the signer "
                f"register and the row-by-row audit chain; this version reads {ARCHIVE_FORMAT!r} only (keep the "
                "release that made it to verify it, or start a new archive folder)"
            )
        if fmt != ARCHIVE_FORMAT:
            raise InputError(
                f"{self.index.location}: meta.format: unknown archive format (got {fmt!r}, allowed {ARCHIVE_FORMAT!r})"
            )

    def _meta(self, key: str) -> str | None:
        rows = self.index.select("meta", {"key": key})
        return rows[0]["value"] if rows else None

    def close(self) -> None:
        self.index.close()

    def __enter__(self) -> "Archive":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    @property
    def archive_id(self) -> str:
        return self._meta("archive_id") or ""

    @contextlib.contextmanager
    def _write(self) -> Iterator[None]:
        with self.index.write():
            yield

    # -- stored files

    def object_path(self, sha256: str) -> Path:
        return self.objects.path(sha256)

    def read_object(self, sha256: str) -> bytes:
        return self.objects.read(sha256)

    def _catalogue(self, sha: str, size: int, media_type: str) -> list[tuple[str, dict]]:
        row = {"sha256": sha, "size_bytes": size, "media_type": media_type, "stored_at": utc_now()}
        return [("files", row)] if self.index.insert_ignore("files", row) else []

    # -- audit trail

    def _append_event(
        self,
        kind: EventKind,
        batch_id: str | None,
        part_key: str | None,
        details: Mapping[str, Any],
        rows: Sequence[tuple[str, Mapping[str, Any]]] = (),
    ) -> EventRow:
        """Append one event (inside a write); chained to the head in meta, so a trail cut short stays cut."""
        length, prev = self.chain_head()
        body = dict(details)
        if rows:
            body["rows"] = [chain.row_entry(table, row) for table, row in rows]
        details_json = chain.canonical_bytes(body).decode("utf-8")
        event = EventRow(length + 1, utc_now(), kind.value, batch_id, part_key, details_json, prev, "")
        sha = chain.event_sha256(event.seq, event.recorded_at, event.kind, batch_id, part_key, details_json, prev)
        event = EventRow(**{**event.__dict__, "sha256": sha})
        self.index.insert("events", event.__dict__)
        self.index.update("meta", {"key": "chain_length"}, {"value": str(event.seq)})
        self.index.update("meta", {"key": "chain_head_sha256"}, {"value": sha})
        return event

    def _sign_head(self, key: signing.SigningKey) -> EventRow:
        """Append a 'head signed' event: ``key``'s signature over the chain head just reached (inside a write).

        The caller has checked that the key may sign (:class:`.register.Register`).
        """
        events, head = self.chain_head()
        record = chain.head_record(
            archive_id=self.archive_id,
            events=events,
            head_sha256=head,
            key_fingerprint=key.fingerprint,
            signed_at_utc=utc_now(),
        )
        signature = signing.sign_record(key, record)
        return self._append_event(
            EventKind.HEAD_SIGNED, None, None, {"record": record, "signature_hex": signature.hex()}
        )

    def chain_head(self) -> tuple[int, str]:
        """(number of events, SHA-256 of the last one) as the index records them."""
        return int(self._meta("chain_length") or 0), self._meta("chain_head_sha256") or GENESIS_SHA256

    def events(self) -> list[EventRow]:
        return [EventRow.from_mapping(r) for r in self.index.select("events", order_by=("seq",))]

    # -- reading

    def _rows(self, table: str, where: Mapping[str, Any] | None = None, order_by: Sequence[str] = ()) -> list:
        cls = row_type(table)
        return [cls.from_mapping(r) for r in self.index.select(table, where, order_by=order_by)]

    def batches(self) -> list[BatchRow]:
        return self._rows("batches", order_by=("started_at", "batch_id"))

    def find_batch(self, batch_id: str) -> BatchRow | None:
        rows = self._rows("batches", {"batch_id": batch_id})
        return rows[0] if rows else None

    def batch(self, batch_id: str) -> BatchRow:
        """The batch row; an :class:`InputError` naming the archive when there is none."""
        row = self.find_batch(batch_id)
        if row is None:
            known = ", ".join(b.batch_id for b in self.batches()[-5:]) or "none"
            raise InputError(f"{self.location}: --batch-id: no batch {batch_id!r} in this archive (latest: {known})")
        return row

    def parts(self, batch_id: str) -> list[PartRow]:
        return self._rows("parts", {"batch_id": batch_id}, ("position",))

    def part(self, batch_id: str, part_key: str) -> PartRow:
        """One planned part; an :class:`InputError` when the batch does not plan it."""
        rows = self._rows("parts", {"batch_id": batch_id, "part_key": part_key})
        if not rows:
            raise InputError(f"batch {batch_id!r}: part {part_key!r} is not planned in this batch")
        return rows[0]

    def regions(self, batch_id: str, part_key: str) -> list[dict[str, Any]]:
        return self.index.select("regions", {"batch_id": batch_id, "part_key": part_key}, order_by=("region_name",))

    def signoffs(self, batch_id: str) -> list[SignoffRow]:
        return self._rows("signatures", {"batch_id": batch_id}, ("signoff_no",))

    def dispositions(self, batch_id: str) -> list[DispositionRow]:
        return self._rows("dispositions", {"batch_id": batch_id}, ("part_key", "disposition_no"))

    def register(self) -> Register:
        return Register(self._rows("register", order_by=("entry_no",)))

    def read_result(self, part: PartRow) -> dict:
        """The stored result JSON of an inspected part (part result or error record)."""
        if part.result_sha256 is None:
            raise ValueError(f"part {part.part_key!r} of batch {part.batch_id!r} has no stored result")
        return json.loads(self.read_object(part.result_sha256))

    def results_sha256(self, batch_id: str) -> dict[str, str]:
        """Part key -> SHA-256 of its stored result, for every inspected part of the batch."""
        return {p.part_key: p.result_sha256 for p in self.parts(batch_id) if p.result_sha256}

    def batch_content_sha256(self, batch_id: str) -> str:
        """One hash over the batch's index rows: the batch, its parts in order, their regions."""
        content = {
            "batch": chain.encode_row("batches", self.index.select("batches", {"batch_id": batch_id})[0]),
            "parts": [
                chain.encode_row("parts", r)
                for r in self.index.select("parts", {"batch_id": batch_id}, order_by=("position",))
            ],
            "regions": [
                chain.encode_row("regions", r)
                for r in self.index.select("regions", {"batch_id": batch_id}, order_by=("part_key", "region_name"))
            ],
        }
        return chain.canonical_sha256(content)

    # -- signed records

    def add_register_entry(
        self,
        row: RegisterRow,
        owner_key: signing.SigningKey,
        expected_head: tuple[int, str],
        *,
        certificates_der: Sequence[bytes] = (),
    ) -> None:
        """Store a register entry the owner signed, the certificates issued with it, and the owner's
        signature over the new chain head."""
        stored = [(self.objects.put_bytes(der), len(der)) for der in certificates_der]
        with self._write():
            self._require_head(expected_head, exact=True)
            rows = [r for sha, size in stored for r in self._catalogue(sha, size, "application/pkix-cert")]
            self.index.insert("register", row.__dict__)
            rows.append(("register", row.__dict__))
            self._append_event(EventKind.REGISTER_ENTRY, None, None, {"entry_no": row.entry_no}, rows)
            self._sign_head(owner_key)

    def add_signoff(
        self, row: SignoffRow, *, signed_report_pdf: bytes, key: signing.SigningKey, expected_head: tuple[int, str]
    ) -> SignoffRow:
        """Store a sign-off (its row already numbered), its signed report edition, and a signed chain head."""
        edition_sha = self.objects.put_bytes(signed_report_pdf)
        if edition_sha != row.signed_report_sha256:
            raise ValueError("the signed report edition is not the one named in the sign-off row")
        with self._write():
            self._require_head(expected_head)
            self._require_number("signatures", {"batch_id": row.batch_id}, "signoff_no", row.signoff_no)
            self.register().require_signer(key.fingerprint, utc_now(), "--key", station_allowed=False)
            rows = self._catalogue(edition_sha, len(signed_report_pdf), "application/pdf")
            self.index.insert("signatures", row.__dict__)
            rows.append(("signatures", row.__dict__))
            self._append_event(EventKind.SIGNED, row.batch_id, None, {"signoff_no": row.signoff_no}, rows)
            self._sign_head(key)
        return self.signoffs(row.batch_id)[row.signoff_no - 1]

    def add_disposition(self, row: DispositionRow, *, key: signing.SigningKey, expected_head: tuple[int, str]) -> None:
        with self._write():
            self._require_head(expected_head)
            where = {"batch_id": row.batch_id, "part_key": row.part_key}
            self._require_number("dispositions", where, "disposition_no", row.disposition_no)
            self.register().require_signer(key.fingerprint, utc_now(), "--key", station_allowed=False)
            self.index.insert("dispositions", row.__dict__)
            self._append_event(
                EventKind.DISPOSITION,
                row.batch_id,
                row.part_key,
                {"disposition_no": row.disposition_no},
                [("dispositions", row.__dict__)],
            )
            self._sign_head(key)

    def _require_head(self, expected: tuple[int, str], *, exact: bool = False) -> None:
        """The head a record names must still be in the trail (``exact``: must still be the head).

        A sign-off binds the head at the moment it was signed; parts recorded by a running batch
        meanwhile do not change what it covers, a rewritten history does.
        """
        n, sha = expected
        found = self.chain_head() if exact else (n, self._event_sha(n))
        if found != (n, sha):
            raise InputError(
                f"{self.location}: the archive changed while the record was being signed; run the command again"
            )

    def _event_sha(self, seq: int) -> str | None:
        if seq == 0:
            return GENESIS_SHA256
        rows = self.index.select("events", {"seq": seq}, columns=("sha256",))
        return rows[0]["sha256"] if rows else None

    def _require_number(self, table: str, where: Mapping[str, Any], column: str, number: int) -> None:
        if (self.index.max_value(table, column, where) or 0) + 1 != number:
            raise InputError(
                f"{self.location}: another {column.replace('_', ' ')} was stored meanwhile; run the command again"
            )

    def record_verification(self, batch_id: str | None, problems: Sequence[str]) -> int:
        """Append a 'verified' event with the outcome of a verification; returns its number."""
        with self._write():
            details = {"failures": len(problems), "failures_sha256": sha256_bytes("\n".join(problems).encode("utf-8"))}
            return self._append_event(EventKind.VERIFIED, batch_id, None, details).seq
