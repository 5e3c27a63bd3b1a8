"""``archive copy``: SQLite folder → PostgreSQL → SQLite folder, the same archive at every step."""

from __future__ import annotations

import pytest
from archive_helpers import Site, full_archive

from surfinspect.archive import store as arc
from surfinspect.archive.schema import TABLES
from surfinspect.cli import main


def _rows(location) -> dict:
    with arc.Archive(location) as a:
        return {t.name: a.index.select(t.name, order_by=t.primary_key) for t in TABLES}


def _show(location, capsys, *extra) -> str:
    capsys.readouterr()
    assert main(["show", "--archive", str(location), *extra]) == 0
    return capsys.readouterr().out


@pytest.mark.postgres
def test_sqlite_to_postgres_and_back_is_the_same_archive(tmp_path, pg_server, pg_database, capsys):
    source, _ = full_archive(tmp_path)  # register, station-signed batch, sign-off, disposition
    database = Site(tmp_path / "pg", pg_server, pg_database)
    back = tmp_path / "back"
    for frm, to in ((source, database), (database, back)):
        shows, rows = [_show(frm, capsys), _show(frm, capsys, "--batch-id", "LW220-0506")], _rows(frm)
        assert main(["archive", "copy", "--from", str(frm), "--to", str(to)]) == 0, capsys.readouterr()
        assert "the copy verifies" in capsys.readouterr().out
        # the same rows, field for field (archive id, chain head, every event, signature and register entry)
        assert _rows(to) == rows
        assert [_show(to, capsys), _show(to, capsys, "--batch-id", "LW220-0506")] == shows
        assert main(["-q", "verify", "--archive", str(to)]) == 0  # (records a 'verified' event in the copy)
    with arc.Archive(source) as a, arc.Archive(back) as b:
        n = len(a.events())
        assert [e.sha256 for e in b.events()[:n]] == [e.sha256 for e in a.events()]
        assert a.archive_id == b.archive_id
        assert sorted(a.objects.stored()) == sorted(b.objects.stored())


def test_a_copy_never_goes_into_an_existing_archive(tmp_path, capsys):
    source, _ = full_archive(tmp_path)
    (tmp_path / "other").mkdir()
    other, _ = full_archive(tmp_path / "other")
    assert main(["archive", "copy", "--from", str(source), "--to", str(other)]) == 2
    assert "already holds an archive index" in capsys.readouterr().err
    assert main(["archive", "copy", "--from", str(source), "--to", str(source)]) == 2
    assert "--to: the same location as --from" in capsys.readouterr().err


def test_a_missing_stored_file_stops_the_copy_before_any_row(tmp_path, capsys):
    source, _ = full_archive(tmp_path)
    victim = next(p for p in (source / "objects").rglob("*") if p.is_file())
    victim.unlink()
    assert main(["archive", "copy", "--from", str(source), "--to", str(tmp_path / "c")]) == 2
    assert "is missing" in capsys.readouterr().err
    assert not (tmp_path / "c" / arc.INDEX_NAME).exists() or (tmp_path / "c" / arc.INDEX_NAME).stat().st_size == 0
