"""The PostgreSQL index backend: one index for a plant's stations, served by a database server.

The tables are those of :mod:`.schema`, made and migrated by the tool: a
table ``surfinspect_schema`` holds the schema version the tool wrote; a
version newer than this release knows is refused (an older release must not
write into tables it does not understand).

Every write is one transaction that first takes a transaction-scoped
advisory lock (``pg_advisory_xact_lock``), the same lock for every writer of
the database: writers queue, so each one reads the chain head and appends its
event on top of the last committed one, and the audit trail stays one chain
however many stations write at once. The lock is released by the commit or
rollback, also when a station's connection dies. Making the index is such a
write too (:meth:`PostgresBackend.creating`): the tables and the archive's
first rows commit in one transaction, so no station ever finds the one
without the other, and stations making a new archive at once queue.

Type mapping: TEXT → ``text``, INTEGER → ``bigint``, REAL → ``double
precision`` (IEEE-754 binary64 like SQLite's REAL, so a value reads back
bit for bit and hashes the same on both backends).

psycopg is imported here only: an archive in a folder never loads it.

References
----------
PostgreSQL documentation, "Advisory Locks" (§13.3.5) and ``pg_advisory_xact_lock``
(§9.27.10), https://www.postgresql.org/docs/current/explicit-locking.html
"""

from __future__ import annotations

import contextlib
from typing import Any, Iterator, Sequence

import psycopg
from psycopg import errors as pg_errors
from psycopg import sql

from ..errors import InputError
from .backend import IndexBackend, IndexBusy, IndexDamaged, Row
from .schema import TABLES, Table, checked_columns, table_named

__all__ = ["PostgresBackend", "SCHEMA_VERSION", "VERSION_TABLE", "WRITE_LOCK_KEY", "display_url"]

#: The index schema this release writes. Add a migration below with every change of :data:`.schema.TABLES`.
SCHEMA_VERSION = 1
VERSION_TABLE = "surfinspect_schema"
#: One advisory lock key for all writers of an archive database (ASCII "surfinsp" as a 64-bit number).
WRITE_LOCK_KEY = int.from_bytes(b"surfinsp", "big") & 0x7FFF_FFFF_FFFF_FFFF
CONNECT_TIMEOUT_S = 10

_TYPES = {"TEXT": "text", "INTEGER": "bigint", "REAL": "double precision"}


def display_url(conninfo: str) -> str:
    """The connection string without a password, for messages."""
    try:
        params = psycopg.conninfo.conninfo_to_dict(conninfo)
    except psycopg.ProgrammingError:
        return "postgresql://(unparseable)"
    user = f"{params['user']}@" if params.get("user") else ""
    host = params.get("host", "")
    port = f":{params['port']}" if params.get("port") else ""
    return f"postgresql://{user}{host}{port}/{params.get('dbname', '')}"


def _ddl(table: Table) -> sql.Composed:
    cols = []
    for c in table.columns:
        decl = sql.SQL("{} {}").format(sql.Identifier(c.name), sql.SQL(_TYPES[c.type]))
        if not c.nullable:
            decl += sql.SQL(" NOT NULL")
        if c.unique:
            decl += sql.SQL(" UNIQUE")
        cols.append(decl)
    cols.append(sql.SQL("PRIMARY KEY ({})").format(sql.SQL(", ").join(map(sql.Identifier, table.primary_key))))
    return sql.SQL("CREATE TABLE IF NOT EXISTS {} ({})").format(sql.Identifier(table.name), sql.SQL(", ").join(cols))


def _migration_1(cur: psycopg.Cursor) -> None:
    for table in TABLES:
        cur.execute(_ddl(table))


#: version → the step that brings an index of version - 1 to it, run in order in the transaction that makes the
#: index (an index found at an older version is not migrated on open yet: with one version there is none)
MIGRATIONS = {1: _migration_1}


def _where(table: Table, where: Row | None) -> tuple[sql.Composable, list]:
    """``col = %s`` for a value, ``col IS NULL`` for None (so the primary-key indexes are used)."""
    if not where:
        return sql.SQL(""), []
    parts, params = [], []
    for n in checked_columns(table, where):
        if where[n] is None:
            parts.append(sql.SQL("{} IS NULL").format(sql.Identifier(n)))
        else:
            parts.append(sql.SQL("{} = %s").format(sql.Identifier(n)))
            params.append(where[n])
    return sql.SQL(" WHERE ") + sql.SQL(" AND ").join(parts), params


def _names(names: Sequence[str]) -> sql.Composable:
    return sql.SQL(", ").join(map(sql.Identifier, names))


@contextlib.contextmanager
def _translated() -> Iterator[None]:
    """psycopg's errors as the backend's own: a lost server or a lock timeout apart from damage."""
    try:
        yield
    except (pg_errors.LockNotAvailable, pg_errors.QueryCanceled, pg_errors.ReadOnlySqlTransaction) as exc:
        raise IndexBusy(str(exc).strip()) from None
    except psycopg.OperationalError as exc:
        raise IndexBusy(f"the database server cannot be reached ({str(exc).strip()})") from None
    except psycopg.DatabaseError as exc:  # a dropped table or column, a constraint broken by hand
        raise IndexDamaged(str(exc).strip().splitlines()[0]) from None


class PostgresBackend(IndexBackend):
    """The index in a PostgreSQL database (``conninfo``: a ``postgresql://`` URL or key=value string)."""

    def __init__(self, conninfo: str):
        self.location = display_url(conninfo)
        try:
            self._db = psycopg.connect(conninfo, autocommit=True, connect_timeout=CONNECT_TIMEOUT_S)
        except psycopg.Error as exc:
            first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
            raise InputError(
                f"--archive {self.location}: cannot connect to the PostgreSQL server ({first}); "
                "allowed: postgresql://USER@HOST:PORT/DATABASE?objects=FOLDER of a running server"
            ) from None
        self._in_write = False

    # -- schema

    def schema_version(self) -> int | None:
        """The version recorded in the index (None when the tool never made one here)."""
        with _translated():
            found = self._db.execute("SELECT to_regclass(%s) IS NOT NULL", (VERSION_TABLE,)).fetchone()[0]
            if not found:
                return None
            row = self._db.execute(sql.SQL("SELECT max(version) FROM {}").format(sql.Identifier(VERSION_TABLE)))
            return row.fetchone()[0]

    def _refuse_newer(self, version: int | None) -> None:
        if version is not None and version > SCHEMA_VERSION:
            raise InputError(
                f"{self.location}: {VERSION_TABLE}.version: the index has schema version {version}, newer than "
                f"this release knows (allowed: 1–{SCHEMA_VERSION}); use the release that wrote it or a newer one"
            )

    def exists(self) -> bool:
        version = self.schema_version()
        self._refuse_newer(version)
        if version is not None:
            return True
        with _translated():  # tables without a version row: not made by the tool, checked as they are
            return self._db.execute("SELECT to_regclass('meta') IS NOT NULL").fetchone()[0]

    def _index_committed(self) -> bool:
        """Whether the version table or ``meta`` is there, read from ``pg_class`` with this statement's snapshot.

        Not ``to_regclass``: it asks the session's catalog cache, which has not
        yet learnt of a table another session committed while this one waited
        for the advisory lock (it does when a relation lock is next taken), so
        the second creator would make the tables again ("relation already
        exists"; seen with four stations at once before this check).
        """
        with _translated():
            return self._db.execute(
                "SELECT EXISTS (SELECT 1 FROM pg_catalog.pg_class c JOIN pg_catalog.pg_namespace n"
                " ON n.oid = c.relnamespace WHERE n.nspname = current_schema() AND c.relname IN (%s, 'meta'))",
                (VERSION_TABLE,),
            ).fetchone()[0]

    @contextlib.contextmanager
    def creating(self) -> Iterator[bool]:
        """The write lock, then the version table and every migration step when the database holds no index.

        PostgreSQL's DDL is transactional: the tables, their version rows and
        what the caller writes inside commit together or not at all. A creator
        that waited for the lock sees the index the first one committed and
        makes nothing (:meth:`_index_committed`).
        """
        with self.write():
            new = not self._index_committed()
            if new:
                versions = sql.Identifier(VERSION_TABLE)
                with _translated():
                    cur = self._db.cursor()
                    cur.execute(
                        sql.SQL(
                            "CREATE TABLE {} (version integer PRIMARY KEY, applied_at timestamptz NOT NULL)"
                        ).format(versions)
                    )
                    for step in range(1, SCHEMA_VERSION + 1):
                        MIGRATIONS[step](cur)
                        cur.execute(sql.SQL("INSERT INTO {} VALUES (%s, now())").format(versions), (step,))
            yield new

    # -- writing

    @contextlib.contextmanager
    def write(self) -> Iterator[None]:
        if self._in_write:
            raise RuntimeError("a write transaction is already open on this connection")
        with _translated():
            tx = self._db.transaction()
            tx.__enter__()
        self._in_write = True
        try:
            with _translated():
                self._db.execute("SELECT pg_advisory_xact_lock(%s)", (WRITE_LOCK_KEY,))
            yield
        except BaseException as exc:
            self._in_write = False
            with contextlib.suppress(psycopg.Error):
                tx.__exit__(type(exc), exc, exc.__traceback__)
            raise
        self._in_write = False
        with _translated():
            tx.__exit__(None, None, None)

    def insert(self, table: str, row: Row) -> None:
        self._insert(table, row)

    def insert_ignore(self, table: str, row: Row) -> bool:
        return self._insert(table, row, ignore=True).rowcount == 1

    def _insert(self, table: str, row: Row, *, ignore: bool = False) -> psycopg.Cursor:
        t = table_named(table)
        names = checked_columns(t, row)
        stmt = sql.SQL("INSERT INTO {} ({}) VALUES ({})").format(
            sql.Identifier(t.name), _names(names), sql.SQL(", ").join(sql.Placeholder() * len(names))
        )
        if ignore:
            stmt += sql.SQL(" ON CONFLICT ({}) DO NOTHING").format(_names(t.primary_key))
        with _translated():
            return self._db.execute(stmt, [row[n] for n in names])

    def update(self, table: str, key: Row, values: Row) -> int:
        t = table_named(table)
        names = checked_columns(t, values)
        clause, params = _where(t, key)
        sets = sql.SQL(", ").join(sql.SQL("{} = %s").format(sql.Identifier(n)) for n in names)
        stmt = sql.SQL("UPDATE {} SET {}").format(sql.Identifier(t.name), sets) + clause
        with _translated():
            return self._db.execute(stmt, [values[n] for n in names] + params).rowcount

    # -- reading

    def select(
        self, table: str, where: Row | None = None, *, order_by: Sequence[str] = (), columns: Sequence[str] = ()
    ) -> list[dict[str, Any]]:
        t = table_named(table)
        names = checked_columns(t, columns or t.column_names)
        clause, params = _where(t, where)
        stmt = sql.SQL("SELECT {} FROM {}").format(_names(names), sql.Identifier(t.name)) + clause
        if order_by:
            stmt += sql.SQL(" ORDER BY {}").format(_names(checked_columns(t, order_by)))
        with _translated():
            return [dict(zip(names, row)) for row in self._db.execute(stmt, params).fetchall()]

    def max_value(self, table: str, column: str, where: Row | None = None) -> Any:
        t = table_named(table)
        (name,) = checked_columns(t, [column])
        clause, params = _where(t, where)
        stmt = sql.SQL("SELECT max({}) FROM {}").format(sql.Identifier(name), sql.Identifier(t.name)) + clause
        with _translated():
            return self._db.execute(stmt, params).fetchone()[0]

    def columns_found(self) -> dict[str, tuple[str, ...]]:
        """Tables of the connection's schema (the version table is the backend's own bookkeeping)."""
        with _translated():
            rows = self._db.execute(
                "SELECT table_name, column_name FROM information_schema.columns "
                "WHERE table_schema = current_schema() AND table_name <> %s "
                "ORDER BY table_name, ordinal_position",
                (VERSION_TABLE,),
            ).fetchall()
        found: dict[str, list[str]] = {}
        for table, column in rows:
            found.setdefault(table, []).append(column)
        return {t: tuple(c) for t, c in found.items()}

    def integrity_problems(self) -> list[str]:
        """Keys and column types the schema wants, as the server holds them.

        PostgreSQL checks its pages itself (and ``amcheck`` needs a superuser);
        what a person with SQL access can break without damage is a primary
        key, a uniqueness rule, or a column type, so those are compared.
        """
        problems = []
        try:
            with _translated():
                keys = self._db.execute(
                    "SELECT tc.table_name, tc.constraint_type, string_agg(k.column_name, ',' ORDER BY k.ordinal_position)"
                    " FROM information_schema.table_constraints tc JOIN information_schema.key_column_usage k"
                    " ON k.constraint_name = tc.constraint_name AND k.table_schema = tc.table_schema"
                    " WHERE tc.table_schema = current_schema() AND tc.constraint_type IN ('PRIMARY KEY', 'UNIQUE')"
                    " GROUP BY tc.table_name, tc.constraint_name, tc.constraint_type"
                ).fetchall()
                types = self._db.execute(
                    "SELECT table_name, column_name, data_type, is_nullable FROM information_schema.columns"
                    " WHERE table_schema = current_schema()"
                ).fetchall()
        except (IndexDamaged, IndexBusy) as exc:
            return [str(exc)]
        have = {(t, kind, cols) for t, kind, cols in keys}
        col = {(t, c): (d, n) for t, c, d, n in types}
        for table in TABLES:
            if not any(t == table.name for t, _ in col):
                continue  # a missing table is named by the structure check
            if (table.name, "PRIMARY KEY", ",".join(table.primary_key)) not in have:
                problems.append(f"table {table.name!r} has lost its primary key ({', '.join(table.primary_key)})")
            for c in table.columns:
                if c.unique and (table.name, "UNIQUE", c.name) not in have:
                    problems.append(f"column {table.name}.{c.name} has lost its uniqueness rule")
                if (table.name, c.name) in col:
                    data_type, nullable = col[(table.name, c.name)]
                    if data_type != _TYPES[c.type]:
                        problems.append(f"column {table.name}.{c.name} is of type {data_type}, not {_TYPES[c.type]}")
                    if not c.nullable and nullable == "YES":
                        problems.append(f"column {table.name}.{c.name} has lost its NOT NULL rule")
        return problems

    def close(self) -> None:
        self._db.close()
