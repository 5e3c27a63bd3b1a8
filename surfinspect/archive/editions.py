"""Report editions of a batch: re-inspecting its parts that were not inspected, and the batch as each edition had it.

A finished batch has report edition 1. ``batch --retry-errors`` re-inspects the parts recorded as
not inspected (an unreadable image, since fixed on disk) and writes edition 2, 3, …: in one index
transaction, one ``part re-inspected`` event per part (who and where, when, the earlier and the new
image and result hashes and verdicts, with the part's row and its region rows whole) and one
``report written`` event (the edition's number, the report it replaces, the batch row). Nothing is
removed: the earlier report, records and signed editions stay stored and catalogued, and the trail
replays to the batch as any edition had it (:func:`batch_state_at`). A sign-off signs the edition
that was current when it was made and stays valid for it; ``verify`` checks it against that edition
and says that a newer one exists.
"""

from __future__ import annotations

import json
import socket
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Sequence

from ..errors import InputError
from . import chain, signing
from .chain import EventKind
from .records import ERROR_VERDICT, OLD_ERROR_VERDICT, image_set_sha256, index_rows_of, utc_now, verdict_counts
from .schema import BatchRow, EventRow, PartRow, SignoffRow

__all__ = [
    "Retried",
    "EditionsMixin",
    "edition_events",
    "edition_at",
    "batch_state_at",
    "BatchState",
    "is_not_inspected",
    "signed_report_sha256",
    "signs_newest_edition",
]


@dataclass(frozen=True)
class Retried:
    """A part re-inspected: its image file and SHA-256 (read again from disk), result JSON and overlay."""

    part_key: str
    image_path: Path
    image_sha256: str
    result_json: bytes
    overlay_png: bytes


def signed_report_sha256(row: SignoffRow) -> str | None:
    """The report edition a stored sign-off signed (its record's ``report_sha256``; None when unreadable)."""
    try:
        record = json.loads(row.record_json)
    except (ValueError, TypeError):
        return None  # an unreadable record is named by the sign-off check
    return record.get("report_sha256") if isinstance(record, dict) else None


def signs_newest_edition(batch: BatchRow, row: SignoffRow) -> bool:
    """True when the sign-off signed the batch's newest report edition (not one parts were re-inspected since)."""
    return signed_report_sha256(row) == batch.report_sha256


def edition_events(events: Iterable[EventRow], batch_id: str) -> list[EventRow]:
    """The batch's ``report written`` events: event *i* wrote report edition *i*."""
    return [e for e in events if e.kind == EventKind.REPORT_WRITTEN.value and e.batch_id == batch_id]


def edition_at(events: Sequence[EventRow], batch_id: str, seq: int) -> int:
    """The report edition current just before audit event ``seq`` (0: the batch was not finished yet)."""
    return sum(1 for e in edition_events(events, batch_id) if e.seq < seq)


@dataclass(frozen=True)
class BatchState:
    """A batch as the audit trail had it at some event: rows in canonical form (as the events record them)."""

    batch: dict[str, Any] | None
    parts: list[dict[str, Any]]  # in batch order
    regions: list[dict[str, Any]]  # by part and region name

    @property
    def content_sha256(self) -> str:
        """:meth:`.store.Archive.batch_content_sha256` of the batch as it was then."""
        return chain.canonical_sha256({"batch": self.batch, "parts": self.parts, "regions": self.regions})

    @property
    def results_sha256(self) -> dict[str, str]:
        return {p["part_key"]: p["result_sha256"] for p in self.parts if p["result_sha256"]}


def batch_state_at(
    events: Sequence[EventRow], batch_id: str, seq: int, region_order: Sequence[tuple[str, str]] = ()
) -> BatchState:
    """The batch's rows as replaying the trail's events before ``seq`` gives them.

    ``region_order``: (part key, region name) in the order the index sorts the batch's regions now (a
    database's collation may differ from code point order); regions are only ever added, so it orders
    every earlier state too.
    """
    state, _ = chain.replay_rows(e for e in events if e.seq < seq)
    batches = [r.row for r in state["batches"].values() if r.row["batch_id"] == batch_id]
    parts = sorted((r.row for r in state["parts"].values() if r.row["batch_id"] == batch_id), key=_position)
    rank = {key: i for i, key in enumerate(region_order)}
    regions = sorted(
        (r.row for r in state["regions"].values() if r.row["batch_id"] == batch_id),
        key=lambda r: (rank.get((r["part_key"], r["region_name"]), len(rank)), r["part_key"], r["region_name"]),
    )
    return BatchState(batches[0] if batches else None, parts, regions)


def _position(row: dict[str, Any]) -> int:
    return row["position"] if isinstance(row["position"], int) else 0


def is_not_inspected(part: PartRow) -> bool:
    return part.verdict in (ERROR_VERDICT, OLD_ERROR_VERDICT)


class EditionsMixin:
    """The archive's writes of a new report edition (mixed into :class:`.store.Archive`)."""

    def retry_parts(
        self,
        batch_id: str,
        retried: Sequence[Retried],
        *,
        report_pdf: bytes,
        regions_csv: bytes,
        report_generated_at: str,
        operator: str | None = None,
        station_key: signing.SigningKey | None = None,
    ) -> BatchRow:
        """Record re-inspected parts and the report edition that shows them, all in one transaction.

        Each part must be finished and recorded as not inspected, and each
        result must name the image given. With ``station_key`` the new chain
        head is signed in the same transaction.

        Raises
        ------
        InputError
            For an unfinished batch, a part that is not recorded as not
            inspected (also when another run re-inspected it meanwhile), or a
            result naming another image.
        """
        batch = self.batch(batch_id)
        if not batch.is_finished:
            raise InputError(f"--retry-errors: batch {batch_id!r} is not finished; run it without --retry-errors first")
        stored = [self.store_retried(p) for p in retried]
        with self._write():
            edition = len(edition_events(self.batch_events(batch_id), batch_id)) + 1
            station = socket.gethostname()
            for part, hashes in zip(retried, stored):
                self._record_retried(batch_id, part, hashes, edition, station, operator)
            self._write_edition(batch, edition, report_pdf, regions_csv, report_generated_at)
            if station_key is not None:
                self._sign_head_by_station(station_key)
        return self.batch(batch_id)

    def batch_events(self, batch_id: str) -> list[EventRow]:
        rows = self.index.select("events", {"batch_id": batch_id}, order_by=("seq",))
        return [EventRow.from_mapping(r) for r in rows]

    def store_retried(self, part: Retried) -> tuple[str, str, str]:
        """Put the image, result and overlay into the object folder (before the transaction: content-addressed)."""
        if json.loads(part.result_json).get("image", {}).get("sha256") != part.image_sha256:
            raise InputError(f"{part.part_key}: the result names another image than the one read for the retry")
        objects = self.objects
        image = objects.put_file(part.image_path, part.image_sha256)
        return image, objects.put_bytes(part.result_json), objects.put_bytes(part.overlay_png)

    def _record_retried(self, batch_id, part: Retried, hashes, edition: int, station: str, operator) -> None:
        before = self.part(batch_id, part.part_key)
        if not is_not_inspected(before):
            raise InputError(
                f"--retry-errors: part {part.part_key!r} of batch {batch_id!r} is recorded as {before.verdict!r}, "
                "not as not inspected (re-inspected meanwhile?); run the command again"
            )
        image_sha, result_sha, overlay_sha = hashes
        rows = self._catalogue(image_sha, part.image_path.stat().st_size, "image")
        rows += self._catalogue(result_sha, len(part.result_json), "application/json")
        rows += self._catalogue(overlay_sha, len(part.overlay_png), "image/png")
        verdict, error, region_rows = index_rows_of(json.loads(part.result_json))
        values = {
            "image_sha256": image_sha,
            "result_sha256": result_sha,
            "overlay_sha256": overlay_sha,
            "verdict": verdict,
            "error": error,
            "inspected_at": utc_now(),
        }
        rows += self._update_part(before, values, region_rows)
        details = {
            "edition": edition,
            "station": station,
            "operator": operator,
            "before": {k: getattr(before, k) for k in ("image_sha256", "result_sha256", "verdict", "error")},
            "after": {k: values[k] for k in ("image_sha256", "result_sha256", "verdict")},
        }
        self._append_event(EventKind.PART_REINSPECTED, batch_id, part.part_key, details, rows)

    def _write_edition(self, batch: BatchRow, edition: int, report_pdf, regions_csv, generated_at: str) -> None:
        objects = self.objects
        report_sha, csv_sha = objects.put_bytes(report_pdf), objects.put_bytes(regions_csv)
        rows = self._catalogue(report_sha, len(report_pdf), "application/pdf")
        rows += self._catalogue(csv_sha, len(regions_csv), "text/csv")
        parts = self.parts(batch.batch_id)
        values = {
            "image_set_sha256": image_set_sha256([(p.part_key, p.image_sha256) for p in parts]),
            "finished_at": utc_now(),
            "report_sha256": report_sha,
            "regions_csv_sha256": csv_sha,
            "report_generated_at": generated_at,
        }
        self.index.update("batches", {"batch_id": batch.batch_id}, values)
        rows.append(("batches", {**batch.__dict__, **values}))
        details = {
            "edition": edition,
            "replaces_report_sha256": batch.report_sha256,
            "verdict_counts": verdict_counts(parts),
        }
        self._append_event(EventKind.REPORT_WRITTEN, batch.batch_id, None, details, rows)
