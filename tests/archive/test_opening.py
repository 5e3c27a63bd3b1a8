"""Making a new archive from several processes at once, on both backends: nobody ever finds half of one.

Every process here is a real OS process (fork where there is one). A station making the archive can be
stopped inside its creating transaction, after the tables and before the first meta row, by a hook on its
own backend object (``_open_held``): there it is held, to look at the archive from outside, or killed.
"""

from __future__ import annotations

import multiprocessing
import os
import signal

import pytest
from archive_helpers import Site

from surfinspect.archive import location
from surfinspect.archive import store as arc
from surfinspect.archive import verify as ver
from surfinspect.archive.schema import ARCHIVE_FORMAT
from surfinspect.errors import InputError

STATIONS = 4  # making the archive at once
WATCHERS = 2  # opening it without create=True meanwhile, as `show` or the review station would
ROUNDS = 5
WAIT_S = 120


def _context():
    return multiprocessing.get_context("fork" if "fork" in multiprocessing.get_all_start_methods() else "spawn")


@pytest.fixture(params=["sqlite", pytest.param("postgres", marks=pytest.mark.postgres)])
def new_site(request, tmp_path):
    """A maker of new archive locations on the backend: ``new_site(n)`` is a new folder, or a new database."""
    if request.param == "sqlite":
        yield lambda n: Site(tmp_path / f"archive-{n}")
        return
    server, made = request.getfixturevalue("pg_server"), []

    def make(n):
        made.append(server.create_database())
        return Site(tmp_path / f"archive-{n}", server, made[-1])

    yield make
    for name in made:
        server.drop_database(name)


def _meta(a: arc.Archive) -> dict[str, str]:
    return {r["key"]: r["value"] for r in a.index.select("meta")}


def _look(site: str) -> str:
    """What a process opening the archive without ``create`` finds: 'absent', 'whole', or what else (a failure)."""
    try:
        a = arc.Archive(site)
    except InputError as exc:
        return "absent" if "not a surfinspect archive" in str(exc) else f"refused: {exc}"
    with a:
        meta, kinds = _meta(a), [e.kind for e in a.events()]
    if meta.get("format") == ARCHIVE_FORMAT and meta.get("chain_length") == "1" and kinds == ["archive created"]:
        return "whole"
    return f"half: meta {meta}, events {kinds}"


def _open_new(site: str, barrier, results) -> None:
    """A station: waits for the others at the barrier, then opens the archive with ``create=True``."""
    if barrier is not None:
        barrier.wait(WAIT_S)
    try:
        with arc.Archive(site, create=True) as a:
            results.put(("opened", _meta(a), [e.kind for e in a.events()]))
    except BaseException as exc:  # reported to the test, which fails naming it
        results.put(("failed", f"{type(exc).__name__}: {exc}"))


def _watch(site: str, barrier, results) -> None:
    """A watcher: looks at the archive again and again from the barrier on, until it finds it whole."""
    barrier.wait(WAIT_S)
    seen: list[str] = []
    while not seen or seen[-1] != "whole":
        if len(seen) > 100_000:
            break
        seen.append(_look(site))
    results.put(("watched", seen))


def _open_held(site: str, reached, release, results, spill: bool) -> None:
    """A station that stops inside its creating transaction, tables made, before the first meta row, until
    ``release`` is set (or it is killed there). ``spill`` (SQLite): a one-page cache, so that the new pages
    are written into the file before the commit, with a rollback journal beside it."""
    where = location.parse_location(site)
    if not where.is_database:
        where.root.mkdir(parents=True, exist_ok=True)  # an archive given its backend makes no folder
    index = location.open_index(where)
    if spill and not where.is_database:
        index._db.execute("PRAGMA cache_size = 1")
    insert = index.insert

    def held_insert(table, row):
        if table == "meta" and not reached.is_set():
            reached.set()
            release.wait(WAIT_S)
        insert(table, row)

    index.insert = held_insert
    with arc.Archive(site, create=True, backend=index) as a:
        results.put(("opened", _meta(a), [e.kind for e in a.events()]))


def _stations_at_once(site: Site, *, watchers: int = WATCHERS) -> dict[str, str]:
    """STATIONS processes open the new archive with create=True at one barrier, ``watchers`` look meanwhile;
    every station must open it, all the same one, and no watcher may find anything but no archive or all of it."""
    ctx = _context()
    barrier, results = ctx.Barrier(STATIONS + watchers), ctx.Queue()
    procs = [ctx.Process(target=_open_new, args=(str(site), barrier, results)) for _ in range(STATIONS)]
    procs += [ctx.Process(target=_watch, args=(str(site), barrier, results)) for _ in range(watchers)]
    for p in procs:
        p.start()
    outcomes = [results.get(timeout=WAIT_S) for _ in procs]
    for p in procs:
        p.join(WAIT_S)
    assert [p.exitcode for p in procs] == [0] * len(procs), outcomes
    opened = [o for o in outcomes if o[0] == "opened"]
    assert len(opened) == STATIONS, outcomes
    assert all(o[2] == ["archive created"] for o in opened), opened  # made once, whoever made it
    metas = [o[1] for o in opened]
    assert all(m == metas[0] for m in metas) and metas[0]["format"] == ARCHIVE_FORMAT, metas
    for _, seen in (o for o in outcomes if o[0] == "watched"):
        assert set(seen) <= {"absent", "whole"} and seen[-1] == "whole", sorted(set(seen))
    with arc.Archive(site) as a:
        assert _meta(a) == metas[0]
    assert ver.verify_archive(site).problems == []
    return metas[0]


@pytest.mark.slow
def test_stations_making_one_new_archive_at_once_agree_on_it(new_site):
    ids = [_stations_at_once(new_site(n))["archive_id"] for n in range(ROUNDS)]
    assert len(set(ids)) == ROUNDS  # a new archive every round


def test_a_station_opening_while_another_makes_the_archive_waits_and_finds_it_whole(new_site):
    """One station is held inside its creating transaction: from outside there is no archive yet (never
    tables without meta, which was 'unknown archive format', exit 2, under load in the four-station test);
    a second station opening with create=True waits for it and opens what it made, nothing made twice."""
    site, ctx = new_site(0), _context()
    reached, release, results = ctx.Event(), ctx.Event(), ctx.Queue()
    maker = ctx.Process(target=_open_held, args=(str(site), reached, release, results, False))
    maker.start()
    try:
        assert reached.wait(WAIT_S)
        assert _look(site) == "absent"
        second = ctx.Process(target=_open_new, args=(str(site), None, results))
        second.start()
        second.join(1.0)
        assert second.is_alive() and results.empty()  # it waits on the write lock the maker holds
    finally:
        release.set()
    outcomes = [results.get(timeout=WAIT_S) for _ in range(2)]
    for p in (maker, second):
        p.join(WAIT_S)
    assert [o[0] for o in outcomes] == ["opened", "opened"] and outcomes[0][1:] == outcomes[1][1:], outcomes
    assert outcomes[0][2] == ["archive created"] and _look(site) == "whole"
    assert ver.verify_archive(site).problems == []


def _kill_while_making(site: Site) -> None:
    ctx = _context()
    reached, release, results = ctx.Event(), ctx.Event(), ctx.Queue()
    maker = ctx.Process(target=_open_held, args=(str(site), reached, release, results, True))
    maker.start()
    assert reached.wait(WAIT_S)
    os.kill(maker.pid, signal.SIGKILL)
    maker.join(WAIT_S)
    assert maker.exitcode == -signal.SIGKILL


def test_a_station_killed_while_making_the_archive_leaves_none(new_site):
    site = new_site(0)
    _kill_while_making(site)
    if not site.is_postgres:  # the worst case for a file: its new pages on disk, a hot journal beside them
        assert (site / arc.INDEX_NAME).stat().st_size > 0 and (site / f"{arc.INDEX_NAME}-journal").exists()
    assert _look(site) == "absent"
    # killed again, and this time stations making the archive are the first to open it after the kill
    _kill_while_making(site)
    _stations_at_once(site, watchers=0)
