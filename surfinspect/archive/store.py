"""The archive: an indexed, content-addressed, audit-trailed store of batches and sign-offs.

An archive is one folder::

    DIR/index.sqlite        the index (tables below)
    DIR/objects/ab/cdef...  every stored file, named by the SHA-256 of its bytes

Index tables
------------
``meta``        archive format, creation time, and the audit chain's head
                (``chain_length``, ``chain_head_sha256``)
``batches``     one row per batch: recipe, operator, station, part count, the
                hash of the planned image set, report and CSV hashes
``parts``       one row per planned part; ``verdict`` is NULL until inspected,
                then accept | reject | review | error
``regions``     each inspected region with its verdict and figures
``files``       the catalogue of stored objects (hash, size, media type)
``signatures``  sign-offs: the canonical record, the signature, the public key
``events``      the audit trail

The audit trail is append-only and hash-chained: event *n* holds the SHA-256
of event *n - 1* (the first holds 64 zeros), and its own SHA-256 is taken over
its sequence number, time, kind, batch, part, details and that link. ``meta``
holds the number of events and the last event's hash, so removing events from
the end is noticed; sequence numbers make a gap or a reordering visible.
Each event's details carry the hashes of what it reports (result, report,
sign-off record), so the trail anchors the index: a row edited or deleted in
the index no longer agrees with the event that recorded it. A sign-off record
also holds the chain head at signing time, so history before a signature
cannot be rewritten without breaking that signature.

Every write is one SQLite transaction taken with ``BEGIN IMMEDIATE`` (writers
queue behind a busy timeout instead of failing), and every stored file is
written under a temporary name and renamed into place, so two processes can
write the same archive and a crash never leaves half a record.
"""

from __future__ import annotations

import contextlib
import enum
import json
import os
import shutil
import socket
import sqlite3
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Callable, Iterator, Mapping, Sequence

from ..errors import InputError
from ..fsutil import atomic_path, ensure_output_dir, sha256_bytes, sha256_file
from ..results import SCHEMA as RESULT_SCHEMA
from ..results import PartVerdict, SignOff
from . import signing

__all__ = [
    "ARCHIVE_FORMAT",
    "ERROR_SCHEMA",
    "EventKind",
    "Archive",
    "BatchRow",
    "PartRow",
    "SignoffRow",
    "BatchPlan",
    "image_set_sha256",
    "error_record_json",
    "sign_batch",
    "verify",
    "utc_now",
]

ARCHIVE_FORMAT = "surfinspect.archive/1"
#: Schema of the record stored for a part whose image could not be inspected.
ERROR_SCHEMA = "surfinspect.part-error/1"
INDEX_NAME = "index.sqlite"
OBJECTS_DIR = "objects"
GENESIS_SHA256 = "0" * 64
BUSY_TIMEOUT_S = 60.0
ERROR_VERDICT = "error"
_OBJECT_MODE = (
    0o440  # never written again (read-only guards against slips); not world-readable: images are customer data
)


class EventKind(str, enum.Enum):
    BATCH_STARTED = "batch started"
    BATCH_RESUMED = "batch resumed"
    PART_INSPECTED = "part inspected"
    REPORT_WRITTEN = "report written"
    SIGNED = "signed"
    VERIFIED = "verified"


_SCHEMA_SQL = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS batches (
    batch_id TEXT PRIMARY KEY,
    recipe_name TEXT NOT NULL,
    recipe_revision INTEGER NOT NULL,
    recipe_sha256 TEXT NOT NULL,
    operator TEXT,
    station TEXT,
    part_count INTEGER NOT NULL,
    image_set_sha256 TEXT NOT NULL,
    started_at TEXT NOT NULL,
    finished_at TEXT,
    report_sha256 TEXT,
    regions_csv_sha256 TEXT,
    report_generated_at TEXT
);
CREATE TABLE IF NOT EXISTS parts (
    batch_id TEXT NOT NULL REFERENCES batches(batch_id),
    part_key TEXT NOT NULL,
    position INTEGER NOT NULL,
    image_sha256 TEXT,
    result_sha256 TEXT,
    overlay_sha256 TEXT,
    verdict TEXT,
    error TEXT,
    inspected_at TEXT,
    PRIMARY KEY (batch_id, part_key)
);
CREATE TABLE IF NOT EXISTS regions (
    batch_id TEXT NOT NULL,
    part_key TEXT NOT NULL,
    region_name TEXT NOT NULL,
    verdict TEXT NOT NULL,
    lay_deg REAL,
    deviation_deg REAL,
    coherence REAL,
    defect_area_fraction REAL,
    PRIMARY KEY (batch_id, part_key, region_name)
);
CREATE TABLE IF NOT EXISTS files (
    sha256 TEXT PRIMARY KEY,
    size_bytes INTEGER NOT NULL,
    media_type TEXT NOT NULL,
    stored_at TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS signatures (
    batch_id TEXT NOT NULL,
    signoff_no INTEGER NOT NULL,
    signer_name TEXT NOT NULL,
    key_fingerprint TEXT NOT NULL,
    public_key_hex TEXT NOT NULL,
    meaning TEXT NOT NULL,
    signed_at_utc TEXT NOT NULL,
    comment TEXT NOT NULL,
    record_json TEXT NOT NULL,
    record_sha256 TEXT NOT NULL UNIQUE,
    signature_hex TEXT NOT NULL,
    signed_report_sha256 TEXT NOT NULL,
    PRIMARY KEY (batch_id, signoff_no)
);
CREATE TABLE IF NOT EXISTS events (
    seq INTEGER PRIMARY KEY,
    recorded_at TEXT NOT NULL,
    kind TEXT NOT NULL,
    batch_id TEXT,
    part_key TEXT,
    details TEXT NOT NULL,
    prev_sha256 TEXT NOT NULL,
    sha256 TEXT NOT NULL
);
"""


def utc_now() -> str:
    """The current UTC time as ISO 8601 with milliseconds and a ``Z``."""
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def image_set_sha256(parts: Sequence[tuple[str, str | None]]) -> str:
    """One hash over a batch's planned parts: (part key, image SHA-256 or None), in key order."""
    listing = [[key, sha or ""] for key, sha in sorted(parts)]
    return sha256_bytes(signing.canonical_record_bytes({"parts": listing}))


def error_record_json(part_key: str, image_sha256: str | None, error: str, *, at_utc: str | None = None) -> bytes:
    """The stored record of a part that could not be inspected (schema ``surfinspect.part-error/1``)."""
    doc = {
        "schema": ERROR_SCHEMA,
        "name": part_key,
        "image": {"sha256": image_sha256},
        "verdict": ERROR_VERDICT,
        "error": error,
        "recorded_at": at_utc or utc_now(),
    }
    return (json.dumps(doc, indent=2, sort_keys=True, ensure_ascii=False) + "\n").encode("utf-8")


def _event_sha256(seq: int, recorded_at: str, kind: str, batch_id, part_key, details: str, prev: str) -> str:
    body = {
        "seq": seq,
        "recorded_at": recorded_at,
        "kind": kind,
        "batch_id": batch_id,
        "part_key": part_key,
        "details": json.loads(details),
        "prev_sha256": prev,
    }
    return sha256_bytes(signing.canonical_record_bytes(body))


# ----------------------------------------------------------------- row types


@dataclass(frozen=True)
class BatchRow:
    batch_id: str
    recipe_name: str
    recipe_revision: int
    recipe_sha256: str
    operator: str | None
    station: str | None
    part_count: int
    image_set_sha256: str
    started_at: str
    finished_at: str | None
    report_sha256: str | None
    regions_csv_sha256: str | None
    report_generated_at: str | None

    @property
    def is_finished(self) -> bool:
        return self.finished_at is not None


@dataclass(frozen=True)
class PartRow:
    batch_id: str
    part_key: str
    position: int
    image_sha256: str | None
    result_sha256: str | None
    overlay_sha256: str | None
    verdict: str | None  # None while pending
    error: str | None
    inspected_at: str | None

    @property
    def is_done(self) -> bool:
        return self.verdict is not None


@dataclass(frozen=True)
class SignoffRow:
    batch_id: str
    signoff_no: int
    signer_name: str
    key_fingerprint: str
    public_key_hex: str
    meaning: str
    signed_at_utc: str
    comment: str
    record_json: str
    record_sha256: str
    signature_hex: str
    signed_report_sha256: str


@dataclass(frozen=True)
class BatchPlan:
    """What :meth:`Archive.start_batch` found: a new batch, or one to resume."""

    batch: BatchRow
    resumed: bool
    pending: tuple[str, ...]  # part keys still to inspect, in batch order


def _rows(cursor: sqlite3.Cursor, cls):
    return [cls(*row) for row in cursor.fetchall()]


_BATCH_COLS = ", ".join(BatchRow.__dataclass_fields__)
_PART_COLS = ", ".join(PartRow.__dataclass_fields__)
_SIGNOFF_COLS = ", ".join(SignoffRow.__dataclass_fields__)


# ------------------------------------------------------------------- archive


class Archive:
    """An archive folder; open with ``create=True`` to make it when missing.

    Raises
    ------
    InputError
        When the folder is not an archive (and ``create`` is false), or holds
        an archive of another format.
    """

    def __init__(self, root: str | os.PathLike, *, create: bool = False):
        self.root = Path(root)
        index = self.root / INDEX_NAME
        if self.root.exists() and not self.root.is_dir():
            allowed = "an archive folder, or a new name to make one" if create else "an archive folder"
            raise InputError(f"--archive {self.root}: not a folder (a file of that name exists; allowed: {allowed})")
        # an index of 0 bytes holds nothing yet (sqlite makes the file before its first write)
        existed = index.is_file() and index.stat().st_size > 0
        if not existed and not index.exists():
            if not create:
                raise InputError(
                    f"{self.root}: not a surfinspect archive (no {INDEX_NAME}; run `surfinspect batch` first)"
                )
            ensure_output_dir(self.root, "--archive")
        try:
            self._db = sqlite3.connect(index, timeout=BUSY_TIMEOUT_S, isolation_level=None)
        except sqlite3.DatabaseError as exc:
            raise InputError(f"{index}: cannot open the archive index ({exc})") from None
        try:
            self._db.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
            # an existing file is checked before anything is written into it or beside it
            if existed:
                self._check_format()
            if create:
                self._make_objects_dir()
                self._create_schema()
            if not existed:
                self._check_format()
        except BaseException:
            self._db.close()
            raise

    # -- connection and transactions

    def _make_objects_dir(self) -> None:
        try:
            (self.root / OBJECTS_DIR).mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise InputError(
                f"--archive {self.root}: cannot make its {OBJECTS_DIR} folder ({exc.strerror or exc})"
            ) from None

    def _create_schema(self) -> None:
        try:
            with self._write() as db:
                for statement in filter(None, (s.strip() for s in _SCHEMA_SQL.split(";"))):
                    db.execute(statement)
                db.execute("INSERT OR IGNORE INTO meta VALUES ('format', ?)", (ARCHIVE_FORMAT,))
                db.execute("INSERT OR IGNORE INTO meta VALUES ('created_at', ?)", (utc_now(),))
                db.execute("INSERT OR IGNORE INTO meta VALUES ('chain_length', '0')")
                db.execute("INSERT OR IGNORE INTO meta VALUES ('chain_head_sha256', ?)", (GENESIS_SHA256,))
        except sqlite3.DatabaseError as exc:
            raise InputError(f"{self.root / INDEX_NAME}: cannot write the archive index ({exc})") from None

    def _check_format(self) -> None:
        index = self.root / INDEX_NAME
        try:
            fmt = self._db.execute("SELECT value FROM meta WHERE key = 'format'").fetchone()
        except sqlite3.DatabaseError as exc:
            raise InputError(
                f"{index}: not a surfinspect archive index ({exc}); allowed: the index of an archive made by "
                "`surfinspect batch`, or a new --archive folder"
            ) from None
        if fmt is None or fmt[0] != ARCHIVE_FORMAT:
            got = None if fmt is None else fmt[0]
            raise InputError(f"{index}: meta.format: unknown archive format (got {got!r}, allowed {ARCHIVE_FORMAT!r})")

    @contextlib.contextmanager
    def _write(self) -> Iterator[sqlite3.Connection]:
        """One write transaction; the write lock is taken at the start (no lock upgrade races)."""
        self._db.execute("BEGIN IMMEDIATE")
        try:
            yield self._db
        except BaseException:
            self._db.execute("ROLLBACK")
            raise
        self._db.execute("COMMIT")

    def close(self) -> None:
        self._db.close()

    def __enter__(self) -> "Archive":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # -- stored files

    def object_path(self, sha256: str) -> Path:
        return self.root / OBJECTS_DIR / sha256[:2] / sha256[2:]

    def read_object(self, sha256: str) -> bytes:
        return self.object_path(sha256).read_bytes()

    def _store_bytes(self, data: bytes) -> str:
        sha = sha256_bytes(data)
        target = self.object_path(sha)
        if not target.exists():
            with atomic_path(target, mode=_OBJECT_MODE) as tmp:
                tmp.write_bytes(data)
        return sha

    def _store_file(self, path: Path, expected_sha256: str | None) -> str:
        sha = sha256_file(path)
        if expected_sha256 is not None and sha != expected_sha256:
            raise InputError(
                f"{path}: the file changed while the batch ran (hash {sha[:12]}…, planned {expected_sha256[:12]}…)"
            )
        target = self.object_path(sha)
        if not target.exists():
            with atomic_path(target, mode=_OBJECT_MODE) as tmp:
                shutil.copyfile(path, tmp)
                if sha256_file(tmp) != sha:
                    raise InputError(f"{path}: the file changed while it was being archived; run the batch again")
        return sha

    @staticmethod
    def _catalogue(db: sqlite3.Connection, sha: str, size: int, media_type: str) -> None:
        db.execute("INSERT OR IGNORE INTO files VALUES (?, ?, ?, ?)", (sha, size, media_type, utc_now()))

    # -- audit trail

    @staticmethod
    def _append_event(
        db: sqlite3.Connection, kind: EventKind, batch_id: str | None, part_key: str | None, details: Mapping[str, Any]
    ) -> int:
        # chained to the head recorded in meta, not to the last row, so a trail cut short stays visibly cut
        length = int(db.execute("SELECT value FROM meta WHERE key = 'chain_length'").fetchone()[0])
        prev = db.execute("SELECT value FROM meta WHERE key = 'chain_head_sha256'").fetchone()[0]
        seq = length + 1
        at = utc_now()
        details_json = signing.canonical_record_bytes(details).decode("utf-8")
        sha = _event_sha256(seq, at, kind.value, batch_id, part_key, details_json, prev)
        db.execute(
            "INSERT INTO events VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
            (seq, at, kind.value, batch_id, part_key, details_json, prev, sha),
        )
        db.execute("UPDATE meta SET value = ? WHERE key = 'chain_length'", (str(seq),))
        db.execute("UPDATE meta SET value = ? WHERE key = 'chain_head_sha256'", (sha,))
        return seq

    def chain_head(self) -> tuple[int, str]:
        """(number of events, SHA-256 of the last one) as the index records them."""
        meta = dict(self._db.execute("SELECT key, value FROM meta").fetchall())
        return int(meta.get("chain_length", 0)), meta.get("chain_head_sha256", GENESIS_SHA256)

    # -- reading

    def batches(self) -> list[BatchRow]:
        return _rows(self._db.execute(f"SELECT {_BATCH_COLS} FROM batches ORDER BY started_at, batch_id"), BatchRow)

    def find_batch(self, batch_id: str) -> BatchRow | None:
        rows = _rows(self._db.execute(f"SELECT {_BATCH_COLS} FROM batches WHERE batch_id = ?", (batch_id,)), BatchRow)
        return rows[0] if rows else None

    def batch(self, batch_id: str) -> BatchRow:
        """The batch row; an :class:`InputError` naming the archive when there is none."""
        row = self.find_batch(batch_id)
        if row is None:
            known = ", ".join(b.batch_id for b in self.batches()[-5:]) or "none"
            raise InputError(f"{self.root}: --batch-id: no batch {batch_id!r} in this archive (latest: {known})")
        return row

    def parts(self, batch_id: str) -> list[PartRow]:
        return _rows(
            self._db.execute(f"SELECT {_PART_COLS} FROM parts WHERE batch_id = ? ORDER BY position", (batch_id,)),
            PartRow,
        )

    def signoffs(self, batch_id: str) -> list[SignoffRow]:
        return _rows(
            self._db.execute(
                f"SELECT {_SIGNOFF_COLS} FROM signatures WHERE batch_id = ? ORDER BY signoff_no", (batch_id,)
            ),
            SignoffRow,
        )

    def read_result(self, part: PartRow) -> dict:
        """The stored result JSON of an inspected part (part result or error record)."""
        if part.result_sha256 is None:
            raise ValueError(f"part {part.part_key!r} of batch {part.batch_id!r} has no stored result")
        return json.loads(self.read_object(part.result_sha256))

    # -- writing a batch

    def start_batch(
        self,
        batch_id: str,
        *,
        recipe_name: str,
        recipe_revision: int,
        recipe_path: str | os.PathLike,
        recipe_sha256: str,
        parts: Sequence[tuple[str, str | None]],
        operator: str | None = None,
        station: str | None = None,
    ) -> BatchPlan:
        """Open a new batch, or find the one to resume under the same id.

        Parameters
        ----------
        parts : sequence of (part_key, image_sha256 or None)
            Every image of the batch in batch order; None for a file whose
            bytes could not be read.

        Raises
        ------
        InputError
            When ``batch_id`` exists with another image set or recipe (a batch
            id names one set of parts for good).
        """
        check_batch_id(batch_id)
        if len({key for key, _ in parts}) != len(parts):
            raise ValueError("part keys of a batch must be unique")
        recipe_path = Path(recipe_path)
        recipe_object = self._store_file(recipe_path, recipe_sha256)
        set_sha = image_set_sha256(parts)
        with self._write() as db:
            self._catalogue(db, recipe_object, recipe_path.stat().st_size, "application/yaml")
            existing = self.find_batch(batch_id)
            if existing is None:
                station = station or socket.gethostname()
                started = utc_now()
                db.execute(
                    "INSERT INTO batches VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, NULL, NULL, NULL, NULL)",
                    (
                        batch_id,
                        recipe_name,
                        recipe_revision,
                        recipe_sha256,
                        operator,
                        station,
                        len(parts),
                        set_sha,
                        started,
                    ),
                )
                db.executemany(
                    "INSERT INTO parts VALUES (?, ?, ?, ?, NULL, NULL, NULL, NULL, NULL)",
                    [(batch_id, key, i, sha) for i, (key, sha) in enumerate(parts)],
                )
                self._append_event(
                    db,
                    EventKind.BATCH_STARTED,
                    batch_id,
                    None,
                    {
                        "recipe_name": recipe_name,
                        "recipe_revision": recipe_revision,
                        "recipe_sha256": recipe_sha256,
                        "part_count": len(parts),
                        "image_set_sha256": set_sha,
                        "operator": operator or "",
                        "station": station,
                    },
                )
                return BatchPlan(self.batch(batch_id), False, tuple(key for key, _ in parts))
            self._refuse_different_batch(existing, recipe_sha256, parts, set_sha)
            pending = tuple(p.part_key for p in self.parts(batch_id) if not p.is_done)
            if pending or not existing.is_finished:
                self._append_event(db, EventKind.BATCH_RESUMED, batch_id, None, {"pending_parts": len(pending)})
            return BatchPlan(existing, True, pending)

    def _refuse_different_batch(
        self, existing: BatchRow, recipe_sha256: str, parts: Sequence[tuple[str, str | None]], set_sha: str
    ) -> None:
        state = "finished" if existing.is_finished else "unfinished"
        if existing.recipe_sha256 != recipe_sha256:
            raise InputError(
                f"--batch-id: {state} batch {existing.batch_id!r} was run with another recipe "
                f"({existing.recipe_name} rev {existing.recipe_revision}, {existing.recipe_sha256[:12]}…); "
                "use a new batch id"
            )
        if existing.image_set_sha256 == set_sha:
            return
        planned = {p.part_key: p.image_sha256 for p in self.parts(existing.batch_id)}
        given = dict(parts)
        added = sorted(set(given) - set(planned))
        removed = sorted(set(planned) - set(given))
        changed = sorted(k for k in set(given) & set(planned) if given[k] != planned[k])
        what = "; ".join(
            f"{label}: {', '.join(keys[:3])}{' …' if len(keys) > 3 else ''}"
            for label, keys in (("new", added), ("missing", removed), ("changed", changed))
            if keys
        )
        raise InputError(
            f"--batch-id: {state} batch {existing.batch_id!r} holds other images ({what}); "
            "a batch id names one set of images: use a new batch id"
        )

    def record_part(
        self,
        batch_id: str,
        part_key: str,
        *,
        result_json: bytes,
        image_path: str | os.PathLike | None,
        overlay_png: bytes | None = None,
    ) -> PartRow | None:
        """Store one inspected part: its image, result (or error record) and overlay.

        ``image_path`` is the part's image file (None only for a file whose
        bytes could not be read when the batch was planned); it is archived
        for errors too, so that an auditor sees what was fed in.

        Returns the part's row, or None (storing nothing in the index) when
        the part was already recorded: a part is recorded exactly once.

        Raises
        ------
        InputError
            When the part is not planned in the batch, or the image's bytes or
            the result's image hash differ from the planned image.
        """
        result = json.loads(result_json)
        planned = self.part(batch_id, part_key)
        if planned.is_done:
            return None
        if result.get("image", {}).get("sha256") != planned.image_sha256:
            raise InputError(f"{part_key}: the result names another image than the one planned for the batch")
        if (image_path is None) != (planned.image_sha256 is None):
            raise ValueError(f"{part_key}: give the image path exactly when the planned image has a hash")
        image_sha = None if image_path is None else self._store_file(Path(image_path), planned.image_sha256)
        result_sha = self._store_bytes(result_json)
        overlay_sha = self._store_bytes(overlay_png) if overlay_png is not None else None
        verdict, error, region_rows = _index_rows_of(result)
        at = utc_now()
        with self._write() as db:
            if self.part(batch_id, part_key).is_done:  # another process got here first
                return None
            if image_sha is not None:
                self._catalogue(db, image_sha, Path(image_path).stat().st_size, "image")
            self._catalogue(db, result_sha, len(result_json), "application/json")
            if overlay_sha is not None:
                self._catalogue(db, overlay_sha, len(overlay_png), "image/png")
            db.execute(
                "UPDATE parts SET result_sha256 = ?, overlay_sha256 = ?, verdict = ?, error = ?, inspected_at = ? "
                "WHERE batch_id = ? AND part_key = ?",
                (result_sha, overlay_sha, verdict, error, at, batch_id, part_key),
            )
            db.executemany(
                "INSERT INTO regions VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                [(batch_id, part_key, *row) for row in region_rows],
            )
            self._append_event(
                db,
                EventKind.PART_INSPECTED,
                batch_id,
                part_key,
                {
                    "image_sha256": planned.image_sha256 or "",
                    "result_sha256": result_sha,
                    "overlay_sha256": overlay_sha or "",
                    "verdict": verdict,
                },
            )
        return self.part(batch_id, part_key)

    def part(self, batch_id: str, part_key: str) -> PartRow:
        """One planned part; an :class:`InputError` when the batch does not plan it."""
        rows = _rows(
            self._db.execute(
                f"SELECT {_PART_COLS} FROM parts WHERE batch_id = ? AND part_key = ?", (batch_id, part_key)
            ),
            PartRow,
        )
        if not rows:
            raise InputError(f"batch {batch_id!r}: part {part_key!r} is not planned in this batch")
        return rows[0]

    def finish_batch(
        self, batch_id: str, *, report_pdf: bytes, regions_csv: bytes, report_generated_at: str
    ) -> BatchRow:
        """Store the batch report and region CSV and mark the batch finished.

        Raises
        ------
        InputError
            When parts are still pending or the batch is already finished.
        """
        batch = self.batch(batch_id)
        if batch.is_finished:
            raise InputError(f"batch {batch_id!r} is already finished; its report is never replaced")
        pending = [p.part_key for p in self.parts(batch_id) if not p.is_done]
        if pending:
            raise InputError(f"batch {batch_id!r}: {len(pending)} part(s) not inspected yet (first: {pending[0]})")
        report_sha = self._store_bytes(report_pdf)
        csv_sha = self._store_bytes(regions_csv)
        with self._write() as db:
            self._catalogue(db, report_sha, len(report_pdf), "application/pdf")
            self._catalogue(db, csv_sha, len(regions_csv), "text/csv")
            db.execute(
                "UPDATE batches SET finished_at = ?, report_sha256 = ?, regions_csv_sha256 = ?, report_generated_at = ? "
                "WHERE batch_id = ? AND finished_at IS NULL",
                (utc_now(), report_sha, csv_sha, report_generated_at, batch_id),
            )
            self._append_event(
                db,
                EventKind.REPORT_WRITTEN,
                batch_id,
                None,
                {
                    "report_sha256": report_sha,
                    "regions_csv_sha256": csv_sha,
                    "report_generated_at": report_generated_at,
                    "verdict_counts": verdict_counts(self.parts(batch_id)),
                },
            )
        return self.batch(batch_id)

    def results_sha256(self, batch_id: str) -> dict[str, str]:
        """Part key -> SHA-256 of its stored result, for every inspected part of the batch."""
        return {p.part_key: p.result_sha256 for p in self.parts(batch_id) if p.result_sha256}

    def add_signoff(
        self,
        batch_id: str,
        *,
        record: Mapping[str, Any],
        signature: bytes,
        public_key_raw: bytes,
        signed_report_pdf: bytes,
    ) -> SignoffRow:
        """Store a sign-off whose record covers the batch as it stands now.

        Raises
        ------
        InputError
            When the batch is unknown or unfinished, or the record does not
            cover its current report and results.
        ValueError
            When the signature does not hold over the record.
        """
        batch = self.batch(batch_id)
        _require_finished(batch)
        if not signing.verify_record(public_key_raw, record, signature):
            raise ValueError("the signature does not hold over the record")
        if record.get("batch_id") != batch_id or record.get("report_sha256") != batch.report_sha256:
            raise InputError(f"batch {batch_id!r}: the sign-off record does not cover this batch's report")
        if record.get("results_sha256") != self.results_sha256(batch_id):
            raise InputError(f"batch {batch_id!r}: the sign-off record does not cover this batch's results")
        record_bytes = signing.canonical_record_bytes(record)
        record_sha = sha256_bytes(record_bytes)
        edition_sha = self._store_bytes(signed_report_pdf)
        with self._write() as db:
            self._catalogue(db, edition_sha, len(signed_report_pdf), "application/pdf")
            number = (
                1
                + db.execute(
                    "SELECT COALESCE(MAX(signoff_no), 0) FROM signatures WHERE batch_id = ?", (batch_id,)
                ).fetchone()[0]
            )
            db.execute(
                "INSERT INTO signatures VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (
                    batch_id,
                    number,
                    record["signer_name"],
                    record["key_fingerprint"],
                    public_key_raw.hex(),
                    record["meaning"],
                    record["signed_at_utc"],
                    record["comment"],
                    record_bytes.decode("utf-8"),
                    record_sha,
                    signature.hex(),
                    edition_sha,
                ),
            )
            self._append_event(
                db,
                EventKind.SIGNED,
                batch_id,
                None,
                {
                    "signoff_no": number,
                    "signoffs_in_batch": number,
                    "signer_name": record["signer_name"],
                    "meaning": record["meaning"],
                    "record_sha256": record_sha,
                    "signature_sha256": sha256_bytes(signature),
                    "signed_report_sha256": edition_sha,
                },
            )
        return self.signoffs(batch_id)[number - 1]

    def record_verification(self, batch_id: str | None, failures: Sequence[str]) -> int:
        """Append a 'verified' event with the outcome of :func:`verify`; returns its number."""
        with self._write() as db:
            return self._append_event(
                db,
                EventKind.VERIFIED,
                batch_id,
                None,
                {"failures": len(failures), "failures_sha256": sha256_bytes("\n".join(failures).encode("utf-8"))},
            )


def check_batch_id(batch_id: str) -> str:
    """A batch id is 1 to 64 letters, digits, '.', '_' or '-', starting with a letter or digit."""
    ok = 0 < len(batch_id) <= 64 and batch_id[0].isalnum() and all(c.isalnum() or c in "._-" for c in batch_id)
    if not ok or not batch_id.isascii():
        raise InputError(
            f"--batch-id: {batch_id!r} is not a valid batch id (allowed 1-64 ASCII letters, digits, '.', '_', '-')"
        )
    return batch_id


def _require_finished(batch: BatchRow) -> None:
    if not batch.is_finished:
        raise InputError(
            f"--batch-id: batch {batch.batch_id!r} is not finished (no batch report yet); run the batch again to finish it"
        )


def verdict_counts(parts: Sequence[PartRow]) -> dict[str, int]:
    """Number of parts per verdict (accept, reject, review, error, pending)."""
    counts = {v.value: 0 for v in PartVerdict} | {ERROR_VERDICT: 0, "pending": 0}
    for p in parts:
        counts[p.verdict or "pending"] += 1
    return counts


def _index_rows_of(result: Mapping[str, Any]) -> tuple[str, str | None, list[tuple]]:
    """Part verdict, error text and region rows as the index holds them, from a stored result."""
    schema = result.get("schema")
    if schema == ERROR_SCHEMA:
        return ERROR_VERDICT, str(result.get("error", "")), []
    if schema != RESULT_SCHEMA:
        raise ValueError(
            f"schema: unknown result schema (got {schema!r}, allowed {RESULT_SCHEMA!r} or {ERROR_SCHEMA!r})"
        )
    regions = [
        (
            r["name"],
            r["verdict"],
            r.get("lay_deg"),
            r.get("deviation_deg"),
            r.get("coherence"),
            r.get("defect_area_fraction"),
        )
        for r in result["regions"]
    ]
    return result["verdict"], None, regions


# ------------------------------------------------------------------ sign-off


def sign_batch(
    archive: Archive,
    batch_id: str,
    key: signing.SigningKey,
    *,
    meaning: str,
    comment: str = "",
    render_edition: Callable[[SignOff], bytes],
    signed_at_utc: str | None = None,
) -> SignoffRow:
    """Sign a finished batch and store the signed edition of its report.

    The record covers the batch report's hash, every part's result hash and
    the audit chain head; ``render_edition`` receives the :class:`SignOff` to
    print in the report's sign-off block and returns the PDF bytes.

    Raises
    ------
    InputError
        For an unknown or unfinished batch, or an unknown meaning.
    """
    batch = archive.batch(batch_id)
    _require_finished(batch)
    events, head = archive.chain_head()
    record = signing.make_signoff_record(
        signer_name=key.signer_name,
        key_fingerprint=key.fingerprint,
        signed_at_utc=signed_at_utc or utc_now(),
        meaning=meaning,
        comment=" ".join(comment.split()),
        batch_id=batch_id,
        report_sha256=batch.report_sha256,
        results_sha256=archive.results_sha256(batch_id),
    )
    record["audit_events"] = events
    record["audit_head_sha256"] = head
    signature = signing.sign_record(key, record)
    signoff = SignOff(
        signer_name=record["signer_name"],
        meaning=meaning,
        signed_at_utc=record["signed_at_utc"],
        key_fingerprint=key.fingerprint,
        comment=record["comment"],
        record_sha256=sha256_bytes(signing.canonical_record_bytes(record)),
        report_sha256=batch.report_sha256,
    )
    edition = render_edition(signoff)
    return archive.add_signoff(
        batch_id, record=record, signature=signature, public_key_raw=key.public_key_raw, signed_report_pdf=edition
    )


# -------------------------------------------------------------- verification


def verify(archive: Archive | str | os.PathLike, batch_id: str | None = None) -> list[str]:
    """Check the whole archive (or one batch and the audit trail) and name every failure.

    Steps: (1) the audit chain: sequence numbers without gaps, each event's
    hash over its own content, each link to the event before, and the head
    recorded in ``meta``; (2) every stored file against its content hash;
    (3) the index against the audit trail (part list, each part's result and
    verdict, the report, every sign-off); (4) each result against its image
    and recipe hashes, and the region verdicts in the index against the
    stored result; (5) every signature over its record, and the record
    against the batch's current report, results and audit trail.

    Returns
    -------
    list of str
        One sentence per failure; empty when everything holds.

    Raises
    ------
    InputError
        When the archive or the batch does not exist.
    """
    own = not isinstance(archive, Archive)
    arc = Archive(archive) if own else archive
    try:
        return _Verifier(arc, batch_id).run()
    finally:
        if own:
            arc.close()


class _Verifier:
    def __init__(self, archive: Archive, batch_id: str | None):
        self.archive = archive
        self.db = archive._db
        self.batches = [archive.batch(batch_id)] if batch_id is not None else archive.batches()
        self.failures: list[str] = []
        self.events: list[tuple] = []
        self.hash_ok: dict[str, bool] = {}

    def fail(self, text: str) -> None:
        self.failures.append(text)

    def run(self) -> list[str]:
        self.check_chain()
        for batch in self.batches:
            parts = self.archive.parts(batch.batch_id)
            self.check_files(batch, parts)
            self.check_against_trail(batch, parts)
            self.check_results(batch, parts)
            self.check_signoffs(batch, parts)
        return self.failures

    # (1) the audit chain
    def check_chain(self) -> None:
        rows = self.db.execute(
            "SELECT seq, recorded_at, kind, batch_id, part_key, details, prev_sha256, sha256 FROM events ORDER BY seq"
        ).fetchall()
        expected_seq, prev_sha, prev_seq = 1, GENESIS_SHA256, 0
        for seq, at, kind, b, p, details, prev, sha in rows:
            if seq != expected_seq:
                where = f"jumps from event {expected_seq - 1} to" if expected_seq > 1 else "starts at"
                self.fail(f"audit trail: event(s) {expected_seq}–{seq - 1} are missing (the trail {where} event {seq})")
            elif prev != prev_sha:
                self.fail(
                    f"audit trail: event {seq} ({kind}) does not follow event {prev_seq}: its link to the event "
                    "before is broken (events were reordered, removed or rewritten)"
                )
            try:
                recomputed = _event_sha256(seq, at, kind, b, p, details, prev)
            except (ValueError, TypeError):
                recomputed = None
            if recomputed != sha:
                origin = _original_position(seq, at, kind, b, p, details, prev, sha)
                if origin is not None:
                    self.fail(
                        f"audit trail: the event at position {seq} ({kind}) was recorded as event {origin}: events were reordered"
                    )
                else:
                    self.fail(f"audit trail: event {seq} ({kind}) does not match its own hash: its content was altered")
            expected_seq, prev_sha, prev_seq = seq + 1, sha, seq
            self.events.append((seq, kind, b, p, _json_or_empty(details)))
        length, head = self.archive.chain_head()
        last = rows[-1][0] if rows else 0
        if last < length:
            self.fail(
                f"audit trail: it ends at event {last} but the index records {length} events: "
                f"event(s) {last + 1}–{length} were removed from the end"
            )
        elif last > length:
            self.fail(
                f"audit trail: it holds {last} events but the index records only {length} (events were added behind its back)"
            )
        elif rows and head != prev_sha:
            self.fail("audit trail: the last event's hash does not match the chain head recorded in the index (meta)")

    def _events(self, batch_id: str, kind: EventKind) -> list[tuple]:
        return [e for e in self.events if e[2] == batch_id and e[1] == kind.value]

    # (2) stored files
    def check_files(self, batch: BatchRow, parts: Sequence[PartRow]) -> None:
        refs: list[tuple[str, str]] = [(batch.recipe_sha256, f"recipe of batch {batch.batch_id!r}")]
        for label, sha in (("batch report", batch.report_sha256), ("region CSV", batch.regions_csv_sha256)):
            if sha:
                refs.append((sha, f"{label} of batch {batch.batch_id!r}"))
        for p in parts:
            for label, sha in (
                ("image", p.image_sha256 if p.is_done else None),
                ("result", p.result_sha256),
                ("overlay", p.overlay_sha256),
            ):
                if sha:
                    refs.append((sha, f"{label} of part {p.part_key!r} in batch {batch.batch_id!r}"))
        for s in self.archive.signoffs(batch.batch_id):
            refs.append((s.signed_report_sha256, f"signed report #{s.signoff_no} of batch {batch.batch_id!r}"))
        catalogued = {row[0] for row in self.db.execute("SELECT sha256 FROM files")}
        for sha, what in refs:
            if sha not in catalogued:
                self.fail(f"stored file {sha[:12]}… ({what}) is missing from the file catalogue")
            if not self.file_intact(sha):
                path = self.archive.object_path(sha).relative_to(self.archive.root)
                state = (
                    "is missing"
                    if not self.archive.object_path(sha).exists()
                    else "has changed (its content no longer matches its hash)"
                )
                self.fail(f"stored file {path} ({what}) {state}")

    def file_intact(self, sha: str) -> bool:
        if sha not in self.hash_ok:
            path = self.archive.object_path(sha)
            self.hash_ok[sha] = path.is_file() and sha256_file(path) == sha
        return self.hash_ok[sha]

    # (3) the index against the audit trail
    def check_against_trail(self, batch: BatchRow, parts: Sequence[PartRow]) -> None:
        bid = batch.batch_id
        started = self._events(bid, EventKind.BATCH_STARTED)
        if len(started) != 1:
            self.fail(f"batch {bid!r}: the audit trail holds {len(started)} 'batch started' events (expected 1)")
        else:
            d = started[0][4]
            planned_set = image_set_sha256([(p.part_key, p.image_sha256) for p in parts])
            if d.get("image_set_sha256") != planned_set or d.get("part_count") != len(parts):
                self.fail(
                    f"batch {bid!r}: the index lists {len(parts)} parts that differ from the {d.get('part_count')} "
                    "recorded when the batch started (parts were added, removed or changed in the index)"
                )
            if d.get("recipe_sha256") != batch.recipe_sha256 or planned_set != batch.image_set_sha256:
                self.fail(f"batch {bid!r}: the batch row no longer matches what was recorded when the batch started")
        inspected: dict[str, list[dict]] = {}
        for _, _, _, part_key, d in self._events(bid, EventKind.PART_INSPECTED):
            inspected.setdefault(part_key, []).append(d)
        by_key = {p.part_key: p for p in parts}
        for key, records in inspected.items():
            if len(records) > 1:
                self.fail(f"part {key!r} in batch {bid!r} was recorded {len(records)} times in the audit trail")
            part = by_key.get(key)
            if part is None or not part.is_done:
                self.fail(
                    f"part {key!r} in batch {bid!r}: the audit trail records it inspected, but the index does not hold its result"
                )
                continue
            d = records[-1]
            if d.get("result_sha256") != part.result_sha256 or d.get("verdict") != part.verdict:
                self.fail(
                    f"part {key!r} in batch {bid!r}: the index holds result {str(part.result_sha256)[:12]}… "
                    f"with verdict {part.verdict!r}, the audit trail recorded {str(d.get('result_sha256'))[:12]}… "
                    f"with verdict {d.get('verdict')!r}"
                )
            if d.get("overlay_sha256", "") != (part.overlay_sha256 or ""):
                self.fail(
                    f"part {key!r} in batch {bid!r}: the overlay in the index is not the one the audit trail recorded"
                )
        for p in parts:
            if p.is_done and p.part_key not in inspected:
                self.fail(f"part {p.part_key!r} in batch {bid!r} has no 'part inspected' event in the audit trail")
        written = self._events(bid, EventKind.REPORT_WRITTEN)
        if batch.is_finished:
            if not written:
                self.fail(f"batch {bid!r} is marked finished but the audit trail has no 'report written' event for it")
            elif (
                written[-1][4].get("report_sha256") != batch.report_sha256
                or written[-1][4].get("regions_csv_sha256") != batch.regions_csv_sha256
            ):
                self.fail(f"batch {bid!r}: the report or CSV in the index is not the one the audit trail recorded")
        elif written:
            self.fail(f"batch {bid!r}: the audit trail records its report, but the index shows the batch unfinished")
        rows = {s.signoff_no: s for s in self.archive.signoffs(bid)}
        signed = self._events(bid, EventKind.SIGNED)
        for seq, _, _, _, d in signed:
            no = d.get("signoff_no")
            row = rows.get(no)
            if row is None:
                self.fail(
                    f"sign-off #{no} of batch {bid!r} by {d.get('signer_name')} ({d.get('meaning')}), recorded in "
                    f"audit event {seq}, is missing from the index (its sign-off row was deleted)"
                )
            elif (
                row.record_sha256 != d.get("record_sha256")
                or sha256_bytes(_unhex(row.signature_hex)) != d.get("signature_sha256")
                or row.signed_report_sha256 != d.get("signed_report_sha256")
            ):
                self.fail(
                    f"sign-off #{no} of batch {bid!r} in the index differs from the one recorded in audit event {seq}"
                )
        expected_count = max((d.get("signoffs_in_batch", 0) for *_, d in signed), default=0)
        if len(rows) != expected_count:
            self.fail(
                f"batch {bid!r}: the index holds {len(rows)} sign-off(s), the audit trail recorded {expected_count}"
            )
        recorded_numbers = {d.get("signoff_no") for *_, d in signed}
        for no in sorted(set(rows) - recorded_numbers):
            self.fail(f"sign-off #{no} of batch {bid!r} in the index was never recorded in the audit trail")

    # (4) results against images, recipe and the index's region verdicts
    def check_results(self, batch: BatchRow, parts: Sequence[PartRow]) -> None:
        bid = batch.batch_id
        for p in parts:
            if not p.result_sha256 or not self.file_intact(p.result_sha256):
                continue  # a missing or changed result is already named
            result = json.loads(self.archive.read_object(p.result_sha256))
            where = f"part {p.part_key!r} in batch {bid!r}"
            if result.get("image", {}).get("sha256") != p.image_sha256:
                self.fail(
                    f"{where}: its result names image {str(result.get('image', {}).get('sha256'))[:12]}… but the index links image {str(p.image_sha256)[:12]}…"
                )
            if result.get("schema") == ERROR_SCHEMA:
                if p.verdict != ERROR_VERDICT:
                    self.fail(
                        f"{where}: the index says verdict {p.verdict!r}, the stored record says the part could not be inspected"
                    )
                continue
            if result.get("recipe", {}).get("sha256") != batch.recipe_sha256:
                self.fail(
                    f"{where}: its result was made with recipe {str(result.get('recipe', {}).get('sha256'))[:12]}…, not the batch's recipe {batch.recipe_sha256[:12]}…"
                )
            if result.get("verdict") != p.verdict:
                self.fail(
                    f"{where}: the index says verdict {p.verdict!r}, the stored result says {result.get('verdict')!r}"
                )
            stored = {r[0]: r for r in _index_rows_of(result)[2]}
            indexed = {
                row[0]: row
                for row in self.db.execute(
                    "SELECT region_name, verdict, lay_deg, deviation_deg, coherence, defect_area_fraction FROM regions "
                    "WHERE batch_id = ? AND part_key = ?",
                    (bid, p.part_key),
                )
            }
            for name in sorted(set(stored) | set(indexed)):
                if name not in indexed:
                    self.fail(f"region {name!r} of {where} is in the stored result but missing from the index")
                elif name not in stored:
                    self.fail(f"region {name!r} of {where} is in the index but not in the stored result")
                elif indexed[name][1] != stored[name][1]:
                    self.fail(
                        f"region {name!r} of {where}: the index says verdict {indexed[name][1]!r}, the stored (signed) result says {stored[name][1]!r}"
                    )
                elif tuple(indexed[name]) != tuple(stored[name]):
                    self.fail(f"region {name!r} of {where}: the figures in the index differ from the stored result")

    # (5) signatures
    def check_signoffs(self, batch: BatchRow, parts: Sequence[PartRow]) -> None:
        bid = batch.batch_id
        results = {p.part_key: p.result_sha256 for p in parts if p.result_sha256}
        event_sha = {row[0]: row[1] for row in self.db.execute("SELECT seq, sha256 FROM events")}
        for s in self.archive.signoffs(bid):
            who = f"sign-off #{s.signoff_no} of batch {bid!r} by {s.signer_name} ({s.meaning}, {s.signed_at_utc})"
            try:
                record = json.loads(s.record_json)
                record_bytes = signing.canonical_record_bytes(record)
                public = bytes.fromhex(s.public_key_hex)
                holds = signing.verify_record(public, record, bytes.fromhex(s.signature_hex))
            except (ValueError, TypeError, AttributeError):
                self.fail(f"{who}: its record or signature cannot be read")
                continue
            if not holds:
                self.fail(f"{who}: the signature does not hold over its record (record or signature altered)")
            if sha256_bytes(record_bytes) != s.record_sha256:
                self.fail(f"{who}: the record no longer matches its hash in the index")
            shown = {
                "signer_name": s.signer_name,
                "key_fingerprint": s.key_fingerprint,
                "meaning": s.meaning,
                "signed_at_utc": s.signed_at_utc,
                "comment": s.comment,
                "batch_id": bid,
            }
            for field, value in shown.items():
                if record.get(field) != value:
                    self.fail(f"{who}: the index shows {field} {value!r}, the signed record says {record.get(field)!r}")
            if record.get("report_sha256") != batch.report_sha256:
                self.fail(f"{who}: the batch report in the index is not the one that was signed")
            if record.get("results_sha256") != results:
                changed = sorted(
                    k
                    for k in set(results) | set(record.get("results_sha256", {}))
                    if results.get(k) != record.get("results_sha256", {}).get(k)
                )
                self.fail(
                    f"{who}: the results in the index are not the ones that were signed (parts: {', '.join(changed[:5])})"
                )
            n, head = record.get("audit_events"), record.get("audit_head_sha256")
            if n and event_sha.get(n) != head:
                self.fail(f"{who}: audit event {n}, the trail's head when it was signed, is missing or was rewritten")


def _original_position(seq, at, kind, b, p, details, prev, sha, window: int = 64) -> int | None:
    """The sequence number under which an event was hashed, when it sits nearby (a reordering)."""
    for k in range(max(1, seq - window), seq + window + 1):
        if k != seq and _event_sha256(k, at, kind, b, p, details, prev) == sha:
            return k
    return None


def _json_or_empty(text: str) -> dict:
    try:
        value = json.loads(text)
    except ValueError:
        return {}
    return value if isinstance(value, dict) else {}


def _unhex(text: str) -> bytes:
    try:
        return bytes.fromhex(text)
    except ValueError:
        return b""
