"""A batch's outputs from what the archive holds: the region CSV, the batch report, readable copies."""

from __future__ import annotations

import csv
import io
import os
from datetime import datetime
from pathlib import Path
from typing import Mapping

import numpy as np

from .. import results
from ..archive import store as archive_mod
from ..archive.chain import EventKind
from ..errors import InputError
from ..fsutil import write_bytes_atomic
from ..measure.imaging import read_image
from ..results import SignOff
from .runner import output_stems

__all__ = ["CSV_COLUMNS", "regions_csv", "render_batch_report", "report_edition", "export_batch"]

CSV_COLUMNS = (
    "batch_id",
    "part",
    "image_sha256",
    "part_verdict",
    "region",
    "lay_pattern",
    "expected_lay_deg",
    "tolerance_deg",
    "lay_deg",
    "deviation_deg",
    "uncertainty_deg",
    "coherence",
    "deviating_area_fraction",
    "patches",
    "region_verdict",
    "reasons",
)


def _stored_parts(arc: archive_mod.Archive, batch_id: str, replaced: Mapping[str, archive_mod.PartRow] | None = None):
    """(row, stored result dict) for every recorded part, in batch order, read one at a time.

    ``replaced``: rows of re-inspected parts (their objects stored, their rows not yet) that take the place of the
    index's rows, for the edition about to be recorded.
    """
    rows = (replaced.get(p.part_key, p) for p in arc.parts(batch_id)) if replaced else arc.parts(batch_id)
    return ((p, arc.read_result(p)) for p in rows if p.result_sha256)


def report_edition(arc: archive_mod.Archive, batch_id: str, *, new: bool = False) -> int:
    """The batch's current report edition (1 before and at the first close); with ``new``, the next one's number."""
    written = arc.index.select(
        "events", {"batch_id": batch_id, "kind": EventKind.REPORT_WRITTEN.value}, columns=("seq",)
    )
    return max(1, len(written) + (1 if new else 0))


def _csv_value(v) -> str:
    if v is None:
        return ""
    if isinstance(v, list):
        return " ".join(_csv_value(x) for x in v)
    return str(v)


def regions_csv(
    arc: archive_mod.Archive, batch_id: str, *, replaced: Mapping[str, archive_mod.PartRow] | None = None
) -> bytes:
    """One CSV row per region of every part (one row for a part with an error or no region).

    Figures are written as the part's JSON holds them (same rounding);
    lists (expected lays of crossed lay) are space-separated.
    """
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(CSV_COLUMNS)
    for part, result in _stored_parts(arc, batch_id, replaced):
        head = [batch_id, part.part_key, part.image_sha256 or "", part.verdict]
        regions = result.get("regions") or []
        if not regions:
            reason = result.get("error") or "; ".join(result.get("reasons", []))
            writer.writerow(head + [""] * (len(CSV_COLUMNS) - len(head) - 1) + [reason])
        for r in regions:
            writer.writerow(
                head
                + [
                    r["name"],
                    r.get("lay_pattern", ""),
                    _csv_value(r["expected_lay_deg"]),
                    _csv_value(r["tolerance_deg"]),
                    _csv_value(r["lay_deg"]),
                    _csv_value(r["deviation_deg"]),
                    _csv_value(r["uncertainty_deg"]),
                    _csv_value(r["coherence"]),
                    _csv_value(r["deviating_area_fraction"]),
                    len(r["patches"]),
                    r["verdict"],
                    "; ".join(r["reasons"]),
                ]
            )
    return buf.getvalue().encode("utf-8")


def render_batch_report(
    arc: archive_mod.Archive,
    batch_id: str,
    *,
    signoff: SignOff | None = None,
    generated_at: str | None = None,
    replaced: Mapping[str, archive_mod.PartRow] | None = None,
) -> bytes:
    """The batch PDF report from what the archive holds (signed edition when ``signoff`` is given).

    Pictures are read from the archived images (the bytes that were
    inspected), as 8-bit grey to keep the memory of a large batch down. Parts
    whose image could not be read are counted on the summary and listed with their reasons.
    The signed edition is rendered with the unsigned report's own generation
    time, so that the two differ only in the sign-off block. From the second
    report edition on (parts re-inspected, ``replaced`` giving their new rows
    before they are recorded) every page names the edition.

    Raises
    ------
    InputError
        When no part of the batch could be inspected (there is nothing to report).
    """
    from ..report.pdf import NotInspected, render_report

    batch = arc.batch(batch_id)
    stored = list(_stored_parts(arc, batch_id, replaced))
    judged = [(p, r) for p, r in stored if p.verdict != archive_mod.ERROR_VERDICT]
    failed = [
        (p.part_key, p.image_sha256 or "", p.error or "") for p, _ in stored if p.verdict == archive_mod.ERROR_VERDICT
    ]
    if not judged:
        raise InputError(
            f"batch {batch_id!r}: none of its {len(stored)} image(s) could be inspected; no report is made"
        )
    stamp = generated_at or batch.report_generated_at
    edition = report_edition(arc, batch_id, new=bool(replaced))
    return render_report(
        [results.part_from_dict(r) for _, r in judged],
        [_picture_uint8(arc.object_path(p.image_sha256)) for p, _ in judged],
        report_id=batch_id if edition == 1 else f"{batch_id}, edition {edition}",
        operator=batch.operator,
        station=batch.station,
        generated_at=None if stamp is None else datetime.fromisoformat(stamp.replace("Z", "+00:00")),
        signoff=signoff,
        batch_stats=True,
        not_inspected=[NotInspected(key, sha, error) for key, sha, error in failed],
    )


def _picture_uint8(path: Path) -> np.ndarray:
    pixels = read_image(path).pixels
    return np.clip(np.rint(pixels * 255.0), 0, 255).astype(np.uint8)


def export_batch(arc: archive_mod.Archive, batch_id: str, out_dir: str | os.PathLike) -> list[Path]:
    """Copy a batch's files from the archive to ``out_dir`` under readable names.

    Per part ``NAME.json`` (result or error record) and ``NAME.overlay.png``;
    for the batch ``report.pdf``, ``regions.csv`` and ``report.signed-N.pdf``
    for each sign-off. Returns the paths written.
    """
    out = Path(out_dir)
    parts = arc.parts(batch_id)
    names = dict(zip((p.part_key for p in parts), output_stems([p.part_key for p in parts])))
    files: list[tuple[Path, str]] = []
    for p in parts:
        if p.result_sha256:
            files.append((out / f"{names[p.part_key]}.json", p.result_sha256))
        if p.overlay_sha256:
            files.append((out / f"{names[p.part_key]}.overlay.png", p.overlay_sha256))
    batch = arc.batch(batch_id)
    if batch.report_sha256:
        files.append((out / "report.pdf", batch.report_sha256))
        files.append((out / "regions.csv", batch.regions_csv_sha256))
    for s in arc.signoffs(batch_id):
        files.append((out / f"report.signed-{s.signoff_no}.pdf", s.signed_report_sha256))
    for path, sha in files:
        write_bytes_atomic(path, arc.read_object(sha))
    return [path for path, _ in files]
