"""The index backend contract, parametrised over the backends there are (SQLite and PostgreSQL)."""

from __future__ import annotations

import dataclasses

import pytest

from surfinspect.archive import schema
from surfinspect.archive.backend import IndexBackend, IndexDamaged
from surfinspect.archive.sqlite_backend import SQLiteBackend


@pytest.fixture(params=["sqlite", pytest.param("postgres", marks=pytest.mark.postgres)])
def empty_backend(request, tmp_path):
    """A backend on a database that holds nothing yet."""
    if request.param == "sqlite":
        index = SQLiteBackend(tmp_path)
    else:
        from surfinspect.archive.postgres_backend import PostgresBackend

        server = request.getfixturevalue("pg_server")
        index = PostgresBackend(server.url(request.getfixturevalue("pg_database")))
    yield index
    index.close()


@pytest.fixture
def backend(empty_backend):
    with empty_backend.creating() as new:
        assert new
    return empty_backend


def _file_row(n: int) -> dict:
    return {"sha256": f"{n:064x}", "size_bytes": n, "media_type": "text/plain", "stored_at": "2031-04-02T10:30:00.000Z"}


def test_backend_is_an_index_backend(backend):
    assert isinstance(backend, IndexBackend)
    found = backend.columns_found()
    for table in schema.TABLES:
        assert found[table.name] == table.column_names
    assert backend.integrity_problems() == []


def test_the_tables_and_the_first_rows_commit_together_or_not_at_all(empty_backend):
    index = empty_backend
    with pytest.raises(RuntimeError, match="killed"):
        with index.creating() as new:
            assert new and set(schema.TABLE_BY_NAME) <= set(index.columns_found())  # made, inside
            index.insert("files", _file_row(1))
            raise RuntimeError("killed")
    assert not index.exists() and index.columns_found() == {}  # not one table left behind
    with index.creating() as new:
        assert new
        index.insert("files", _file_row(2))
    assert index.exists() and index.select("files") == [_file_row(2)]
    with index.creating() as new:  # a second creator finds the index and makes nothing
        assert not new
    assert index.select("files") == [_file_row(2)] and index.integrity_problems() == []


def test_rows_in_rows_out(backend):
    with backend.write():
        for n in (3, 1, 2):
            backend.insert("files", _file_row(n))
        assert backend.insert_ignore("files", _file_row(1)) is False
        assert backend.insert_ignore("files", _file_row(4)) is True
    rows = backend.select("files", order_by=("size_bytes",))
    assert [r["size_bytes"] for r in rows] == [1, 2, 3, 4] and rows[0] == _file_row(1)
    assert backend.select("files", {"sha256": f"{2:064x}"}, columns=("size_bytes",)) == [{"size_bytes": 2}]
    with backend.write():
        assert backend.update("files", {"size_bytes": 2}, {"media_type": "text/csv"}) == 1
    assert backend.select("files", {"media_type": "text/csv"})[0]["size_bytes"] == 2
    assert backend.max_value("files", "size_bytes") == 4
    assert backend.max_value("files", "size_bytes", {"media_type": "none"}) is None


def test_null_matches_null(backend):
    row = {c: None for c in schema.TABLE_BY_NAME["batches"].column_names}
    row |= {"batch_id": "B1", "recipe_name": "r", "recipe_revision": 1, "recipe_sha256": "0" * 64}
    row |= {"part_count": 0, "image_set_sha256": "0" * 64, "started_at": "2031-04-02T10:30:00.000Z"}
    with backend.write():
        backend.insert("batches", row)
    assert len(backend.select("batches", {"finished_at": None})) == 1


def test_a_failed_write_leaves_nothing(backend):
    with pytest.raises(RuntimeError, match="stop"):
        with backend.write():
            backend.insert("files", _file_row(1))
            raise RuntimeError("stop")
    assert backend.select("files") == []


def test_names_outside_the_schema_never_reach_the_database(backend):
    with pytest.raises(ValueError, match="unknown table 'files; DROP TABLE meta'"):
        backend.select("files; DROP TABLE meta")
    with pytest.raises(ValueError, match=r"table 'files' has no column\(s\) 'size_bytes = 1 OR 1'"):
        backend.select("files", {"size_bytes = 1 OR 1": 1})


def test_a_broken_constraint_is_index_damage(backend):
    with backend.write():
        backend.insert("files", _file_row(1))
    with pytest.raises(IndexDamaged, match="UNIQUE constraint failed|duplicate key value violates unique constraint"):
        with backend.write():
            backend.insert("files", _file_row(1))


def test_row_types_have_the_schema_columns():
    for table in ("batches", "parts", "signatures", "dispositions", "register", "events"):
        names = tuple(f.name for f in dataclasses.fields(schema.row_type(table)))
        assert names == schema.TABLE_BY_NAME[table].column_names, table
