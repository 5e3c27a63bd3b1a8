"""Rebuild ``format-1``: an archive of the first format (``surfinspect.archive/1``), deterministically.

The first release's archive writer is gone from the code; this script writes what it wrote, by hand
and from fixed values: the index tables of that format (the SQL below is that format's, frozen), a
batch of two parts (one accepted, one rejected) with small stand-in files, its report, and one
sign-off meaning "approved" signed with an Ed25519 key made from a fixed seed. Every stored path is
an invented relative one (``line-2/in/...``): nothing of the machine that runs it goes in. Running it
twice gives the same bytes (Ed25519 signatures are deterministic, RFC 8032).

Run from the checkout root::

    python tests/archive/data/make_format_1.py
"""

from __future__ import annotations

import hashlib
import json
import shutil
import sqlite3
import struct
import zlib
from pathlib import Path

from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
from cryptography.hazmat.primitives.serialization import Encoding, PublicFormat

HERE = Path(__file__).resolve().parent / "format-1"
GENESIS = "0" * 64
BATCH = "LW220-0101"
SEED = hashlib.sha256(b"surfinspect format-1 fixture signer").digest()  # a fixed, invented key

SCHEMA = """
CREATE TABLE meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE batches (
    batch_id TEXT PRIMARY KEY, recipe_name TEXT NOT NULL, recipe_revision INTEGER NOT NULL,
    recipe_sha256 TEXT NOT NULL, operator TEXT, station TEXT, part_count INTEGER NOT NULL,
    image_set_sha256 TEXT NOT NULL, started_at TEXT NOT NULL, finished_at TEXT, report_sha256 TEXT,
    regions_csv_sha256 TEXT, report_generated_at TEXT);
CREATE TABLE parts (
    batch_id TEXT NOT NULL REFERENCES batches(batch_id), part_key TEXT NOT NULL, position INTEGER NOT NULL,
    image_sha256 TEXT, result_sha256 TEXT, overlay_sha256 TEXT, verdict TEXT, error TEXT, inspected_at TEXT,
    PRIMARY KEY (batch_id, part_key));
CREATE TABLE regions (
    batch_id TEXT NOT NULL, part_key TEXT NOT NULL, region_name TEXT NOT NULL, verdict TEXT NOT NULL,
    lay_deg REAL, deviation_deg REAL, coherence REAL, defect_area_fraction REAL,
    PRIMARY KEY (batch_id, part_key, region_name));
CREATE TABLE files (sha256 TEXT PRIMARY KEY, size_bytes INTEGER NOT NULL, media_type TEXT NOT NULL, stored_at TEXT NOT NULL);
CREATE TABLE signatures (
    batch_id TEXT NOT NULL, signoff_no INTEGER NOT NULL, signer_name TEXT NOT NULL, key_fingerprint TEXT NOT NULL,
    public_key_hex TEXT NOT NULL, meaning TEXT NOT NULL, signed_at_utc TEXT NOT NULL, comment TEXT NOT NULL,
    record_json TEXT NOT NULL, record_sha256 TEXT NOT NULL UNIQUE, signature_hex TEXT NOT NULL,
    signed_report_sha256 TEXT NOT NULL, PRIMARY KEY (batch_id, signoff_no));
CREATE TABLE events (
    seq INTEGER PRIMARY KEY, recorded_at TEXT NOT NULL, kind TEXT NOT NULL, batch_id TEXT, part_key TEXT,
    details TEXT NOT NULL, prev_sha256 TEXT NOT NULL, sha256 TEXT NOT NULL);
"""


def canonical(record) -> bytes:
    return json.dumps(record, sort_keys=True, separators=(",", ":"), ensure_ascii=False).encode("utf-8")


def sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def png(stripe_px: int) -> bytes:
    """A 32 x 32 8-bit grey PNG of vertical stripes (ISO/IEC 15948: signature, IHDR, one IDAT, IEND)."""
    rows = b"".join(b"\x00" + bytes(200 if (x // stripe_px) % 2 else 40 for x in range(32)) for _ in range(32))

    def chunk(kind: bytes, body: bytes) -> bytes:
        return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", zlib.crc32(kind + body))

    header = struct.pack(">IIBBBBB", 32, 32, 8, 0, 0, 0, 0)
    return b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", header) + chunk(b"IDAT", zlib.compress(rows, 9)) + chunk(b"IEND", b"")


def result(key: str, image_sha: str, recipe_sha: str, lay: float, verdict: str, reasons: list[str]) -> bytes:
    region = {
        "cells": None,
        "coherence": 0.61,
        "defect_area_fraction": 0.0,
        "deviation_deg": round(lay - 90.0, 1),
        "exclude_px": [],
        "expected_lay_deg": 90.0,
        "extra": {},
        "histogram": {"bin_edges_deg": [0.0, 90.0, 180.0], "weights": [0.25, 0.75]},
        "lay_deg": lay,
        "lay_pattern": "directional",
        "name": "face",
        "outline_px": [],
        "patches": [],
        "reasons": reasons,
        "tolerance_deg": 3.0,
        "uncertainty_deg": 0.2,
        "verdict": "pass" if verdict == "accept" else "fail",
    }
    doc = {
        "datum": None,
        "engine_version": "0.1.0",
        "image": {"bit_depth": 8, "height": 32, "path": f"line-2/in/{key}", "sha256": image_sha, "width": 32},
        "inspected_at": "2024-05-06T07:08:09Z",
        "name": key.removesuffix(".png"),
        "reasons": [],
        "recipe": {"name": "lw-220-wall-panel", "revision": 3, "sha256": recipe_sha},
        "regions": [region],
        "schema": "surfinspect.part-result/1",
        "verdict": verdict,
    }
    return (json.dumps(doc, indent=2, sort_keys=True) + "\n").encode("utf-8")


class Writer:
    def __init__(self, root: Path):
        self.root, self.db = root, sqlite3.connect(root / "index.sqlite")
        self.db.executescript(SCHEMA)
        self.seq, self.head = 0, GENESIS

    def put(self, data: bytes, media_type: str, at: str) -> str:
        digest = sha(data)
        path = self.root / "objects" / digest[:2] / digest[2:]
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(data)
        self.db.execute("INSERT OR IGNORE INTO files VALUES (?, ?, ?, ?)", (digest, len(data), media_type, at))
        return digest

    def event(self, at: str, kind: str, part_key: str | None, details: dict) -> str:
        self.seq += 1
        text = canonical(details).decode("utf-8")
        body = {"seq": self.seq, "recorded_at": at, "kind": kind, "batch_id": BATCH, "part_key": part_key}
        digest = sha(canonical({**body, "details": details, "prev_sha256": self.head}))
        self.db.execute(
            "INSERT INTO events VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
            (self.seq, at, kind, BATCH, part_key, text, self.head, digest),
        )
        self.head = digest
        return digest


def build(root: Path) -> None:
    if root.exists():
        shutil.rmtree(root)
    (root / "objects").mkdir(parents=True)
    w = Writer(root)
    t0 = "2026-12-01T20:52:17.733Z"
    recipe_sha = w.put(b"recipe: lw-220-wall-panel\nrevision: 3\nregions: []\n", "application/yaml", t0)
    parts = [("LW-220-001.png", png(3), 90.4, "accept", [], "2026-12-01T20:52:17.752Z")]
    parts += [("LW-220-002.png", png(4), 97.9, "reject", ["made by hand for the test"], "2026-12-01T20:52:17.765Z")]
    images = [(key, sha(image)) for key, image, *_ in parts]
    listing = [[key, digest] for key, digest in sorted(images)]
    image_set = sha(canonical({"parts": listing}))
    batch = {
        "image_set_sha256": image_set,
        "operator": "K. LINDQVIST",
        "part_count": 2,
        "recipe_name": "lw-220-wall-panel",
        "recipe_revision": 3,
        "recipe_sha256": recipe_sha,
        "station": "line-2",
    }
    w.db.execute(
        "INSERT INTO batches VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, NULL, NULL, NULL, NULL)",
        (BATCH, "lw-220-wall-panel", 3, recipe_sha, "K. LINDQVIST", "line-2", 2, image_set, t0),
    )
    w.event(t0, "batch started", None, batch)
    results = {}
    for position, (key, image, lay, verdict, reasons, at) in enumerate(parts):
        image_sha = w.put(image, "image", at)
        result_sha = w.put(result(key, image_sha, recipe_sha, lay, verdict, reasons), "application/json", at)
        overlay_sha = w.put(f"png {key}".encode(), "image/png", at)
        results[key] = result_sha
        w.db.execute(
            "INSERT INTO parts VALUES (?, ?, ?, ?, ?, ?, ?, NULL, ?)",
            (BATCH, key, position, image_sha, result_sha, overlay_sha, verdict, at),
        )
        region = ("pass" if verdict == "accept" else "fail", lay, round(lay - 90.0, 1), 0.61, 0.0)
        w.db.execute("INSERT INTO regions VALUES (?, ?, 'face', ?, ?, ?, ?, ?)", (BATCH, key, *region))
        w.event(
            at,
            "part inspected",
            key,
            {"image_sha256": image_sha, "overlay_sha256": overlay_sha, "result_sha256": result_sha, "verdict": verdict},
        )
    t_report, generated = "2026-12-01T20:52:17.774Z", "2024-05-06T08:00:00Z"
    report_sha = w.put(f"%PDF report {BATCH}".encode(), "application/pdf", t_report)
    csv_sha = w.put(b"csv\n", "text/csv", t_report)
    w.db.execute(
        "UPDATE batches SET finished_at = ?, report_sha256 = ?, regions_csv_sha256 = ?, report_generated_at = ?",
        (t_report, report_sha, csv_sha, generated),
    )
    counts = {"accept": 1, "error": 0, "pending": 0, "reject": 1, "review": 0}
    details = {"regions_csv_sha256": csv_sha, "report_generated_at": generated, "report_sha256": report_sha}
    w.event(t_report, "report written", None, {**details, "verdict_counts": counts})
    sign(w, report_sha, results)
    w.db.execute("INSERT INTO meta VALUES ('format', 'surfinspect.archive/1'), ('created_at', ?)", (t0,))
    w.db.execute("INSERT INTO meta VALUES ('chain_length', ?), ('chain_head_sha256', ?)", (str(w.seq), w.head))
    w.db.commit()
    w.db.execute("VACUUM")
    w.db.close()


def sign(w: Writer, report_sha: str, results: dict[str, str]) -> None:
    key = Ed25519PrivateKey.from_private_bytes(SEED)
    public = key.public_key().public_bytes(Encoding.Raw, PublicFormat.Raw)
    at, name = "2026-12-01T20:52:17.786Z", "R. OSTERMANN"
    record = {
        "audit_events": w.seq,
        "audit_head_sha256": w.head,
        "batch_id": BATCH,
        "comment": "first format",
        "format": "surfinspect.signoff-record/1",
        "key_fingerprint": sha(public),
        "meaning": "approved",
        "report_sha256": report_sha,
        "results_sha256": results,
        "signed_at_utc": at,
        "signer_name": name,
    }
    record_bytes = canonical(record)
    signature = key.sign(record_bytes)
    t_signed = "2026-12-01T20:52:17.793Z"
    edition_sha = w.put(b"%PDF signed approved", "application/pdf", t_signed)
    row = (BATCH, 1, name, sha(public), public.hex(), "approved", at, "first format")
    row += (record_bytes.decode("utf-8"), sha(record_bytes), signature.hex(), edition_sha)
    w.db.execute("INSERT INTO signatures VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)", row)
    details = {"meaning": "approved", "record_sha256": sha(record_bytes), "signature_sha256": sha(signature)}
    details |= {"signed_report_sha256": edition_sha, "signer_name": name, "signoff_no": 1, "signoffs_in_batch": 1}
    w.event(t_signed, "signed", None, details)


if __name__ == "__main__":
    build(HERE)
    print(f"wrote {HERE}")
