"""Plain records of the archive: times, batch ids, the error record of an uninspected part, index rows of a result."""

from __future__ import annotations

import json
from datetime import datetime, timezone
from typing import Any, Mapping, Sequence

from ..errors import InputError
from ..results import SCHEMA as RESULT_SCHEMA
from ..results import PartVerdict
from . import chain
from .schema import PartRow

__all__ = [
    "ERROR_SCHEMA",
    "ERROR_VERDICT",
    "utc_now",
    "image_set_sha256",
    "error_record_json",
    "check_batch_id",
    "verdict_counts",
    "index_rows_of",
]

#: Schema of the record stored for a part whose image could not be inspected.
ERROR_SCHEMA = "surfinspect.part-error/1"
ERROR_VERDICT = "error"


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
    """Number of parts per verdict (accept, reject, review, error, pending)."""
    counts = {v.value: 0 for v in PartVerdict} | {ERROR_VERDICT: 0, "pending": 0}
    for p in parts:
        counts[p.verdict or "pending"] += 1
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
