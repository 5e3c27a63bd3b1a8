"""The archive index, described once without SQL: tables, columns, keys, and the row types.

Every backend builds its tables from :data:`TABLES`; the audit chain hashes
every row of every table in :data:`CHAINED_TABLES` column by column, as this
module lists them, so a column added here is covered by the chain and by
``verify`` without further code.
"""

from __future__ import annotations

from dataclasses import dataclass, fields
from typing import Any, Mapping

__all__ = [
    "ARCHIVE_FORMAT",
    "Column",
    "Table",
    "TABLES",
    "CHAINED_TABLES",
    "BatchRow",
    "PartRow",
    "SignoffRow",
    "DispositionRow",
    "RegisterRow",
    "EventRow",
    "row_type",
    "table_named",
    "checked_columns",
]

ARCHIVE_FORMAT = "surfinspect.archive/2"


@dataclass(frozen=True)
class Column:
    name: str
    type: str  # TEXT | INTEGER | REAL
    nullable: bool = False
    unique: bool = False


@dataclass(frozen=True)
class Table:
    name: str
    columns: tuple[Column, ...]
    primary_key: tuple[str, ...]

    @property
    def column_names(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.columns)

    def key_of(self, row: Mapping[str, Any]) -> tuple:
        return tuple(row[c] for c in self.primary_key)


def _t(name: str, primary_key: tuple[str, ...], *columns: Column) -> Table:
    return Table(name, columns, primary_key)


def _c(name: str, type_: str = "TEXT", nullable: bool = False, unique: bool = False) -> Column:
    return Column(name, type_, nullable, unique)


TABLES: tuple[Table, ...] = (
    _t("meta", ("key",), _c("key"), _c("value")),
    _t(
        "batches",
        ("batch_id",),
        _c("batch_id"),
        _c("recipe_name"),
        _c("recipe_revision", "INTEGER"),
        _c("recipe_sha256"),
        _c("operator", nullable=True),
        _c("station", nullable=True),
        _c("part_count", "INTEGER"),
        _c("image_set_sha256"),
        _c("started_at"),
        _c("finished_at", nullable=True),
        _c("report_sha256", nullable=True),
        _c("regions_csv_sha256", nullable=True),
        _c("report_generated_at", nullable=True),
    ),
    _t(
        "parts",
        ("batch_id", "part_key"),
        _c("batch_id"),
        _c("part_key"),
        _c("position", "INTEGER"),
        _c("image_sha256", nullable=True),
        _c("result_sha256", nullable=True),
        _c("overlay_sha256", nullable=True),
        _c("verdict", nullable=True),
        _c("error", nullable=True),
        _c("inspected_at", nullable=True),
    ),
    _t(
        "regions",
        ("batch_id", "part_key", "region_name"),
        _c("batch_id"),
        _c("part_key"),
        _c("region_name"),
        _c("verdict"),
        _c("lay_deg", "REAL", nullable=True),
        _c("deviation_deg", "REAL", nullable=True),
        _c("coherence", "REAL", nullable=True),
        _c("defect_area_fraction", "REAL", nullable=True),
    ),
    _t(
        "files",
        ("sha256",),
        _c("sha256"),
        _c("size_bytes", "INTEGER"),
        _c("media_type"),
        _c("stored_at"),
    ),
    _t(
        "register",
        ("entry_no",),
        _c("entry_no", "INTEGER"),
        _c("action"),
        _c("key_fingerprint"),
        _c("public_key_hex"),
        _c("printed_name"),
        _c("role"),
        _c("recorded_at_utc"),
        _c("by_fingerprint"),
        _c("record_json"),
        _c("signature_hex"),
    ),
    _t(
        "signatures",
        ("batch_id", "signoff_no"),
        _c("batch_id"),
        _c("signoff_no", "INTEGER"),
        _c("signer_name"),
        _c("key_fingerprint"),
        _c("meaning"),
        _c("signed_at_utc"),
        _c("comment"),
        _c("record_json"),
        _c("record_sha256", unique=True),
        _c("signature_hex"),
        _c("signed_report_sha256"),
    ),
    _t(
        "dispositions",
        ("batch_id", "part_key", "disposition_no"),
        _c("batch_id"),
        _c("part_key"),
        _c("disposition_no", "INTEGER"),
        _c("decision"),
        _c("signer_name"),
        _c("key_fingerprint"),
        _c("decided_at_utc"),
        _c("comment"),
        _c("record_json"),
        _c("record_sha256", unique=True),
        _c("signature_hex"),
    ),
    _t(
        "events",
        ("seq",),
        _c("seq", "INTEGER"),
        _c("recorded_at"),
        _c("kind"),
        _c("batch_id", nullable=True),
        _c("part_key", nullable=True),
        _c("details"),
        _c("prev_sha256"),
        _c("sha256"),
    ),
)

TABLE_BY_NAME = {t.name: t for t in TABLES}


def table_named(name: str) -> Table:
    """The table of that name (a backend refuses any other: names are never taken from input)."""
    if name not in TABLE_BY_NAME:
        raise ValueError(f"unknown table {name!r}")
    return TABLE_BY_NAME[name]


def checked_columns(table: Table, names) -> list[str]:
    """``names`` as a list, when every one is a column of ``table``."""
    bad = [n for n in names if n not in table.column_names]
    if bad:
        raise ValueError(f"table {table.name!r} has no column(s) {', '.join(map(repr, bad))}")
    return list(names)


#: Tables whose every row is recorded, field by field, in the audit chain
#: (``meta`` holds the chain's own head; ``events`` is the chain).
CHAINED_TABLES = tuple(t for t in TABLES if t.name not in ("meta", "events"))


# ----------------------------------------------------------------- row types


class _Row:
    @classmethod
    def from_mapping(cls, row: Mapping[str, Any]):
        return cls(**{f.name: row[f.name] for f in fields(cls)})  # type: ignore[call-arg]


@dataclass(frozen=True)
class BatchRow(_Row):
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
class PartRow(_Row):
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
class SignoffRow(_Row):
    batch_id: str
    signoff_no: int
    signer_name: str  # the printed name from the signer register
    key_fingerprint: str
    meaning: str
    signed_at_utc: str
    comment: str
    record_json: str
    record_sha256: str
    signature_hex: str
    signed_report_sha256: str


@dataclass(frozen=True)
class DispositionRow(_Row):
    batch_id: str
    part_key: str
    disposition_no: int
    decision: str
    signer_name: str
    key_fingerprint: str
    decided_at_utc: str
    comment: str
    record_json: str
    record_sha256: str
    signature_hex: str


@dataclass(frozen=True)
class RegisterRow(_Row):
    entry_no: int
    action: str  # owner | enrol | revoke
    key_fingerprint: str
    public_key_hex: str
    printed_name: str
    role: str
    recorded_at_utc: str
    by_fingerprint: str
    record_json: str
    signature_hex: str


@dataclass(frozen=True)
class EventRow(_Row):
    seq: int
    recorded_at: str
    kind: str
    batch_id: str | None
    part_key: str | None
    details: str
    prev_sha256: str
    sha256: str


_ROW_TYPES = {
    "batches": BatchRow,
    "parts": PartRow,
    "signatures": SignoffRow,
    "dispositions": DispositionRow,
    "register": RegisterRow,
    "events": EventRow,
}


def row_type(table: str):
    """The frozen dataclass of a table's rows (for the tables that have one)."""
    return _ROW_TYPES[table]
