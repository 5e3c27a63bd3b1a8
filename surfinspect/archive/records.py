"""Plain records of the archive: times, batch ids, the error record of an uninspected part, index rows of a result."""

from __future__ import annotations

import json
from datetime import datetime, timedelta, timezone
from typing import Any, Mapping, Sequence

from ..errors import InputError
from ..results import NOT_INSPECTED, PartVerdict
from ..results import SCHEMA as RESULT_SCHEMA
from . import chain
from .schema import PartRow

__all__ = [
    "ERROR_SCHEMA",
    "ERROR_VERDICT",
    "OLD_ERROR_VERDICT",
    "utc_now",
    "image_set_sha256",
    "error_record_json",
    "check_batch_id",
    "verdict_counts",
    "index_rows_of",
    "CLOCK_ALLOWANCE_S",
    "parse_utc",
    "time_problem",
]

#: Schema of the record stored for a part whose image could not be inspected.
ERROR_SCHEMA = "surfinspect.part-error/1"
#: The index's verdict of such a part: the word every output uses for it (``results.NOT_INSPECTED``).
ERROR_VERDICT = NOT_INSPECTED
#: The word archives written before it held for the same thing (still read as ``ERROR_VERDICT``).
OLD_ERROR_VERDICT = "error"


def utc_now() -> str:
    """The current UTC time as ISO 8601 with milliseconds and a ``Z``."""
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def image_set_sha256(parts: Sequence[tuple[str, str | None]]) -> str:
    """One hash over a batch's planned parts: (part key, image SHA-256 or None), in key order."""
    listing = [[key, sha or ""] for key, sha in sorted(parts)]
    return chain.canonical_sha256({"parts": listing})


def error_record_json(part_key: str, image_sha256: str | None, error: str, *, at_utc: str | None = None) -> bytes:
    """The stored record of a part that could not be inspected (schema ``surfinspect.part-error/1``)."""
    doc = {
        "schema": ERROR_SCHEMA,
        "name": part_key,
        "image": {"sha256": image_sha256},
        "verdict": ERROR_VERDICT,
        "error": error,
        "recorded_at": at_utc or utc_now(),
    }
    return (json.dumps(doc, indent=2, sort_keys=True, ensure_ascii=False) + "\n").encode("utf-8")


def check_batch_id(batch_id: str) -> str:
    """A batch id is 1 to 64 letters, digits, '.', '_' or '-', starting with a letter or digit."""
    ok = 0 < len(batch_id) <= 64 and batch_id[0].isalnum() and all(c.isalnum() or c in "._-" for c in batch_id)
    if not ok or not batch_id.isascii():
        raise InputError(
            f"--batch-id: {batch_id!r} is not a valid batch id (allowed 1-64 ASCII letters, digits, '.', '_', '-')"
        )
    return batch_id


def verdict_counts(parts: Sequence[PartRow]) -> dict[str, int]:
    """Number of parts per verdict (accept, reject, review, not-inspected, pending)."""
    counts = {v.value: 0 for v in PartVerdict} | {ERROR_VERDICT: 0, "pending": 0}
    for p in parts:
        verdict = ERROR_VERDICT if p.verdict == OLD_ERROR_VERDICT else p.verdict
        counts[verdict or "pending"] += 1
    return counts


def index_rows_of(result: Mapping[str, Any]) -> tuple[str, str | None, list[dict[str, Any]]]:
    """Part verdict, error text and region rows (without batch and part) as the index holds them."""
    schema = result.get("schema")
    if schema == ERROR_SCHEMA:
        return ERROR_VERDICT, str(result.get("error", "")), []
    if schema != RESULT_SCHEMA:
        raise ValueError(
            f"schema: unknown result schema (got {schema!r}, allowed {RESULT_SCHEMA!r} or {ERROR_SCHEMA!r})"
        )
    regions = [
        {
            "region_name": r["name"],
            "verdict": r["verdict"],
            "lay_deg": r.get("lay_deg"),
            "deviation_deg": r.get("deviation_deg"),
            "coherence": r.get("coherence"),
            "defect_area_fraction": r.get("defect_area_fraction"),
        }
        for r in result["regions"]
    ]
    return result["verdict"], None, regions


#: How far a recorded time may lie ahead of the clock that checks it (clocks of two machines differ).
CLOCK_ALLOWANCE_S = 300.0


def parse_utc(text: object) -> datetime | None:
    """A time written as ISO 8601 UTC with a ``Z`` (``2031-04-02T10:30:00.123Z``); None when it is not one."""
    if not isinstance(text, str) or not text.endswith("Z") or len(text) < 20 or text[10] != "T":
        return None
    try:
        value = datetime.fromisoformat(text[:-1] + "+00:00")
    except ValueError:
        return None
    return value if value.utcoffset() == timedelta(0) else None


def time_problem(at_utc: object, *, not_before: str | None, not_after: str | None = None) -> str | None:
    """What is wrong with a signed time, in words (None when it holds).

    It must be a real UTC time, not before ``not_before`` (the batch's close)
    and not later than ``not_after`` (or now) by more than the clock allowance.
    """
    when = parse_utc(at_utc)
    if when is None:
        return f"{at_utc!r} is not a UTC time (allowed: ISO 8601 ending in Z)"
    earliest = parse_utc(not_before) if not_before else None
    if earliest is not None and when < earliest:
        return f"{at_utc} is before {not_before}, when the batch was finished"
    latest = parse_utc(not_after) if not_after else datetime.now(timezone.utc)
    if latest is not None and when > latest + timedelta(seconds=CLOCK_ALLOWANCE_S):
        return f"{at_utc} lies in the future (more than {CLOCK_ALLOWANCE_S:.0f} s after {not_after or 'now'})"
    return None
