"""Writing a batch into the archive: planning it (or finding the one to resume under the same id),
recording each inspected part exactly once, and closing it with its report and region CSV.

Every write is one index transaction with its audit event, as for all of :mod:`.store`.
"""

from __future__ import annotations

import json
import os
import socket
from pathlib import Path
from typing import Sequence

from ..errors import InputError
from . import signing
from .chain import EventKind
from .records import check_batch_id, image_set_sha256, index_rows_of, utc_now, verdict_counts
from .schema import BatchRow, PartRow

__all__ = ["BatchPlan", "BatchWritesMixin"]


class BatchPlan:
    """What :meth:`Archive.start_batch` found: a new batch, or one to resume."""

    def __init__(self, batch: BatchRow, resumed: bool, pending: tuple[str, ...]):
        self.batch, self.resumed, self.pending = batch, resumed, pending  # pending: part keys, in batch order


class BatchWritesMixin:
    """The archive's writes of a batch (mixed into :class:`.store.Archive`)."""

    def start_batch(
        self,
        batch_id: str,
        *,
        recipe_name: str,
        recipe_revision: int,
        recipe_path: str | os.PathLike,
        recipe_sha256: str,
        parts: Sequence[tuple[str, str | None]],
        operator: str | None = None,
        station: str | None = None,
    ) -> BatchPlan:
        """Open a new batch, or find the one to resume under the same id.

        Parameters
        ----------
        parts : sequence of (part_key, image_sha256 or None)
            Every image of the batch in batch order; None for a file whose
            bytes could not be read.

        Raises
        ------
        InputError
            When ``batch_id`` exists with another image set or recipe (a batch
            id names one set of parts for good).
        """
        check_batch_id(batch_id)
        if len({key for key, _ in parts}) != len(parts):
            raise ValueError("part keys of a batch must be unique")
        recipe_path = Path(recipe_path)
        recipe_object = self.objects.put_file(recipe_path, recipe_sha256)
        set_sha = image_set_sha256(parts)
        with self._write():
            existing = self.find_batch(batch_id)
            if existing is not None:
                self._refuse_different_batch(existing, recipe_sha256, parts, set_sha)
                pending = tuple(p.part_key for p in self.parts(batch_id) if not p.is_done)
                if pending or not existing.is_finished:
                    self._append_event(EventKind.BATCH_RESUMED, batch_id, None, {"pending_parts": len(pending)})
                return BatchPlan(existing, True, pending)
            rows = self._catalogue(recipe_object, recipe_path.stat().st_size, "application/yaml")
            batch = {
                "batch_id": batch_id,
                "recipe_name": recipe_name,
                "recipe_revision": recipe_revision,
                "recipe_sha256": recipe_sha256,
                "operator": operator,
                "station": station or socket.gethostname(),
                "part_count": len(parts),
                "image_set_sha256": set_sha,
                "started_at": utc_now(),
                "finished_at": None,
                "report_sha256": None,
                "regions_csv_sha256": None,
                "report_generated_at": None,
            }
            self.index.insert("batches", batch)
            rows.append(("batches", batch))
            for i, (key, sha) in enumerate(parts):
                part = {"batch_id": batch_id, "part_key": key, "position": i, "image_sha256": sha}
                part |= {
                    "result_sha256": None,
                    "overlay_sha256": None,
                    "verdict": None,
                    "error": None,
                    "inspected_at": None,
                }
                self.index.insert("parts", part)
                rows.append(("parts", part))
            self._append_event(EventKind.BATCH_STARTED, batch_id, None, {}, rows)
            return BatchPlan(self.batch(batch_id), False, tuple(key for key, _ in parts))

    def _refuse_different_batch(
        self, existing: BatchRow, recipe_sha256: str, parts: Sequence[tuple[str, str | None]], set_sha: str
    ) -> None:
        state = "finished" if existing.is_finished else "unfinished"
        if existing.recipe_sha256 != recipe_sha256:
            raise InputError(
                f"--batch-id: {state} batch {existing.batch_id!r} was run with another recipe "
                f"({existing.recipe_name} rev {existing.recipe_revision}, {existing.recipe_sha256[:12]}…); "
                "use a new batch id"
            )
        if existing.image_set_sha256 == set_sha:
            return
        planned = {p.part_key: p.image_sha256 for p in self.parts(existing.batch_id)}
        given = dict(parts)
        added = sorted(set(given) - set(planned))
        removed = sorted(set(planned) - set(given))
        changed = sorted(k for k in set(given) & set(planned) if given[k] != planned[k])
        what = "; ".join(
            f"{label}: {', '.join(keys[:3])}{' …' if len(keys) > 3 else ''}"
            for label, keys in (("new", added), ("missing", removed), ("changed", changed))
            if keys
        )
        raise InputError(
            f"--batch-id: {state} batch {existing.batch_id!r} holds other images ({what}); "
            "a batch id names one set of images: use a new batch id"
        )

    def record_part(
        self,
        batch_id: str,
        part_key: str,
        *,
        result_json: bytes,
        image_path: str | os.PathLike | None,
        overlay_png: bytes | None = None,
    ) -> PartRow | None:
        """Store one inspected part: its image, result (or error record) and overlay.

        ``image_path`` is the part's image file (None only for a file whose
        bytes could not be read when the batch was planned); it is archived
        for errors too, so that an auditor sees what was fed in.

        Returns the part's row, or None (storing nothing in the index) when
        the part was already recorded: a part is recorded exactly once.

        Raises
        ------
        InputError
            When the part is not planned in the batch, or the image's bytes or
            the result's image hash differ from the planned image.
        """
        result = json.loads(result_json)
        planned = self.part(batch_id, part_key)
        if planned.is_done:
            return None
        if result.get("image", {}).get("sha256") != planned.image_sha256:
            raise InputError(f"{part_key}: the result names another image than the one planned for the batch")
        if (image_path is None) != (planned.image_sha256 is None):
            raise ValueError(f"{part_key}: give the image path exactly when the planned image has a hash")
        image_sha = None if image_path is None else self.objects.put_file(Path(image_path), planned.image_sha256)
        result_sha = self.objects.put_bytes(result_json)
        overlay_sha = self.objects.put_bytes(overlay_png) if overlay_png is not None else None
        verdict, error, region_rows = index_rows_of(result)
        with self._write():
            if self.part(batch_id, part_key).is_done:  # another process got here first
                return None
            rows = []
            if image_sha is not None:
                rows += self._catalogue(image_sha, Path(image_path).stat().st_size, "image")
            rows += self._catalogue(result_sha, len(result_json), "application/json")
            if overlay_sha is not None:
                rows += self._catalogue(overlay_sha, len(overlay_png), "image/png")
            values = {
                "result_sha256": result_sha,
                "overlay_sha256": overlay_sha,
                "verdict": verdict,
                "error": error,
                "inspected_at": utc_now(),
            }
            rows += self._update_part(planned, values, region_rows)
            self._append_event(EventKind.PART_INSPECTED, batch_id, part_key, {}, rows)
        return self.part(batch_id, part_key)

    def finish_batch(
        self,
        batch_id: str,
        *,
        report_pdf: bytes,
        regions_csv: bytes,
        report_generated_at: str,
        station_key: signing.SigningKey | None = None,
    ) -> BatchRow:
        """Store the batch report and region CSV and mark the batch finished.

        With ``station_key`` (an enrolled key) the chain head reached by the
        close is signed in the same transaction; without it the head stays
        unsigned (``verify`` warns about records after the last signed head).

        Raises
        ------
        InputError
            When parts are still pending, the batch is already finished, or
            the station key is not enrolled.
        """
        batch = self.batch(batch_id)
        if batch.is_finished:
            raise InputError(f"batch {batch_id!r} is already finished; its report is never replaced")
        pending = [p.part_key for p in self.parts(batch_id) if not p.is_done]
        if pending:
            raise InputError(f"batch {batch_id!r}: {len(pending)} part(s) not inspected yet (first: {pending[0]})")
        report_sha = self.objects.put_bytes(report_pdf)
        csv_sha = self.objects.put_bytes(regions_csv)
        with self._write():
            rows = self._catalogue(report_sha, len(report_pdf), "application/pdf")
            rows += self._catalogue(csv_sha, len(regions_csv), "text/csv")
            values = {
                "finished_at": utc_now(),
                "report_sha256": report_sha,
                "regions_csv_sha256": csv_sha,
                "report_generated_at": report_generated_at,
            }
            if not self.index.update("batches", {"batch_id": batch_id, "finished_at": None}, values):
                raise InputError(f"batch {batch_id!r} is already finished; its report is never replaced")
            rows.append(("batches", {**batch.__dict__, **values}))
            counts = verdict_counts(self.parts(batch_id))
            self._append_event(EventKind.REPORT_WRITTEN, batch_id, None, {"verdict_counts": counts}, rows)
            if station_key is not None:
                self._sign_head_by_station(station_key)
        return self.batch(batch_id)

    def _update_part(self, before: PartRow, values: dict, region_rows) -> list[tuple[str, dict]]:
        """Give a part's row ``values`` and add its region rows (inside a write); the rows, for its event."""
        key = {"batch_id": before.batch_id, "part_key": before.part_key}
        self.index.update("parts", key, values)
        rows = [("parts", {**before.__dict__, **values})]
        for region in region_rows:
            row = {**key, **region}
            self.index.insert("regions", row)
            rows.append(("regions", row))
        return rows

    def _sign_head_by_station(self, station_key: signing.SigningKey) -> None:
        """Sign the head a batch's report reached with an enrolled station key (inside a write)."""
        self.register().require_signer(station_key.fingerprint, utc_now(), "--station-key", station_allowed=True)
        self._sign_head(station_key)
