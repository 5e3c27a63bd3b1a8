"""The named checks ``verify`` is built from; each adds findings to a :class:`Context`.

A check reads the index through the archive's backend and the objects
through the object store; it never writes. The order in :data:`CHECKS` is the
order findings are listed in.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from typing import Any, Callable

from . import chain, signing
from .chain import GENESIS_SHA256, EventKind
from .register import Register
from .schema import CHAINED_TABLES, TABLES, BatchRow, EventRow, RegisterRow
from .signatures import CLOCK_ALLOWANCE_S, parse_utc, time_problem
from .store import ERROR_SCHEMA, ERROR_VERDICT, Archive, index_rows_of

__all__ = ["Context", "CHECKS"]


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


def _short(value: object, limit: int = 80) -> str:
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


def _check_event(ctx: Context, e: EventRow, expected_seq: int, prev_sha: str, prev_seq: int) -> None:
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
        _check_event(ctx, e, expected_seq, prev_sha, prev_seq)
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
    created = _details(first) if first is not None and first.kind == EventKind.ARCHIVE_CREATED.value else {}
    if not created or created.get("archive_id") != ctx.archive.archive_id:
        ctx.fail("audit trail: it does not begin with the creation of this archive (archive id differs or is missing)")
        return
    meta = {r["key"]: r["value"] for r in ctx.archive.index.select("meta")}
    for key in sorted(set(meta) - {"chain_length", "chain_head_sha256"} | set(created)):
        if meta.get(key) != created.get(key):
            ctx.fail(f"index: meta {key} is {meta.get(key)!r}, audit event 1 recorded {created.get(key)!r}")


def _details(e: EventRow) -> dict:
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
                        f"{what}: {column} is {_short(actual[key][column])} in the index, audit event {replayed.seq} "
                        f"recorded {_short(replayed.row[column])}"
                    )


# ----------------------------------------------------------- the register


def _signed_record(text: str, signature_hex: str) -> tuple[dict | None, bytes]:
    try:
        record = json.loads(text)
        return (record if isinstance(record, dict) else None), bytes.fromhex(signature_hex)
    except (ValueError, TypeError):
        return None, b""


def _check_register_entry(ctx: Context, row: RegisterRow, owner: RegisterRow | None, position: int) -> None:
    who = f"register entry {row.entry_no} ({row.action} {row.printed_name})"
    record, signature = _signed_record(row.record_json, row.signature_hex)
    if record is None:
        ctx.fail(f"{who}: its record or signature cannot be read")
        return
    if row.entry_no != position:
        ctx.fail(f"{who}: entries are not numbered 1, 2, 3 … (found {row.entry_no} at place {position})")
    for column in (
        "entry_no",
        "action",
        "key_fingerprint",
        "public_key_hex",
        "printed_name",
        "role",
        "recorded_at_utc",
        "by_fingerprint",
    ):
        if record.get(column) != getattr(row, column):
            ctx.fail(
                f"{who}: the index shows {column} {getattr(row, column)!r}, the signed record says {record.get(column)!r}"
            )
    if record.get("archive_id") != ctx.archive.archive_id:
        ctx.fail(f"{who}: it was signed for another archive (archive id {record.get('archive_id')!r})")
    if owner is None or row.by_fingerprint != owner.key_fingerprint:
        ctx.fail(f"{who}: it is not signed by the archive's owner")
        return
    if not signing.verify_signature(bytes.fromhex(owner.public_key_hex), chain.canonical_bytes(record), signature):
        ctx.fail(f"{who}: the owner's signature does not hold over its record (record or signature altered)")
    if not ctx.event_covers(record.get("audit_events"), record.get("audit_head_sha256")):
        ctx.fail(
            f"{who}: audit event {record.get('audit_events')}, the trail's head when it was made, is missing or was rewritten"
        )
    if row.action in ("owner", "enrol"):
        try:
            if signing.key_fingerprint(bytes.fromhex(row.public_key_hex)) != row.key_fingerprint:
                ctx.fail(f"{who}: the enrolled public key does not have the fingerprint recorded with it")
        except ValueError:
            ctx.fail(f"{who}: the enrolled public key cannot be read")


def _key_windows(ctx: Context, rows: list[RegisterRow]) -> None:
    """Where in the trail each key became valid and stopped being valid (its register entries' events)."""
    by_entry = {r.entry_no: r for r in rows}
    for e in ctx.events:
        if e.kind != EventKind.REGISTER_ENTRY.value:
            continue
        row = by_entry.get(_details(e).get("entry_no"))
        if row is None:
            continue
        start, end = ctx.key_windows.get(row.key_fingerprint, (None, None))
        if row.action in ("owner", "enrol") and start is None:
            ctx.key_windows[row.key_fingerprint] = (e.seq, None)
        elif row.action == "revoke" and start is not None and end is None:
            ctx.key_windows[row.key_fingerprint] = (start, e.seq)


def check_register(ctx: Context) -> None:
    """One self-signed owner entry first; every other entry signed by the owner; records match their rows."""
    if "register" not in ctx.usable:
        return
    reg = ctx.archive.register()
    ctx.register = reg
    rows = reg.entries
    owners = [r for r in rows if r.action == "owner"]
    if len(owners) > 1:
        ctx.fail(
            f"register: it names {len(owners)} owners (entries {', '.join(str(r.entry_no) for r in owners)}); the owner is set once"
        )
    if rows and rows[0].action != "owner":
        ctx.fail("register: its first entry is not the owner's: entries were made before the archive had an owner")
    owner = owners[0] if owners else None
    if owner is not None and owner.by_fingerprint != owner.key_fingerprint:
        ctx.fail("register: the owner entry is not signed by the owner's own key")
    _key_windows(ctx, rows)
    for position, row in enumerate(rows, start=1):
        if row.action not in ("owner", "enrol", "revoke"):
            ctx.fail(f"register entry {row.entry_no}: unknown action {row.action!r}")
            continue
        _check_register_entry(ctx, row, owner, position)


# ------------------------------------------------------------ signed heads


def _head_signer(ctx: Context, record: dict, seq: int):
    """The owner or signer whose key was valid at this point of the trail, or None."""
    reg = ctx.register
    fingerprint = str(record.get("key_fingerprint"))
    holder = reg.key_holder(fingerprint) if reg is not None else None
    if holder is None or not ctx.key_valid_at(fingerprint, seq):
        return None
    return holder


def check_signed_heads(ctx: Context) -> None:
    """Each signed head against the register and the trail; every signed act followed by its signed head."""
    last_signed = 0
    for i, e in enumerate(ctx.events):
        if e.kind != EventKind.HEAD_SIGNED.value:
            continue
        details = _details(e)
        record, signature = details.get("record"), details.get("signature_hex", "")
        where = f"signed head at audit event {e.seq}"
        if not isinstance(record, dict):
            ctx.fail(f"{where}: its record cannot be read")
            continue
        signer = _head_signer(ctx, record, e.seq)
        if signer is None:
            ctx.fail(
                f"{where}: key {str(record.get('key_fingerprint'))[:16]}… was not the owner's or an enrolled, "
                "unrevoked signer's at that point of the trail (a key from outside the register, or revoked)"
            )
            continue
        signed_at = parse_utc(record.get("signed_at_utc"))
        recorded = parse_utc(e.recorded_at)
        if signed_at is None or recorded is None or abs((signed_at - recorded).total_seconds()) > CLOCK_ALLOWANCE_S:
            ctx.fail(
                f"{where}: it is dated {record.get('signed_at_utc')!r}, not when it was recorded ({e.recorded_at})"
            )
        try:
            holds = signing.verify_record(bytes.fromhex(signer.public_key_hex), record, bytes.fromhex(signature))
        except (ValueError, TypeError):
            holds = False
        if not holds:
            ctx.fail(f"{where}: the signature of {signer.printed_name} does not hold over the head it names")
        n = record.get("events")
        if record.get("archive_id") != ctx.archive.archive_id:
            ctx.fail(f"{where}: it was signed for another archive")
        if n != e.seq - 1 or not ctx.event_covers(n, record.get("head_sha256")):
            ctx.fail(f"{where}: it signs head {n}, which is not the event before it or was rewritten since")
        elif holds:
            last_signed = e.seq
    _check_acts_are_head_signed(ctx)
    tail = [e for e in ctx.events if e.seq > last_signed and e.kind != EventKind.VERIFIED.value]
    if tail:
        kinds = sorted({e.kind for e in tail})
        ctx.warn(
            f"audit trail: {len(tail)} record(s) after the last signed head (event {last_signed}) are not covered by "
            f"any signature ({', '.join(kinds)}); keep an anchor (verify --export-anchor) to notice their removal"
        )


def _check_acts_are_head_signed(ctx: Context) -> None:
    following = {e.seq: e for e in ctx.events}
    signed_acts = (EventKind.REGISTER_ENTRY.value, EventKind.SIGNED.value, EventKind.DISPOSITION.value)
    for e in ctx.events:
        after = following.get(e.seq + 1)
        head_signed = after is not None and after.kind == EventKind.HEAD_SIGNED.value
        if e.kind in signed_acts and not head_signed:
            ctx.fail(f"audit trail: event {e.seq} ({e.kind}) is not followed by the signer's signed chain head")
        elif e.kind == EventKind.REPORT_WRITTEN.value and not head_signed:
            ctx.warn(
                f"batch {e.batch_id!r} was closed (audit event {e.seq}) without a station key: its chain head is "
                "not signed (run batches with --station-key KEYFILE)"
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
                if p.verdict != ERROR_VERDICT:
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


# ------------------------------------------------ sign-offs and dispositions


def _person_key(ctx: Context, who: str, fingerprint: str, name: str, seq: int | None) -> bytes | None:
    """The enrolled public key a person's record must verify under, or None (named as a finding).

    ``seq`` is the audit event that recorded the act: the key must have been
    enrolled before it and not revoked by then (the trail's order, not a time
    the signer could choose).
    """
    signer = ctx.register.signers.get(fingerprint) if ctx.register is not None else None
    if signer is None:
        ctx.fail(f"{who}: key {fingerprint[:16]}… is not in the archive's signer register")
        return None
    if seq is None:
        ctx.fail(f"{who}: the audit trail holds no event recording it")
    elif not ctx.key_valid_at(fingerprint, seq):
        ctx.fail(
            f"{who}: the key of {signer.printed_name} was not enrolled, or was already revoked, at audit event {seq}"
        )
    if signer.is_station:
        ctx.fail(f"{who}: it is signed with a station key; a sign-off or disposition needs a person's key")
    if name != signer.printed_name:
        ctx.fail(f"{who}: the printed name {name!r} is not the register's name for the key ({signer.printed_name!r})")
    return bytes.fromhex(signer.public_key_hex)


def _check_record(ctx: Context, who: str, row: Any, public: bytes | None, shown: tuple[str, ...]) -> dict | None:
    record, signature = _signed_record(row.record_json, row.signature_hex)
    if record is None:
        ctx.fail(f"{who}: its record or signature cannot be read")
        return None
    if public is not None and not signing.verify_record(public, record, signature):
        ctx.fail(f"{who}: the signature does not hold over its record (record or signature altered)")
    try:
        if chain.canonical_sha256(record) != row.record_sha256:
            ctx.fail(f"{who}: the record no longer matches its hash in the index")
    except ValueError:
        ctx.fail(f"{who}: its record holds values that are never signed")
    for column in shown:
        if record.get(column) != getattr(row, column):
            ctx.fail(
                f"{who}: the index shows {column} {getattr(row, column)!r}, the signed record says {record.get(column)!r}"
            )
    if record.get("archive_id") != ctx.archive.archive_id:
        ctx.fail(f"{who}: it was signed for another archive")
    if not ctx.event_covers(record.get("audit_events"), record.get("audit_head_sha256")):
        ctx.fail(
            f"{who}: audit event {record.get('audit_events')}, the trail's head when it was signed, is missing or was rewritten"
        )
    return record


def _act_event(ctx: Context, kind: EventKind, batch_id: str, key: str, number: int, part_key: str | None = None):
    for e in ctx.events:
        if (
            e.kind == kind.value
            and e.batch_id == batch_id
            and e.part_key == part_key
            and _details(e).get(key) == number
        ):
            return e
    return None


def check_signoffs(ctx: Context) -> None:
    """Each sign-off: signed by an enrolled person, at a real time, over this batch as it stands."""
    if "signatures" not in ctx.usable:
        return
    for batch in ctx.batches():
        bid = batch.batch_id
        for s in ctx.archive.signoffs(bid):
            who = f"sign-off #{s.signoff_no} of batch {bid!r} by {s.signer_name} ({s.meaning}, {s.signed_at_utc})"
            act = _act_event(ctx, EventKind.SIGNED, bid, "signoff_no", s.signoff_no)
            public = _person_key(ctx, who, s.key_fingerprint, s.signer_name, act.seq if act else None)
            shown = ("signer_name", "key_fingerprint", "meaning", "signed_at_utc", "comment", "batch_id", "signoff_no")
            record = _check_record(ctx, who, s, public, shown)
            if record is None:
                continue
            recorded_at = act.recorded_at if act else None
            problem = time_problem(s.signed_at_utc, not_before=batch.finished_at, not_after=recorded_at)
            if problem:
                ctx.fail(f"{who}: signed_at_utc {problem}")
            if record.get("report_sha256") != batch.report_sha256:
                ctx.fail(f"{who}: the batch report in the index is not the one that was signed")
            if "parts" in ctx.usable and "regions" in ctx.usable:
                if record.get("batch_content_sha256") != ctx.archive.batch_content_sha256(bid):
                    ctx.fail(f"{who}: the batch's index content (batch, parts, regions) is not what was signed")
                results = ctx.archive.results_sha256(bid)
                signed = record.get("results_sha256") or {}
                if signed != results:
                    changed = sorted(k for k in set(results) | set(signed) if results.get(k) != signed.get(k))
                    ctx.fail(
                        f"{who}: the results in the index are not the ones that were signed (parts: {', '.join(changed[:5])})"
                    )


def check_dispositions(ctx: Context) -> None:
    """Each disposition: signed by an enrolled person, for a part and result of this batch."""
    if "dispositions" not in ctx.usable:
        return
    for batch in ctx.batches():
        parts = {p.part_key: p for p in ctx.archive.parts(batch.batch_id)} if "parts" in ctx.usable else {}
        for d in ctx.archive.dispositions(batch.batch_id):
            who = f"disposition #{d.disposition_no} of part {d.part_key!r} in batch {batch.batch_id!r} ({d.decision} by {d.signer_name})"
            act = _act_event(ctx, EventKind.DISPOSITION, batch.batch_id, "disposition_no", d.disposition_no, d.part_key)
            public = _person_key(ctx, who, d.key_fingerprint, d.signer_name, act.seq if act else None)
            shown = (
                "batch_id",
                "part_key",
                "disposition_no",
                "decision",
                "signer_name",
                "key_fingerprint",
                "decided_at_utc",
                "comment",
            )
            record = _check_record(ctx, who, d, public, shown)
            if record is None:
                continue
            part = parts.get(d.part_key)
            if part is None or record.get("result_sha256") != part.result_sha256:
                ctx.fail(f"{who}: the part's result in the index is not the one the disposition was made for")
            problem = time_problem(d.decided_at_utc, not_before=None, not_after=act.recorded_at if act else None)
            if problem:
                ctx.fail(f"{who}: decided_at_utc {problem}")


#: The checks in the order they run (and findings are listed).
CHECKS: tuple[tuple[str, Callable[[Context], None]], ...] = (
    ("index structure", check_index_structure),
    ("audit chain", check_chain),
    ("index rows against the audit trail", check_rows_against_trail),
    ("signer register", check_register),
    ("signed chain heads", check_signed_heads),
    ("stored files", check_files),
    ("results against the index", check_results),
    ("sign-offs", check_signoffs),
    ("dispositions", check_dispositions),
)
