"""Moving an archive between backends (a station's folder into the plant's PostgreSQL, and back).

A copy is the same archive, not a new one: every row of every table is
written as it is (the archive id, the audit events with their hashes, the
signed heads, the register, sign-offs and dispositions), so ``verify`` on
the copy checks the very chain and signatures of the original. The stored
files are copied by hash and re-hashed on arrival.

The destination must be new (no index there): a copy never merges into an
archive, which would be a second history under one id. The index rows go
in one write transaction with the tables (:meth:`.backend.IndexBackend.creating`),
after the files, so an interrupted copy leaves an empty index (run it again)
and never half an archive.
"""

from __future__ import annotations

from dataclasses import dataclass

from ..errors import InputError
from .backend import IndexBusy, IndexDamaged
from .location import check_folder, open_index, parse_location
from .objects import ObjectStore
from .schema import TABLES
from .store import Archive

__all__ = ["CopyOutcome", "copy_archive"]


@dataclass(frozen=True)
class CopyOutcome:
    rows: dict[str, int]  # table -> rows copied
    objects: int
    events: int
    head_sha256: str


def _not_new(where) -> InputError:
    return InputError(
        f"--to {where.display}: already holds an archive index; a copy goes into a new folder or an empty "
        "database (allowed: a new --to)"
    )


def _destination(text: str):
    where = parse_location(text, "--to")
    if not where.is_database:
        check_folder(where.root, create=True, has_backend=False)
    index = open_index(where)
    try:
        if index.exists():
            raise _not_new(where)
    except BaseException:
        index.close()
        raise
    return where, index, ObjectStore.at(where.objects_dir)


def copy_archive(source: str, destination: str) -> CopyOutcome:
    """Copy the archive at ``source`` to the new location ``destination`` (folder or PostgreSQL URL).

    Raises
    ------
    InputError
        When the source is not an archive, the destination already holds
        one, or a stored file of the source is missing or changed (the copy
        would not verify: run ``verify`` on the source first).
    """
    if parse_location(source).text == parse_location(destination, "--to").text:
        raise InputError("--to: the same location as --from")
    with Archive(source) as src:
        where, index, store = _destination(destination)
        try:
            tables = {t.name: src.index.select(t.name, order_by=t.primary_key) for t in TABLES}
            store.make()
            for row in tables["files"]:
                path = src.object_path(row["sha256"])
                if not path.is_file():
                    raise InputError(
                        f"--from {src.location}: stored file {row['sha256'][:12]}… is missing; "
                        "`surfinspect verify` names what is wrong"
                    )
                store.put_file(path, row["sha256"])
            try:
                with index.creating() as new:
                    if not new:  # made meanwhile (a second copy, or a station opening it)
                        raise _not_new(where)
                    for table in TABLES:
                        for row in tables[table.name]:
                            index.insert(table.name, row)
            except (IndexDamaged, IndexBusy) as exc:
                raise InputError(f"--to {where.display}: cannot write the archive index ({exc})") from None
            events, head = src.chain_head()
        finally:
            index.close()
    return CopyOutcome({t: len(r) for t, r in tables.items()}, len(tables["files"]), events, head)
