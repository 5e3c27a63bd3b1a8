"""``batch --retry-errors``: re-inspect the parts of a finished batch that were recorded as not inspected.

An image that could not be read (a truncated file, a copy still being written, a file refused for
its name or kind) is recorded as not inspected and the batch is finished without it. Once the file
is fixed on disk, the same command with ``--retry-errors`` re-inspects those parts only - with the
batch's own recipe, through the same read-inspect-write path as every part
(:func:`.batch._inspect_pending`, or a Dask cluster) - and records them with a new report edition
(:mod:`surfinspect.archive.editions`): the report and region CSV are rendered first, from the new
results put into the object folder, and then every row and event goes into the index in one
transaction, so a run stopped at any point leaves the archive as it was (at most objects that no
record names, which ``verify`` mentions). Parts that still cannot be inspected stay as they were
and are listed with the reason. Earlier sign-offs stay valid for the edition they signed.

Exit codes as for ``batch``: from the verdicts of every part after the retry (1 any reject, 3 any
review or not inspected, 0 all accepted; the same when there was nothing to retry), 2 for bad use
(no such batch, an unfinished batch, another recipe) and for a retry stopped before it was recorded.
"""

from __future__ import annotations

import dataclasses
import json
from dataclasses import dataclass
from functools import partial

from ..archive import store as archive_mod
from ..archive.editions import Retried, is_not_inspected
from ..archive.location import open_archive
from ..errors import InputError
from ..fsutil import ensure_output_dir
from ..inputs import escape_text
from ..recipe import load_recipe
from ..results import EXIT_INPUT_ERROR
from .batch import (
    BatchConfig,
    _inspect_pending,
    _Recorder,
    _render_report_in_own_process,
    batch_exit_code,
    check_station_key,
)
from .batch_outputs import export_batch, regions_csv, report_edition
from .cluster import on_cluster
from .intake import _hash_file, discover_images

__all__ = ["RetryOutcome", "retry_errors"]


@dataclass(frozen=True)
class RetryOutcome:
    batch_id: str
    parts: tuple[archive_mod.PartRow, ...]  # every part of the batch after the retry
    retried: tuple[str, ...]  # part keys re-inspected and recorded
    still: tuple[tuple[str, str], ...]  # (part key, why) still not inspected
    edition: int  # the batch's report edition after the retry
    interruption: str | None  # why nothing was recorded although parts were re-inspected
    exit_code: int

    @property
    def nothing_to_retry(self) -> bool:
        return not self.retried and not self.still and self.interruption is None


class _Collector(_Recorder):
    """A :class:`.batch._Recorder` that keeps what the workers send instead of recording it part by part."""

    def __init__(self, paths, hashes):
        self.paths, self.hashes = paths, hashes
        self.retried: dict[str, Retried] = {}
        self.still: dict[str, str] = {}

    def _record(self, key: str, result_json: bytes, overlay_png: bytes | None) -> None:
        if overlay_png is None:  # an error record: the image still cannot be inspected
            self.still[key] = json.loads(result_json)["error"]
        else:
            self.retried[key] = Retried(key, self.paths[key], self.hashes[key], result_json, overlay_png)


def retry_errors(config: BatchConfig) -> RetryOutcome:
    """Re-inspect the not-inspected parts of the finished batch ``config.batch_id`` from ``config.folder``.

    Raises
    ------
    InputError
        For a bad recipe or one other than the batch's, no such batch, an
        unfinished batch, a missing folder or ``jobs`` < 1.
    """
    if config.jobs is not None and config.jobs < 1:
        raise InputError(f"--jobs: must be at least 1 (got {config.jobs})")
    archive_mod.check_batch_id(config.batch_id)
    recipe = load_recipe(config.recipe_path)
    if not config.folder.is_dir():  # refused even when there turns out to be nothing to retry
        raise InputError(f"{escape_text(str(config.folder))}: not a folder of images")
    if config.out_dir is not None:
        ensure_output_dir(config.out_dir, "--out")
    with open_archive(config.archive_dir) as arc:
        batch = arc.batch(config.batch_id)
        if not batch.is_finished:
            raise InputError(
                f"--retry-errors: batch {config.batch_id!r} is not finished; run it without --retry-errors to finish it"
            )
        if batch.recipe_sha256 != recipe.sha256:
            raise InputError(
                f"--retry-errors: {config.recipe_path}: batch {config.batch_id!r} was judged with "
                f"{batch.recipe_name} rev {batch.recipe_revision} ({batch.recipe_sha256[:12]}…); "
                "a retry uses the batch's own recipe"
            )
        check_station_key(arc, config.station_key)
        errors = [p for p in arc.parts(config.batch_id) if is_not_inspected(p)]
        if not errors:
            parts = tuple(arc.parts(config.batch_id))
            return RetryOutcome(
                config.batch_id, parts, (), (), report_edition(arc, config.batch_id), None, batch_exit_code(parts)
            )
        collector, tasks = _plan(config, errors)
        run = partial(on_cluster, config.scheduler) if config.scheduler else partial(_inspect_pending, jobs=config.jobs)
        interruption = run(recipe, tasks, collector) if tasks else None
        if interruption is None and collector.retried:
            interruption = _record(
                arc, config, [collector.retried[p.part_key] for p in errors if p.part_key in collector.retried]
            )
        if config.out_dir is not None:
            export_batch(arc, config.batch_id, config.out_dir)
        parts = tuple(arc.parts(config.batch_id))
        recorded = () if interruption else tuple(k for k in (p.part_key for p in errors) if k in collector.retried)
        still = tuple((p.part_key, collector.still[p.part_key]) for p in errors if p.part_key in collector.still)
        return RetryOutcome(
            config.batch_id,
            parts,
            recorded,
            still,
            report_edition(arc, config.batch_id),
            interruption,
            EXIT_INPUT_ERROR if interruption else batch_exit_code(parts),
        )


def _plan(config: BatchConfig, errors: list[archive_mod.PartRow]) -> tuple[_Collector, list[tuple[int, str]]]:
    """Find each not-inspected part's file in the folder again and hash it; (collector, tasks to inspect)."""
    wanted = {p.part_key for p in errors}
    own_folders = [config.archive_dir] + ([config.out_dir] if config.out_dir is not None else [])
    recursive = config.recursive or any("/" in key for key in wanted)  # keys with a folder: the batch took sub-folders
    found = {
        f.key: f for f in discover_images(config.folder, recursive=recursive, exclude=own_folders) if f.key in wanted
    }
    paths = {key: f.path for key, f in found.items()}
    hashes: dict[str, str | None] = {}
    collector = _Collector(paths, hashes)
    tasks = []
    for p in errors:
        f = found.get(p.part_key)
        if f is None:
            collector.still[p.part_key] = f"{p.part_key}: not found in {config.folder} (moved or renamed?)"
            continue
        sha, why = (None, f.refusal) if f.refusal else _hash_file(f.path)
        if sha is None:
            collector.still[p.part_key] = why or "cannot be read"
            continue
        hashes[p.part_key] = sha
        tasks.append((p.position, p.part_key))
    return collector, tasks


def _record(arc: archive_mod.Archive, config: BatchConfig, retried: list[Retried]) -> str | None:
    """Render the new edition from the stored new results, then record everything at once; why not, or None."""
    replaced = {}
    for part in retried:
        image_sha, result_sha, overlay_sha = arc.store_retried(part)
        verdict = json.loads(part.result_json)["verdict"]
        values = dict(image_sha256=image_sha, result_sha256=result_sha, overlay_sha256=overlay_sha, verdict=verdict)
        replaced[part.part_key] = dataclasses.replace(arc.part(config.batch_id, part.part_key), **values, error=None)
    generated_at = archive_mod.utc_now()
    report, interruption = _render_report_in_own_process(arc, config.batch_id, generated_at, replaced)
    if report is None:
        return interruption
    arc.retry_parts(
        config.batch_id,
        retried,
        report_pdf=report,
        regions_csv=regions_csv(arc, config.batch_id, replaced=replaced),
        report_generated_at=generated_at,
        operator=config.operator,
        station_key=config.station_key,
    )
    return None
