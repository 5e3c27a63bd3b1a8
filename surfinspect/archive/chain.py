"""The audit chain: canonical serialisation, event hashes, and the rows each event records.

The audit trail is append-only and hash-chained. Event *n* holds the SHA-256
of event *n - 1* (the first holds 64 zeros) and its own SHA-256, taken over
the canonical bytes of ``{seq, recorded_at, kind, batch_id, part_key,
details, prev_sha256}``. ``meta`` holds the number of events and the last
event's hash, so events removed from the end of the table are noticed.

Every row an event adds to or changes in the index is written, whole, into
that event's ``details.rows`` (``{"table": ..., "row": {column: value}}``), so
the trail is the index's own history: replaying it gives back every row of
every chained table, field by field (:func:`replay_rows`). Editing any field,
deleting or adding a row, or reordering parts (their ``position``) makes the
index differ from the replay, and ``verify`` names the table, the row and
the column.

Canonical form
--------------
JSON with sorted keys, no spaces, UTF-8, no NaN. Only strings, integers,
booleans, null, lists and objects: a float column's value is written as the
shortest decimal string that reads back as the same double (Python's
``repr``), so the bytes never depend on how a float is printed.
"""

from __future__ import annotations

import enum
import json
import math
from dataclasses import dataclass
from typing import Any, Iterable, Mapping

from ..fsutil import sha256_bytes
from .schema import CHAINED_TABLES, TABLE_BY_NAME, EventRow

__all__ = [
    "GENESIS_SHA256",
    "EventKind",
    "canonical_bytes",
    "canonical_sha256",
    "encode_value",
    "encode_row",
    "row_entry",
    "event_sha256",
    "head_record",
    "replay_rows",
    "ReplayedRow",
]

GENESIS_SHA256 = "0" * 64
HEAD_RECORD_FORMAT = "surfinspect.chain-head/1"


class EventKind(str, enum.Enum):
    ARCHIVE_CREATED = "archive created"
    REGISTER_ENTRY = "register entry"
    BATCH_STARTED = "batch started"
    BATCH_RESUMED = "batch resumed"
    PART_INSPECTED = "part inspected"
    PART_REINSPECTED = "part re-inspected"
    REPORT_WRITTEN = "report written"
    SIGNED = "signed"
    DISPOSITION = "disposition"
    HEAD_SIGNED = "head signed"
    VERIFIED = "verified"


def canonical_bytes(record: Mapping[str, Any]) -> bytes:
    """The one byte string a record is hashed and signed as: JSON, sorted keys, no spaces, UTF-8.

    Raises
    ------
    ValueError
        For a float or any other value outside strings, integers, booleans,
        null, lists and objects (so that the bytes never depend on float printing).
    """
    _check_canonical_value(record, "record")
    return json.dumps(record, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False).encode(
        "utf-8"
    )


def canonical_sha256(record: Mapping[str, Any]) -> str:
    return sha256_bytes(canonical_bytes(record))


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


def encode_value(value: Any) -> Any:
    """A column value in canonical form: floats as their shortest round-trip decimal string."""
    if isinstance(value, float):
        return repr(value) if math.isfinite(value) else f"non-finite:{value!r}"
    if isinstance(value, bytes):
        return "bytes:" + value.hex()
    return value


def encode_row(table: str, row: Mapping[str, Any]) -> dict[str, Any]:
    """Every column of the table's schema, in canonical form (a column missing from ``row`` is an error)."""
    return {c.name: _encode_column(c.type, row[c.name]) for c in TABLE_BY_NAME[table].columns}


def _encode_column(type_: str, value: Any) -> Any:
    # a REAL column holds 90.0 for a result's 90: the column's type, not the value's, decides the form
    if type_ == "REAL" and isinstance(value, (int, float)) and not isinstance(value, bool):
        return encode_value(float(value))
    return encode_value(value)


def row_entry(table: str, row: Mapping[str, Any]) -> dict[str, Any]:
    """What an event's ``details.rows`` holds for one row it adds or changes."""
    return {"table": table, "row": encode_row(table, row)}


def event_sha256(
    seq: int, recorded_at: str, kind: str, batch_id: str | None, part_key: str | None, details: str, prev: str
) -> str:
    """The hash of one event; ``details`` is its canonical JSON text as stored."""
    body = {
        "seq": seq,
        "recorded_at": recorded_at,
        "kind": kind,
        "batch_id": batch_id,
        "part_key": part_key,
        "details": json.loads(details),
        "prev_sha256": prev,
    }
    return canonical_sha256(body)


def head_record(*, archive_id: str, events: int, head_sha256: str, key_fingerprint: str, signed_at_utc: str) -> dict:
    """What a chain-head signature signs: this archive's trail up to and including event ``events``."""
    return {
        "format": HEAD_RECORD_FORMAT,
        "archive_id": archive_id,
        "events": events,
        "head_sha256": head_sha256,
        "key_fingerprint": key_fingerprint,
        "signed_at_utc": signed_at_utc,
    }


@dataclass(frozen=True)
class ReplayedRow:
    row: dict[str, Any]  # canonical form, as recorded
    seq: int  # the last event that recorded it


def replay_rows(events: Iterable[EventRow]) -> tuple[dict[str, dict[tuple, ReplayedRow]], list[str]]:
    """Every chained table's rows as the trail recorded them (the latest record of each key wins).

    Returns the rows per table keyed by primary key, and a sentence for each
    row record that cannot be read (an unknown table, a missing column).
    """
    state: dict[str, dict[tuple, ReplayedRow]] = {t.name: {} for t in CHAINED_TABLES}
    problems: list[str] = []
    for event in events:
        try:
            details = json.loads(event.details)
        except ValueError:
            continue  # an unreadable event is named by the chain check
        for entry in details.get("rows", []) if isinstance(details, dict) else []:
            table = TABLE_BY_NAME.get(entry.get("table")) if isinstance(entry, dict) else None
            row = entry.get("row") if isinstance(entry, dict) else None
            if table is None or table.name not in state or not isinstance(row, dict):
                problems.append(f"audit event {event.seq} records a row that cannot be read")
                continue
            missing = [c for c in table.column_names if c not in row]
            if missing:
                problems.append(
                    f"audit event {event.seq} records a {table.name} row without column(s) {', '.join(missing)}"
                )
                continue
            state[table.name][table.key_of(row)] = ReplayedRow(row, event.seq)
    return state, problems
