"""Verifying archives of the first format (``surfinspect.archive/1``), read-only, by that format's own rules.

Archives made by the first release stay checkable for as long as they are
kept: the hash chain, every stored file, the index against what the audit
events recorded, each result against the index, and each sign-off under the
public key the archive itself holds. That format had no signer register, did
not record every index row in its chain and signed no chain heads; ``verify``
says so in a warning on every such archive. Nothing is ever written into it
(the index is opened read-only). Its sign-off meanings were approved,
rejected and reviewed.

The SQL of that frozen format lives here, with the only code that reads it.
"""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path
from typing import Any

from . import chain, signing
from .checks import Context, check_event, details_of
from .objects import ObjectStore
from .records import ERROR_SCHEMA, OLD_ERROR_VERDICT, image_set_sha256, index_rows_of
from .schema import EventRow

__all__ = ["FORMAT_1", "format_of", "verify_format_1"]

FORMAT_1 = "surfinspect.archive/1"
INDEX_NAME = "index.sqlite"
_WARNING = (
    "archive of the first format (surfinspect.archive/1): checked by that format's rules; it has no signer "
    "register (each sign-off is checked under the key the archive itself holds), no signed chain heads, and its "
    "chain covers only the fields its events name"
)


def _connect(root: Path) -> sqlite3.Connection:
    return sqlite3.connect(f"file:{root / INDEX_NAME}?mode=ro", uri=True)


def format_of(root: str | Path) -> str | None:
    """The format an index states in its meta table, or None when it states none (or cannot be read)."""
    index = Path(root) / INDEX_NAME
    if not index.is_file() or index.stat().st_size == 0:
        return None
    try:
        db = _connect(Path(root))
        try:
            row = db.execute("SELECT value FROM meta WHERE key = 'format'").fetchone()
        finally:
            db.close()
    except (sqlite3.DatabaseError, UnicodeDecodeError):
        return None
    return row[0] if row else None


class _Reader:
    def __init__(self, root: Path):
        self.root = root
        self.db = _connect(root)
        self.objects = ObjectStore(root)
        self.states: dict[str, str | None] = {}

    def rows(self, sql: str, params: tuple = ()) -> list[dict[str, Any]]:
        cur = self.db.execute(sql, params)
        names = [d[0] for d in cur.description]
        return [dict(zip(names, r)) for r in cur.fetchall()]

    def state(self, sha: str) -> str | None:
        if sha not in self.states:
            self.states[sha] = self.objects.state(sha)
        return self.states[sha]

    def json_object(self, sha: str) -> dict | None:
        if self.state(sha) is not None:
            return None
        try:
            value = json.loads(self.objects.read(sha))
        except (OSError, ValueError):
            return None
        return value if isinstance(value, dict) else None


def _check_chain(ctx: Context, reader: _Reader) -> list[EventRow]:
    events = [EventRow.from_mapping(r) for r in reader.rows("SELECT * FROM events ORDER BY seq")]
    expected_seq, prev_sha, prev_seq = 1, chain.GENESIS_SHA256, 0
    for e in events:
        check_event(ctx, e, expected_seq, prev_sha, prev_seq)
        expected_seq, prev_sha, prev_seq = e.seq + 1, e.sha256, e.seq
        ctx.event_sha[e.seq] = e.sha256
    meta = {r["key"]: r["value"] for r in reader.rows("SELECT key, value FROM meta")}
    length, last = int(meta.get("chain_length", 0)), events[-1].seq if events else 0
    if last != length:
        ctx.fail(f"audit trail: it ends at event {last} but the index records {length} events")
    elif events and meta.get("chain_head_sha256") != prev_sha:
        ctx.fail("audit trail: the last event's hash does not match the chain head recorded in the index (meta)")
    return events


def _check_files(ctx: Context, reader: _Reader, batch: dict, parts: list[dict], signoffs: list[dict]) -> None:
    bid = batch["batch_id"]
    refs = [(batch["recipe_sha256"], f"recipe of batch {bid!r}")]
    refs += [(batch[c], f"{c.split('_sha')[0]} of batch {bid!r}") for c in ("report_sha256", "regions_csv_sha256")]
    for p in parts:
        for column in ("image_sha256", "result_sha256", "overlay_sha256"):
            if column != "image_sha256" or p["verdict"] is not None:
                refs.append((p[column], f"{column.split('_sha')[0]} of part {p['part_key']!r} in batch {bid!r}"))
    refs += [(s["signed_report_sha256"], f"signed report #{s['signoff_no']} of batch {bid!r}") for s in signoffs]
    catalogued = {r["sha256"] for r in reader.rows("SELECT sha256 FROM files")}
    for sha, what in refs:
        if not sha:
            continue
        if sha not in catalogued:
            ctx.fail(f"stored file {sha[:12]}… ({what}) is missing from the file catalogue")
        state = reader.state(sha)
        if state is not None:
            ctx.fail(f"stored file {reader.objects.path(sha).relative_to(reader.root)} ({what}) {state}")


def _of_kind(events: list[EventRow], batch_id: str, kind: str) -> list[tuple[EventRow, dict]]:
    return [(e, details_of(e)) for e in events if e.batch_id == batch_id and e.kind == kind]


def _check_trail(ctx: Context, events: list[EventRow], batch: dict, parts: list[dict], signoffs: list[dict]) -> None:
    bid = batch["batch_id"]
    started = _of_kind(events, bid, "batch started")
    planned = image_set_sha256([(p["part_key"], p["image_sha256"]) for p in parts])
    if len(started) != 1 or started[0][1].get("image_set_sha256") != planned:
        ctx.fail(f"batch {bid!r}: the parts in the index differ from those recorded when the batch started")
    elif started[0][1].get("recipe_sha256") != batch["recipe_sha256"] or planned != batch["image_set_sha256"]:
        ctx.fail(f"batch {bid!r}: the batch row no longer matches what was recorded when the batch started")
    recorded = {e.part_key: d for e, d in _of_kind(events, bid, "part inspected")}
    for p in parts:
        d = recorded.get(p["part_key"])
        if p["verdict"] is not None and (
            d is None or d.get("result_sha256") != p["result_sha256"] or d.get("verdict") != p["verdict"]
        ):
            ctx.fail(
                f"part {p['part_key']!r} in batch {bid!r}: its result or verdict is not the one the audit trail recorded"
            )
    written = _of_kind(events, bid, "report written")
    if batch["finished_at"] is not None and (
        not written or written[-1][1].get("report_sha256") != batch["report_sha256"]
    ):
        ctx.fail(f"batch {bid!r}: the report in the index is not the one the audit trail recorded")
    signed = {d.get("signoff_no"): d for _, d in _of_kind(events, bid, "signed")}
    rows = {s["signoff_no"]: s for s in signoffs}
    for no in sorted(set(signed) | set(rows), key=str):
        if no not in rows:
            ctx.fail(f"sign-off #{no} of batch {bid!r}, recorded in the audit trail, is missing from the index")
        elif no not in signed or signed[no].get("record_sha256") != rows[no]["record_sha256"]:
            ctx.fail(f"sign-off #{no} of batch {bid!r} in the index differs from the one the audit trail recorded")


def _check_results(ctx: Context, reader: _Reader, batch: dict, parts: list[dict]) -> None:
    bid = batch["batch_id"]
    for p in parts:
        result = reader.json_object(p["result_sha256"]) if p["result_sha256"] else None
        if result is None:
            continue
        where = f"part {p['part_key']!r} in batch {bid!r}"
        if result.get("schema") == ERROR_SCHEMA:
            if p["verdict"] != OLD_ERROR_VERDICT:  # the first format's word
                ctx.fail(
                    f"{where}: the index says verdict {p['verdict']!r}, the stored record says it was not inspected"
                )
            continue
        if (
            result.get("verdict") != p["verdict"]
            or (result.get("recipe") or {}).get("sha256") != batch["recipe_sha256"]
        ):
            ctx.fail(
                f"{where}: the index says verdict {p['verdict']!r}, the stored result says {result.get('verdict')!r}"
            )
        stored = {r["region_name"]: chain.encode_row("regions", {"batch_id": bid, "part_key": p["part_key"], **r})
                  for r in index_rows_of(result)[2]}  # fmt: skip
        indexed = {
            r["region_name"]: chain.encode_row("regions", r)
            for r in reader.rows("SELECT * FROM regions WHERE batch_id = ? AND part_key = ?", (bid, p["part_key"]))
        }
        for name in sorted(set(stored) | set(indexed)):
            if stored.get(name) != indexed.get(name):
                ctx.fail(f"region {name!r} of {where}: the index differs from the stored (signed) result")


def _check_signoffs(ctx: Context, batch: dict, parts: list[dict], signoffs: list[dict]) -> None:
    results = {p["part_key"]: p["result_sha256"] for p in parts if p["result_sha256"]}
    for s in signoffs:
        who = f"sign-off #{s['signoff_no']} of batch {batch['batch_id']!r} by {s['signer_name']} ({s['meaning']})"
        try:
            record = json.loads(s["record_json"])
            holds = signing.verify_record(bytes.fromhex(s["public_key_hex"]), record, bytes.fromhex(s["signature_hex"]))
        except (ValueError, TypeError, AttributeError):
            ctx.fail(f"{who}: its record or signature cannot be read")
            continue
        if not holds:
            ctx.fail(f"{who}: the signature does not hold over its record (record or signature altered)")
        for column in ("signer_name", "key_fingerprint", "meaning", "signed_at_utc", "comment", "batch_id"):
            if record.get(column) != s[column]:
                ctx.fail(
                    f"{who}: the index shows {column} {s[column]!r}, the signed record says {record.get(column)!r}"
                )
        if record.get("report_sha256") != batch["report_sha256"] or record.get("results_sha256") != results:
            ctx.fail(f"{who}: the report or results in the index are not the ones that were signed")
        if not ctx.event_covers(record.get("audit_events"), record.get("audit_head_sha256")):
            ctx.fail(f"{who}: the trail's head when it was signed is missing or was rewritten")


def verify_format_1(root: str | Path, batch_id: str | None = None) -> tuple[list[str], list[str]]:
    """(problems, warnings) of a first-format archive."""
    root = Path(root)
    ctx = Context(archive=None, batch_id=batch_id)  # type: ignore[arg-type]  # the checks used here need no Archive
    ctx.warn(_WARNING)
    reader = _Reader(root)
    try:
        problems = [r[0] for r in reader.db.execute("PRAGMA integrity_check") if r[0] != "ok"]
        for text in problems[:10]:
            ctx.fail(f"index: the database reports damage: {text}")
        events = _check_chain(ctx, reader)
        batches = reader.rows("SELECT * FROM batches ORDER BY started_at, batch_id")
        for batch in [b for b in batches if batch_id is None or b["batch_id"] == batch_id]:
            bid = batch["batch_id"]
            parts = reader.rows("SELECT * FROM parts WHERE batch_id = ? ORDER BY position", (bid,))
            signoffs = reader.rows("SELECT * FROM signatures WHERE batch_id = ? ORDER BY signoff_no", (bid,))
            _check_files(ctx, reader, batch, parts, signoffs)
            _check_trail(ctx, events, batch, parts, signoffs)
            _check_results(ctx, reader, batch, parts)
            _check_signoffs(ctx, batch, parts, signoffs)
    except (sqlite3.DatabaseError, KeyError, ValueError, TypeError) as exc:  # UnicodeDecodeError is a ValueError
        ctx.fail(f"index: the first-format archive cannot be read through ({type(exc).__name__}: {exc})")
    finally:
        reader.db.close()
    return ctx.problems, ctx.warnings
