"""The one interface an archive index backend provides (SQLite today; PostgreSQL for a plant).

The archive speaks to its index only through :class:`IndexBackend`: rows are
plain mappings of column name to value, tables and columns are those of
:mod:`.schema`, and every write happens inside :meth:`IndexBackend.write`
(the first, which makes the tables, inside :meth:`IndexBackend.creating`).
SQL lives with its backend (:mod:`.sqlite_backend`, :mod:`.postgres_backend`), nowhere else.

A backend raises :class:`IndexDamaged` for anything its database reports as
broken (a damaged page, a missing table, a file that is not a database), so
that ``verify`` can name it as a finding instead of stopping with a traceback.
"""

from __future__ import annotations

import abc
import contextlib
from typing import Any, Iterator, Mapping, Sequence

from ..errors import IndexBusy, IndexDamaged  # defined with the other errors the command line maps to exit 2

__all__ = ["IndexBackend", "IndexDamaged", "IndexBusy"]


Row = Mapping[str, Any]


class IndexBackend(abc.ABC):
    """Rows in, rows out; one write transaction at a time."""

    #: where the index lives, for messages (a file path or a database name)
    location: str

    @abc.abstractmethod
    def exists(self) -> bool:
        """Whether an index (of any kind) is already there."""

    @abc.abstractmethod
    @contextlib.contextmanager
    def creating(self) -> Iterator[bool]:
        """One write transaction that makes the index when the database holds none.

        Under the write lock it makes every table of :data:`.schema.TABLES` and
        yields True when no index is there; the caller writes the index's first
        rows inside, so the tables and those rows commit together: nobody sees
        the one without the other, and a kill or an exception leaves nothing.
        It yields False, making nothing, when an index (of any kind) is there:
        one a creator that took the lock first has made, or one that is not
        ours (never altered). Creators queue on the lock like writers.
        """

    @abc.abstractmethod
    @contextlib.contextmanager
    def write(self) -> Iterator[None]:
        """One write transaction, taking the write lock at its start; rolled back on any exception."""

    @abc.abstractmethod
    def insert(self, table: str, row: Row) -> None:
        """Insert one row (every column of the table given)."""

    @abc.abstractmethod
    def insert_ignore(self, table: str, row: Row) -> bool:
        """Insert one row unless its primary key exists; True when it was inserted."""

    @abc.abstractmethod
    def update(self, table: str, key: Row, values: Row) -> int:
        """Set ``values`` in the rows matching ``key`` (column = value each); returns the rows changed."""

    @abc.abstractmethod
    def select(
        self, table: str, where: Row | None = None, *, order_by: Sequence[str] = (), columns: Sequence[str] = ()
    ) -> list[dict[str, Any]]:
        """Rows of ``table`` matching ``where`` (column = value each), ordered by ``order_by``."""

    @abc.abstractmethod
    def max_value(self, table: str, column: str, where: Row | None = None) -> Any:
        """The largest value of ``column`` among the matching rows (None when there is none)."""

    @abc.abstractmethod
    def columns_found(self) -> dict[str, tuple[str, ...]]:
        """Every table the database holds, with its columns as found (not as the schema wants them)."""

    @abc.abstractmethod
    def integrity_problems(self) -> list[str]:
        """What the database's own consistency check reports (empty when it finds nothing)."""

    @abc.abstractmethod
    def close(self) -> None: ...
