"""The audit chain's canonical forms: row encoding, event hashes, replay."""

from __future__ import annotations

import hashlib
import json

import pytest

from surfinspect.archive import chain
from surfinspect.archive.schema import EventRow


def _region(**changes):
    row = {"batch_id": "B1", "part_key": "a.png", "region_name": "face", "verdict": "pass"}
    row |= {"lay_deg": 90.4, "deviation_deg": 0.4, "coherence": 0.61, "defect_area_fraction": 0}
    return row | changes


def test_real_columns_are_written_by_the_column_type_and_read_back_exactly():
    encoded = chain.encode_row("regions", _region())
    assert encoded["defect_area_fraction"] == "0.0"  # an integer 0 in a REAL column reads back 0.0 from SQLite
    assert encoded["lay_deg"] == "90.4" and float(encoded["lay_deg"]) == 90.4  # shortest round-trip decimal
    assert chain.encode_row("regions", _region(lay_deg=0.1 + 0.2))["lay_deg"] == "0.30000000000000004"
    assert chain.encode_row("regions", _region(lay_deg=None))["lay_deg"] is None
    with pytest.raises(KeyError, match="coherence"):
        chain.encode_row("regions", {k: v for k, v in _region().items() if k != "coherence"})


def test_event_hash_is_sha256_of_the_canonical_body():
    details = chain.canonical_bytes({"rows": []}).decode()
    body = b'{"batch_id":null,"details":{"rows":[]},"kind":"verified","part_key":null,"prev_sha256":"' + b"0" * 64
    body += b'","recorded_at":"2031-04-02T10:30:00.000Z","seq":1}'  # written out by hand, keys sorted
    expected = hashlib.sha256(body).hexdigest()  # reference: hashlib over the bytes above
    assert chain.event_sha256(1, "2031-04-02T10:30:00.000Z", "verified", None, None, details, "0" * 64) == expected


def test_replay_keeps_the_latest_record_of_each_row_and_names_unreadable_ones():
    first = {"rows": [chain.row_entry("regions", _region(verdict="fail"))]}
    second = {"rows": [chain.row_entry("regions", _region())], "x": 1}
    broken = {"rows": [{"table": "nope", "row": {}}, {"table": "regions", "row": {"batch_id": "B1"}}]}
    events = [
        EventRow(n, "t", "k", None, None, json.dumps(d), "", "") for n, d in enumerate((first, second, broken), 1)
    ]
    state, problems = chain.replay_rows(events)
    (replayed,) = state["regions"].values()
    assert replayed.seq == 2 and replayed.row["verdict"] == "pass"
    assert problems[0] == "audit event 3 records a row that cannot be read"
    assert problems[1].startswith("audit event 3 records a regions row without column(s) part_key, region_name")
