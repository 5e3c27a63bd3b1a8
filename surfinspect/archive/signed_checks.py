"""The checks of what is signed: the signer register, signed chain heads, sign-offs, dispositions.

Keys are judged by their place in the audit trail: a key signs validly only
after the event that enrolled it and before the event that revoked it, so a
signer cannot move an act before a revocation by writing an earlier time.
"""

from __future__ import annotations

import json
from typing import Any

from . import chain, signing
from .chain import EventKind
from .checks import Context, details_of
from .editions import BatchState, batch_state_at, edition_at, edition_events
from .records import CLOCK_ALLOWANCE_S, parse_utc, time_problem
from .register import ACTIONS
from .schema import RegisterRow

__all__ = ["check_register", "check_signed_heads", "check_signoffs", "check_dispositions"]


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
    _check_pdf_key_binding(ctx, who, row, record)


def _check_pdf_key_binding(ctx: Context, who: str, row: RegisterRow, record: dict) -> None:
    """A PDF key named in an entry is claimed by the entry's Ed25519 key (its binding signature holds)."""
    pdf_hex = record.get("pdf_public_key_hex")
    if pdf_hex is None:
        if row.action == "pdf-key":
            ctx.fail(f"{who}: a pdf-key entry that names no PDF key")
        return
    try:
        holds = signing.binding_holds(
            bytes.fromhex(row.public_key_hex), bytes.fromhex(pdf_hex), bytes.fromhex(record.get("pdf_key_binding_hex"))
        )
    except (ValueError, TypeError):
        holds = False
    if not holds:
        ctx.fail(f"{who}: its PDF key is not claimed by the holder's Ed25519 key (the binding signature does not hold)")


def _key_windows(ctx: Context, rows: list[RegisterRow]) -> None:
    """Where in the trail each key became valid and stopped being valid (its register entries' events)."""
    by_entry = {r.entry_no: r for r in rows}
    for e in ctx.events:
        if e.kind != EventKind.REGISTER_ENTRY.value:
            continue
        row = by_entry.get(details_of(e).get("entry_no"))
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
        if row.action not in ACTIONS:
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
        details = details_of(e)
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
            and details_of(e).get(key) == number
        ):
            return e
    return None


def check_signoffs(ctx: Context) -> None:
    """Each sign-off: signed by an enrolled person, at a real time, over this batch as it stood.

    A sign-off covers the report edition current when it was made; after parts were re-inspected
    (:mod:`.editions`) it is checked against the batch as the trail had it then, and a warning says
    that a newer edition exists.
    """
    if "signatures" not in ctx.usable:
        return
    for batch in ctx.batches():
        bid = batch.batch_id
        editions = len(edition_events(ctx.events, bid))
        for s in ctx.archive.signoffs(bid):
            who = f"sign-off #{s.signoff_no} of batch {bid!r} by {s.signer_name} ({s.meaning}, {s.signed_at_utc})"
            act = _act_event(ctx, EventKind.SIGNED, bid, "signoff_no", s.signoff_no)
            public = _person_key(ctx, who, s.key_fingerprint, s.signer_name, act.seq if act else None)
            shown = ("signer_name", "key_fingerprint", "meaning", "signed_at_utc", "comment", "batch_id", "signoff_no")
            record = _check_record(ctx, who, s, public, shown)
            if record is None:
                continue
            signed = edition_at(ctx.events, bid, act.seq) if act else editions
            if act is not None and 0 < signed < editions:
                ctx.warn(
                    f"{who}: it signed report edition {signed}; the batch has a newer edition {editions} "
                    "(parts re-inspected since), which this sign-off does not cover"
                )
                _check_signed_content(ctx, who, record, s, act, _state_then(ctx, bid, act.seq))
            else:
                _check_signed_content(ctx, who, record, s, act, None)
            _check_covered_dispositions(ctx, who, bid, record)


def _state_then(ctx: Context, batch_id: str, seq: int) -> BatchState:
    """The batch as the trail had it before event ``seq``, its regions in the order the index sorts them."""
    rows = ctx.archive.index.select(
        "regions", {"batch_id": batch_id}, order_by=("part_key", "region_name"), columns=("part_key", "region_name")
    )
    return batch_state_at(ctx.events, batch_id, seq, [(r["part_key"], r["region_name"]) for r in rows])


def _check_signed_content(ctx: Context, who: str, record: dict, s, act, then: BatchState | None) -> None:
    """The report, batch content and results a sign-off names, against the batch now (or ``then``, as it was)."""
    bid = s.batch_id
    batch = then.batch if then is not None else chain.encode_row("batches", ctx.archive.batch(bid).__dict__)
    recorded_at = act.recorded_at if act else None
    problem = time_problem(s.signed_at_utc, not_before=(batch or {}).get("finished_at"), not_after=recorded_at)
    if problem:
        ctx.fail(f"{who}: signed_at_utc {problem}")
    if record.get("report_sha256") != (batch or {}).get("report_sha256"):
        ctx.fail(f"{who}: the batch report in the index is not the one that was signed")
    if "parts" not in ctx.usable or "regions" not in ctx.usable:
        return
    content = then.content_sha256 if then is not None else ctx.archive.batch_content_sha256(bid)
    if record.get("batch_content_sha256") != content:
        ctx.fail(f"{who}: the batch's index content (batch, parts, regions) is not what was signed")
    results = then.results_sha256 if then is not None else ctx.archive.results_sha256(bid)
    signed = record.get("results_sha256") or {}
    if signed != results:
        changed = sorted(k for k in set(results) | set(signed) if results.get(k) != signed.get(k))
        ctx.fail(f"{who}: the results in the index are not the ones that were signed (parts: {', '.join(changed[:5])})")


def _check_covered_dispositions(ctx: Context, who: str, batch_id: str, record: dict) -> None:
    """The dispositions a sign-off covers (and its signed edition prints) are the archive's records, unchanged."""
    listed = record.get("dispositions_sha256")
    if listed is None or "dispositions" not in ctx.usable:
        return  # a sign-off record of format /2 names none
    held = {d.record_sha256: d for d in ctx.archive.dispositions(batch_id)}
    for k, sha in enumerate(listed if isinstance(listed, list) else [], start=1):
        if sha not in held:
            ctx.fail(
                f"{who}: disposition {k} of the {len(listed)} it covers (record SHA-256 {str(sha)[:16]}…) is not in "
                "the archive as signed: its record was changed or removed"
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
                if part is not None and _made_before_reinspection(ctx, d, act, record):
                    ctx.warn(f"{who}: it was made for the part's earlier result; the part was re-inspected since")
                else:
                    ctx.fail(f"{who}: the part's result in the index is not the one the disposition was made for")
            problem = time_problem(d.decided_at_utc, not_before=None, not_after=act.recorded_at if act else None)
            if problem:
                ctx.fail(f"{who}: decided_at_utc {problem}")


def _made_before_reinspection(ctx: Context, d, act, record: dict) -> bool:
    """Whether a disposition names the part's result as the trail had it at the act, re-inspected after it."""
    if act is None:
        return False
    then = batch_state_at(ctx.events, d.batch_id, act.seq).results_sha256.get(d.part_key)
    later = any(
        e.kind == EventKind.PART_REINSPECTED.value and e.batch_id == d.batch_id and e.part_key == d.part_key
        for e in ctx.events
        if e.seq > act.seq
    )
    return later and then == record.get("result_sha256")
