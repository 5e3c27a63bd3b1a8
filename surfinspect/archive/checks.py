"""The checks of the index, the audit chain and the stored files; each adds findings to a :class:`Context`.

A check reads the index through the archive's backend and the objects
through the object store; it never writes. The checks of what is signed
(register, heads, sign-offs, dispositions) are in :mod:`.signed_checks`;
:data:`.verify.CHECKS` gives the order they all run in.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field

from . import chain
from .chain import GENESIS_SHA256, EventKind
from .records import CLOCK_ALLOWANCE_S, OLD_ERROR_VERDICT, parse_utc
from .register import Register
from .schema import CHAINED_TABLES, TABLES, BatchRow, EventRow
from .store import ERROR_SCHEMA, ERROR_VERDICT, Archive, index_rows_of

__all__ = [
    "Context",
    "details_of",
    "short",
    "check_event",
    "check_index_structure",
    "check_chain",
    "check_rows_against_trail",
    "check_files",
    "check_results",
]


@dataclass
class Context:
    archive: Archive
    batch_id: str | None
    shared_only: bool = False  # chain, rows, register and heads only: no batch's files, results or signatures
    problems: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    usable: set[str] = field(default_factory=set)  # tables present with every column
    events: list[EventRow] = field(default_factory=list)
    event_sha: dict[int, str] = field(default_factory=dict)
    register: Register | None = None
    object_states: dict[str, str | None] = field(default_factory=dict)
    #: key fingerprint -> (audit event that enrolled it, audit event that revoked it or None)
    key_windows: dict[str, tuple[int, int | None]] = field(default_factory=dict)

    def key_valid_at(self, fingerprint: str, seq: int | None) -> bool:
        """Whether the key was enrolled (or made owner) before audit event ``seq`` and not revoked by then."""
        window = self.key_windows.get(fingerprint)
        if window is None or seq is None:
            return False
        start, end = window
        return start < seq and (end is None or seq < end)

    def object_state(self, sha: str) -> str | None:
        """What is wrong with a stored object (None when intact); each object is hashed once per check."""
        if sha not in self.object_states:
            self.object_states[sha] = self.archive.objects.state(sha)
        return self.object_states[sha]

    def fail(self, text: str) -> None:
        self.problems.append(text)

    def warn(self, text: str) -> None:
        self.warnings.append(text)

    def batches(self) -> list[BatchRow]:
        if "batches" not in self.usable or self.shared_only:
            return []
        rows = self.archive.batches()
        return [b for b in rows if self.batch_id is None or b.batch_id == self.batch_id]

    def event_covers(self, n: object, head: object) -> bool:
        return isinstance(n, int) and (n == 0 and head == GENESIS_SHA256 or self.event_sha.get(n) == head)


def short(value: object, limit: int = 80) -> str:
    text = repr(value)
    return text if len(text) <= limit else text[: limit - 1] + "…"


def _key_text(table: str, key: tuple) -> str:
    names = next(t for t in TABLES if t.name == table).primary_key
    return f"{table} row ({', '.join(f'{n}={v!r}' for n, v in zip(names, key))})"


# ----------------------------------------------------------------- the index


def check_index_structure(ctx: Context) -> None:
    """The database's own consistency check, and every table and column the schema wants."""
    for text in ctx.archive.index.integrity_problems()[:10]:
        ctx.fail(f"index: the database reports damage: {text}")
    found = ctx.archive.index.columns_found()
    for table in TABLES:
        if table.name not in found:
            ctx.fail(f"index: table {table.name!r} is missing (dropped?); its records cannot be checked")
            continue
        missing = [c for c in table.column_names if c not in found[table.name]]
        extra = [c for c in found[table.name] if c not in table.column_names]
        if missing:
            ctx.fail(f"index: table {table.name!r} lacks column(s) {', '.join(missing)}")
        if extra:
            ctx.fail(f"index: table {table.name!r} has column(s) no archive writes: {', '.join(extra)}")
        if not missing:
            ctx.usable.add(table.name)
    known = {t.name for t in TABLES}
    for name in sorted(set(found) - known):
        if not name.startswith("sqlite_"):  # the database's own bookkeeping tables
            ctx.fail(f"index: table {name!r} is not one an archive writes (added, or a table renamed)")


def _original_position(e: EventRow, window: int = 64) -> int | None:
    """The sequence number under which an event was hashed, when it sits nearby (a reordering)."""
    for k in range(max(1, e.seq - window), e.seq + window + 1):
        if (
            k != e.seq
            and chain.event_sha256(k, e.recorded_at, e.kind, e.batch_id, e.part_key, e.details, e.prev_sha256)
            == e.sha256
        ):
            return k
    return None


def check_event(ctx: Context, e: EventRow, expected_seq: int, prev_sha: str, prev_seq: int) -> None:
    if e.seq != expected_seq:
        where = f"jumps from event {expected_seq - 1} to" if expected_seq > 1 else "starts at"
        ctx.fail(f"audit trail: event(s) {expected_seq}–{e.seq - 1} are missing (the trail {where} event {e.seq})")
    elif e.prev_sha256 != prev_sha:
        ctx.fail(
            f"audit trail: event {e.seq} ({e.kind}) does not follow event {prev_seq}: its link to the event "
            "before is broken (events were reordered, removed or rewritten)"
        )
    try:
        recomputed = chain.event_sha256(e.seq, e.recorded_at, e.kind, e.batch_id, e.part_key, e.details, e.prev_sha256)
    except (ValueError, TypeError):
        recomputed = None
    if recomputed != e.sha256:
        origin = _original_position(e) if recomputed is not None else None
        if origin is not None:
            ctx.fail(
                f"audit trail: the event at position {e.seq} ({e.kind}) was recorded as event {origin}: events were reordered"
            )
        else:
            ctx.fail(f"audit trail: event {e.seq} ({e.kind}) does not match its own hash: its content was altered")


def check_chain(ctx: Context) -> None:
    """Sequence numbers without gaps, each event's hash and link, times that run forward, the head in meta."""
    if "events" not in ctx.usable:
        return
    ctx.events = ctx.archive.events()
    expected_seq, prev_sha, prev_seq, prev_time = 1, GENESIS_SHA256, 0, None
    for e in ctx.events:
        check_event(ctx, e, expected_seq, prev_sha, prev_seq)
        when = parse_utc(e.recorded_at)
        if when is None:
            ctx.fail(f"audit trail: event {e.seq} ({e.kind}) has no real UTC time ({e.recorded_at!r})")
        elif prev_time is not None and (prev_time - when).total_seconds() > CLOCK_ALLOWANCE_S:
            ctx.fail(f"audit trail: event {e.seq} ({e.kind}) is dated {e.recorded_at}, before the event ahead of it")
        prev_time = when or prev_time
        expected_seq, prev_sha, prev_seq = e.seq + 1, e.sha256, e.seq
        ctx.event_sha[e.seq] = e.sha256
    length, head = ctx.archive.chain_head()
    last = ctx.events[-1].seq if ctx.events else 0
    if last < length:
        ctx.fail(
            f"audit trail: it ends at event {last} but the index records {length} events: "
            f"event(s) {last + 1}–{length} were removed from the end"
        )
    elif last > length:
        ctx.fail(
            f"audit trail: it holds {last} events but the index records only {length} (events were added behind its back)"
        )
    elif ctx.events and head != prev_sha:
        ctx.fail("audit trail: the last event's hash does not match the chain head recorded in the index (meta)")
    _check_meta(ctx)


def _check_meta(ctx: Context) -> None:
    """The first event records the archive's creation; meta holds exactly that besides the chain head."""
    first = ctx.events[0] if ctx.events else None
    created = details_of(first) if first is not None and first.kind == EventKind.ARCHIVE_CREATED.value else {}
    if not created or created.get("archive_id") != ctx.archive.archive_id:
        ctx.fail("audit trail: it does not begin with the creation of this archive (archive id differs or is missing)")
        return
    meta = {r["key"]: r["value"] for r in ctx.archive.index.select("meta")}
    for key in sorted(set(meta) - {"chain_length", "chain_head_sha256"} | set(created)):
        if meta.get(key) != created.get(key):
            ctx.fail(f"index: meta {key} is {meta.get(key)!r}, audit event 1 recorded {created.get(key)!r}")


def details_of(e: EventRow) -> dict:
    try:
        value = json.loads(e.details)
    except ValueError:
        return {}
    return value if isinstance(value, dict) else {}


def check_rows_against_trail(ctx: Context) -> None:
    """Every row of every chained table, field by field, as the audit trail recorded it."""
    if "events" not in ctx.usable:
        return
    recorded, problems = chain.replay_rows(ctx.events)
    for text in problems:
        ctx.fail(text)
    for table in CHAINED_TABLES:
        if table.name not in ctx.usable:
            continue
        actual = {}
        for row in ctx.archive.index.select(table.name):
            encoded = chain.encode_row(table.name, row)
            actual[table.key_of(encoded)] = encoded
        for key in sorted(set(actual) | set(recorded[table.name]), key=repr):
            what = _key_text(table.name, key)
            if key not in recorded[table.name]:
                ctx.fail(
                    f"{what}: in the index but never recorded in the audit trail (added or re-keyed behind its back)"
                )
                continue
            replayed = recorded[table.name][key]
            if key not in actual:
                ctx.fail(
                    f"{what}: recorded in audit event {replayed.seq} but missing from the index (deleted or re-keyed)"
                )
                continue
            for column in table.column_names:
                if actual[key][column] != replayed.row[column]:
                    ctx.fail(
                        f"{what}: {column} is {short(actual[key][column])} in the index, audit event {replayed.seq} "
                        f"recorded {short(replayed.row[column])}"
                    )


# ----------------------------------------------------------- stored files


def _references(ctx: Context, batch: BatchRow) -> list[tuple[str, str]]:
    bid = batch.batch_id
    refs = [(batch.recipe_sha256, f"recipe of batch {bid!r}")]
    for label, sha in (("batch report", batch.report_sha256), ("region CSV", batch.regions_csv_sha256)):
        if sha:
            refs.append((sha, f"{label} of batch {bid!r}"))
    if "parts" in ctx.usable:
        for p in ctx.archive.parts(bid):
            for label, sha in (
                ("image", p.image_sha256 if p.is_done else None),
                ("result", p.result_sha256),
                ("overlay", p.overlay_sha256),
            ):
                if sha:
                    refs.append((sha, f"{label} of part {p.part_key!r} in batch {bid!r}"))
    if "signatures" in ctx.usable:
        for s in ctx.archive.signoffs(bid):
            refs.append((s.signed_report_sha256, f"signed report #{s.signoff_no} of batch {bid!r}"))
    return refs


def check_files(ctx: Context) -> None:
    """Every file the index refers to is catalogued and matches its hash; no object is left uncatalogued."""
    catalogued = (
        {r["sha256"] for r in ctx.archive.index.select("files", columns=("sha256",))}
        if "files" in ctx.usable
        else set()
    )
    objects = ctx.archive.objects
    for batch in ctx.batches():
        for sha, what in _references(ctx, batch):
            if "files" in ctx.usable and sha not in catalogued:
                ctx.fail(f"stored file {sha[:12]}… ({what}) is missing from the file catalogue")
            state = ctx.object_state(sha)
            if state is not None:
                ctx.fail(f"stored file {objects.path(sha).relative_to(ctx.archive.root)} ({what}) {state}")
    if ctx.batch_id is not None or ctx.shared_only or "files" not in ctx.usable:
        return
    for sha in sorted(catalogued):
        state = ctx.object_state(sha)
        if state is not None:
            ctx.fail(f"stored file {objects.path(sha).relative_to(ctx.archive.root)} (in the file catalogue) {state}")
    for sha in objects.stored():
        if sha not in catalogued:  # a warning: an interrupted write leaves its objects behind uncatalogued
            ctx.warn(
                f"stored file {objects.path(sha).relative_to(ctx.archive.root)} is not in the file catalogue "
                "(left by an interrupted write, or a record that referred to it was removed)"
            )


# --------------------------------------------------- results and the index


def _read_json_object(ctx: Context, sha: str) -> dict | None:
    if ctx.object_state(sha) is not None:
        return None  # a missing or changed object is already named
    try:
        value = json.loads(ctx.archive.read_object(sha))
    except (OSError, ValueError):
        return None
    return value if isinstance(value, dict) else None


def _compare_regions(ctx: Context, where: str, stored: dict, indexed: dict) -> None:
    for name in sorted(set(stored) | set(indexed)):
        if name not in indexed:
            ctx.fail(f"region {name!r} of {where} is in the stored result but missing from the index")
        elif name not in stored:
            ctx.fail(f"region {name!r} of {where} is in the index but not in the stored result")
        elif indexed[name]["verdict"] != stored[name]["verdict"]:
            ctx.fail(
                f"region {name!r} of {where}: the index says verdict {indexed[name]['verdict']!r}, "
                f"the stored (signed) result says {stored[name]['verdict']!r}"
            )
        elif chain.encode_row("regions", indexed[name]) != chain.encode_row("regions", stored[name]):
            ctx.fail(f"region {name!r} of {where}: the figures in the index differ from the stored result")


def check_results(ctx: Context) -> None:
    """Each stored result against its part row, the batch's recipe, and the region rows."""
    if "parts" not in ctx.usable:
        return
    for batch in ctx.batches():
        bid = batch.batch_id
        for p in ctx.archive.parts(bid):
            result = _read_json_object(ctx, p.result_sha256) if p.result_sha256 else None
            if result is None:
                continue
            where = f"part {p.part_key!r} in batch {bid!r}"
            named = str((result.get("image") or {}).get("sha256"))
            if named != str(p.image_sha256):
                ctx.fail(
                    f"{where}: its result names image {named[:12]}… but the index links image {str(p.image_sha256)[:12]}…"
                )
            if result.get("schema") == ERROR_SCHEMA:
                if p.verdict not in (ERROR_VERDICT, OLD_ERROR_VERDICT):
                    ctx.fail(
                        f"{where}: the index says verdict {p.verdict!r}, the stored record says the part could not be inspected"
                    )
                continue
            recipe = str((result.get("recipe") or {}).get("sha256"))
            if recipe != batch.recipe_sha256:
                ctx.fail(
                    f"{where}: its result was made with recipe {recipe[:12]}…, not the batch's recipe {batch.recipe_sha256[:12]}…"
                )
            if result.get("verdict") != p.verdict:
                ctx.fail(
                    f"{where}: the index says verdict {p.verdict!r}, the stored result says {result.get('verdict')!r}"
                )
            if "regions" in ctx.usable:
                _, _, region_rows = index_rows_of(result)
                stored = {r["region_name"]: {"batch_id": bid, "part_key": p.part_key, **r} for r in region_rows}
                indexed = {r["region_name"]: r for r in ctx.archive.regions(bid, p.part_key)}
                _compare_regions(ctx, where, stored, indexed)
