"""The SQLite index backend: one file in the archive folder, embedded, nothing to start.

Every write is one transaction taken with ``BEGIN IMMEDIATE`` (writers queue
behind a busy timeout instead of failing on a lock upgrade), so two processes
can write the same archive and a crash never leaves half a record; the tables
are made in the transaction that writes the archive's first rows
(:meth:`SQLiteBackend.creating`), so never seen without them. Table and
column names come only from :mod:`.schema`, never from data, and are checked
against it before they are put into a statement.
"""

from __future__ import annotations

import contextlib
import sqlite3
from pathlib import Path
from typing import Any, Iterator, Sequence

from .backend import IndexBackend, IndexBusy, IndexDamaged, Row
from .schema import TABLES, Table, checked_columns, table_named

__all__ = ["SQLiteBackend", "INDEX_NAME", "BUSY_TIMEOUT_S"]

INDEX_NAME = "index.sqlite"
BUSY_TIMEOUT_S = 60.0


def _ddl(table: Table) -> str:
    cols = []
    for c in table.columns:
        decl = f"{c.name} {c.type}"
        if not c.nullable:
            decl += " NOT NULL"
        if c.unique:
            decl += " UNIQUE"
        cols.append(decl)
    cols.append(f"PRIMARY KEY ({', '.join(table.primary_key)})")
    return f"CREATE TABLE IF NOT EXISTS {table.name} ({', '.join(cols)})"


def _where(table: Table, where: Row | None) -> tuple[str, list]:
    if not where:
        return "", []
    names = checked_columns(table, where)
    return " WHERE " + " AND ".join(f"{n} IS ?" for n in names), [where[n] for n in names]


@contextlib.contextmanager
def _translated() -> Iterator[None]:
    """sqlite3's errors as the backend's own: busy/read-only apart from damage."""
    try:
        yield
    except sqlite3.OperationalError as exc:
        text = str(exc)
        if "locked" in text or "readonly" in text or "read-only" in text:
            raise IndexBusy(text) from None
        raise IndexDamaged(text) from None
    except sqlite3.DatabaseError as exc:  # malformed image, not a database, constraint broken by hand
        raise IndexDamaged(str(exc)) from None
    except UnicodeDecodeError as exc:  # a text value whose bytes were damaged
        raise IndexDamaged(f"a text value is not UTF-8 ({exc.reason} at byte {exc.start})") from None


class SQLiteBackend(IndexBackend):
    """The index in ``DIR/index.sqlite``."""

    def __init__(self, root: str | Path):
        self.path = Path(root) / INDEX_NAME
        self.location = str(self.path)
        with _translated():
            self._db = sqlite3.connect(self.path, timeout=BUSY_TIMEOUT_S, isolation_level=None)
            self._db.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")

    def exists(self) -> bool:
        # sqlite makes the file before its first write: an empty file holds nothing yet. Nor may a file with
        # pages: a creation killed after its pages spilled leaves them with a hot journal, which this read
        # rolls back. A file that is not a database (or is damaged) is something: never made over.
        if not (self.path.is_file() and self.path.stat().st_size > 0):
            return False
        try:
            return self._holds_tables()
        except IndexDamaged:
            return True

    def _holds_tables(self) -> bool:
        with _translated():
            return self._db.execute("SELECT count(*) FROM sqlite_master").fetchone()[0] > 0

    @contextlib.contextmanager
    def creating(self) -> Iterator[bool]:
        """``BEGIN IMMEDIATE``, then the tables when the file holds none (SQLite's DDL is transactional)."""
        with self.write():
            new = not self._holds_tables()
            if new:
                with _translated():
                    for table in TABLES:
                        self._db.execute(_ddl(table))
            yield new

    @contextlib.contextmanager
    def write(self) -> Iterator[None]:
        with _translated():
            self._db.execute("BEGIN IMMEDIATE")
        try:
            yield
        except BaseException:
            with contextlib.suppress(sqlite3.Error):
                self._db.execute("ROLLBACK")
            raise
        with _translated():
            self._db.execute("COMMIT")

    def insert(self, table: str, row: Row) -> None:
        self._insert("INSERT", table, row)

    def insert_ignore(self, table: str, row: Row) -> bool:
        return self._insert("INSERT OR IGNORE", table, row).rowcount == 1

    def _insert(self, verb: str, table: str, row: Row) -> sqlite3.Cursor:
        t = table_named(table)
        names = checked_columns(t, row)
        marks = ", ".join("?" for _ in names)
        with _translated():
            return self._db.execute(
                f"{verb} INTO {t.name} ({', '.join(names)}) VALUES ({marks})", [row[n] for n in names]
            )

    def update(self, table: str, key: Row, values: Row) -> int:
        t = table_named(table)
        names = checked_columns(t, values)
        clause, params = _where(t, key)
        sets = ", ".join(f"{n} = ?" for n in names)
        with _translated():
            cur = self._db.execute(f"UPDATE {t.name} SET {sets}{clause}", [values[n] for n in names] + params)
        return cur.rowcount

    def select(
        self, table: str, where: Row | None = None, *, order_by: Sequence[str] = (), columns: Sequence[str] = ()
    ) -> list[dict[str, Any]]:
        t = table_named(table)
        names = checked_columns(t, columns or t.column_names)
        clause, params = _where(t, where)
        order = f" ORDER BY {', '.join(checked_columns(t, order_by))}" if order_by else ""
        with _translated():
            cur = self._db.execute(f"SELECT {', '.join(names)} FROM {t.name}{clause}{order}", params)
            return [dict(zip(names, row)) for row in cur.fetchall()]

    def max_value(self, table: str, column: str, where: Row | None = None) -> Any:
        t = table_named(table)
        (name,) = checked_columns(t, [column])
        clause, params = _where(t, where)
        with _translated():
            return self._db.execute(f"SELECT MAX({name}) FROM {t.name}{clause}", params).fetchone()[0]

    def columns_found(self) -> dict[str, tuple[str, ...]]:
        with _translated():
            names = [r[0] for r in self._db.execute("SELECT name FROM sqlite_master WHERE type = 'table'")]
            found = {}
            for name in names:
                quoted = name.replace('"', '""')
                found[name] = tuple(r[1] for r in self._db.execute(f'PRAGMA table_info("{quoted}")'))
        return found

    def integrity_problems(self) -> list[str]:
        try:
            rows = self._db.execute("PRAGMA integrity_check").fetchall()
        except (sqlite3.DatabaseError, UnicodeDecodeError) as exc:
            return [str(exc)]
        return [r[0] for r in rows if r[0] != "ok"]

    def close(self) -> None:
        self._db.close()
