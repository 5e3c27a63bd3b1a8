"""Batches: inspect a folder of images in parallel into the archive, resumable.

A batch is one folder of images judged with one recipe under one batch id. The parent plans it
(every image's hash into the archive first), worker processes (or a Dask cluster's) inspect, and the
parent records each part as its result arrives. A stopped batch (a killed process, a power cut) is
finished by running the same command again: recorded parts are not inspected again.

Outcome per part: accept, reject or review as the engine decides, or
``error`` when the image cannot be read (reported with the reason, counted,
listed, never dropped). The exit code is that of ``inspect`` over the parts, an error or a part not
yet inspected counting as "needs review": 1 when any part is rejected, else 3 when any part needs
review, has an error or is still missing, else 0. (2, an input error, is kept for problems that stop
the whole batch: a bad recipe, a missing folder, a batch id bound to other images.)
"""

from __future__ import annotations

import csv
import io
import json
import multiprocessing
import os
import signal
import tempfile
import threading
import time
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass
from datetime import datetime
from functools import partial
from pathlib import Path, PurePosixPath
from typing import Callable, Iterable, Sequence

import cv2
import numpy as np

from .. import results
from ..archive import store as archive_mod
from ..archive.location import open_archive
from ..archive.signing import SigningKey
from ..errors import InputError
from ..fsutil import ensure_output_dir, sha256_file, write_bytes_atomic
from ..measure.imaging import read_image
from ..recipe import Recipe, load_recipe
from ..results import PartVerdict, SignOff
from .cluster import on_cluster
from .runner import find_images, inspect_path, output_stems

__all__ = [
    "BatchConfig",
    "BatchOutcome",
    "PartDone",
    "TEST_EXIT_AT_PART_ENV",
    "TEST_HOLD_FROM_PART_ENV",
    "discover_images",
    "run_batch",
    "open_batch",
    "check_station_key",
    "archive_inspected",
    "batch_exit_code",
    "regions_csv",
    "render_batch_report",
    "export_batch",
]

#: Test hook: when set to N, the worker that takes the batch's N-th part (1-based) ends abruptly.
TEST_EXIT_AT_PART_ENV = "SURFINSPECT_TEST_EXIT_AT_PART"
#: Test hook: when set to N, workers wait (up to a minute) before the batch's N-th part and every later one.
TEST_HOLD_FROM_PART_ENV = "SURFINSPECT_TEST_HOLD_FROM_PART"
_TEST_HOLD_S = 60.0
#: Exit status of a worker that ends because the batch process is gone.
_EXIT_PARENT_GONE = 75

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


@dataclass(frozen=True)
class BatchConfig:
    recipe_path: Path
    folder: Path
    archive_dir: Path
    batch_id: str
    jobs: int | None = None  # None: every core
    operator: str | None = None
    recursive: bool = False
    out_dir: Path | None = None
    station_key: SigningKey | None = None  # enrolled station key: signs the chain head at the batch close
    scheduler: str | None = None  # tcp://HOST:PORT: on a Dask cluster (station.cluster); archive_dir: folder or URL


@dataclass(frozen=True)
class PartDone:
    """Progress notice: one part recorded (``verdict`` is accept/reject/review/error)."""

    part_key: str
    verdict: str
    done: int
    total: int
    error: str | None = None


@dataclass(frozen=True)
class BatchOutcome:
    batch_id: str
    parts: tuple[archive_mod.PartRow, ...]
    resumed: bool
    was_finished: bool  # the batch was already finished before this run
    inspected_now: int
    finished: bool
    interruption: str | None  # why the batch stopped before every part was recorded
    exit_code: int

    @property
    def counts(self) -> dict[str, int]:
        return archive_mod.verdict_counts(self.parts)

    @property
    def errors(self) -> list[tuple[str, str]]:
        return [(p.part_key, p.error or "") for p in self.parts if p.verdict == archive_mod.ERROR_VERDICT]


# ------------------------------------------------------------------ planning


def discover_images(
    folder: str | os.PathLike, *, recursive: bool = False, exclude: Sequence[str | os.PathLike] = ()
) -> list[tuple[str, Path]]:
    """Image files in ``folder`` as (part key, path), sorted; the key is the path below ``folder``, '/'-separated.

    Overlays this tool wrote (``*.overlay.png``) are never parts, nor is
    anything under an ``exclude`` folder that lies inside ``folder`` (the
    batch's own ``--out`` and ``--archive``); an ``exclude`` folder that is
    ``folder`` itself or lies outside it is ignored.

    Raises
    ------
    InputError
        When the folder is missing or holds no image.
    """
    folder = Path(folder)
    inside = [e for e in exclude if _strictly_inside(Path(e), folder)]
    found = find_images(folder, recursive=recursive, exclude=inside)
    return [(PurePosixPath(*p.relative_to(folder).parts).as_posix(), p) for p in found]


def _strictly_inside(path: Path, folder: Path) -> bool:
    path, folder = path.resolve(), folder.resolve()
    return path != folder and path.is_relative_to(folder)


def _hash_file(path: Path) -> tuple[str | None, str | None]:
    """(SHA-256, None), or (None, why) for a file whose bytes cannot be read."""
    try:
        return sha256_file(path), None
    except OSError as exc:
        return None, f"{path}: cannot read the file ({exc.strerror or exc})"


# ------------------------------------------------------------------- workers

_worker_recipe: Recipe | None = None


def _init_worker(recipe: Recipe, cv_threads: int, batch_alive) -> None:
    global _worker_recipe
    _worker_recipe = recipe
    cv2.setNumThreads(cv_threads)  # the pool is the parallelism; OpenCV threads would oversubscribe the cores
    # Ctrl-C reaches the whole process group: the batch process stops the pool, a worker must not die mid-write
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    threading.Thread(target=_exit_with_batch, args=(batch_alive,), name="exit-with-batch", daemon=True).start()


def _exit_with_batch(batch_alive) -> None:
    """Return only by ending this worker, once the batch process is gone.

    ``batch_alive`` is the read end of a pipe whose only write end the batch
    process holds: when that process ends in any way (even SIGKILL) the
    system closes it and the read sees end-of-file. A worker's parent is the
    fork server, not the batch process, so ``os.getppid()`` would not tell.
    """
    try:
        while True:
            batch_alive.recv_bytes()
    except (EOFError, OSError):
        pass
    os._exit(_EXIT_PARENT_GONE)


def _inspect_one(
    position: int, part_key: str, path: str, name: str, exit_at: str | None, hold_from: str | None
) -> dict:
    if exit_at == str(position + 1):
        os._exit(70)
    if hold_from is not None and position + 1 >= int(hold_from):
        time.sleep(_TEST_HOLD_S)
    # the same read-inspect-write as ``inspect``, into a scratch folder whose files go back to the parent
    with tempfile.TemporaryDirectory(prefix="surfinspect-part-") as tmp:
        outcome, _ = inspect_path(path, _worker_recipe, tmp, name, name=part_key)
        if outcome.error is not None:
            return {"part_key": part_key, "error": outcome.error}
        return {
            "part_key": part_key,
            "result_json": Path(outcome.json_path).read_bytes(),
            "overlay_png": Path(outcome.overlay_path).read_bytes(),
        }


def _pool_context() -> multiprocessing.context.BaseContext:
    # fork is unsafe with threads (tqdm's monitor, BLAS); forkserver forks from a clean, preloaded server
    if "forkserver" in multiprocessing.get_all_start_methods():
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload(
            ["surfinspect.station.batch", "surfinspect.measure.engine", "surfinspect.report.overlay"]
        )
        return ctx
    return multiprocessing.get_context("spawn")


# ----------------------------------------------------------------- the batch


def run_batch(config: BatchConfig, *, on_part: Callable[[PartDone], None] | None = None) -> BatchOutcome:
    """Inspect every image of ``config.folder`` into the archive; finish a stopped batch.

    Steps: load the recipe; list and hash the images; open or resume the
    batch in the archive (refused when the id is bound to other images or
    another recipe); inspect the pending parts in a process pool and record
    each as it arrives; when every part is recorded, write the batch report
    and the region CSV into the archive; copy the batch's files to
    ``config.out_dir`` when given.

    Raises
    ------
    InputError
        For a bad recipe, a missing or empty folder, an invalid batch id, a
        batch id bound to other images or recipe, or ``jobs`` < 1.
    """
    if config.jobs is not None and config.jobs < 1:
        raise InputError(f"--jobs: must be at least 1 (got {config.jobs})")
    archive_mod.check_batch_id(config.batch_id)
    recipe = load_recipe(config.recipe_path)
    own_folders = [config.archive_dir] + ([config.out_dir] if config.out_dir is not None else [])
    images = discover_images(config.folder, recursive=config.recursive, exclude=own_folders)
    # every output is checked before the first image is hashed or anything is recorded
    if config.out_dir is not None:
        ensure_output_dir(config.out_dir, "--out")
    with open_archive(config.archive_dir, create=True) as arc:
        check_station_key(arc, config.station_key)
        hashed = {key: _hash_file(path) for key, path in images}
        plan = open_batch(arc, config.batch_id, recipe, [(key, hashed[key][0]) for key, _ in images], config.operator)
        recorder = _Recorder(arc, config.batch_id, dict(images), {k: h for k, (h, _) in hashed.items()}, plan, on_part)
        tasks = []
        for position, (key, _) in enumerate(images):
            if key not in plan.pending:
                continue
            if hashed[key][0] is None:
                recorder.error(key, hashed[key][1])
            else:
                tasks.append((position, key))
        run = partial(on_cluster, config.scheduler) if config.scheduler else partial(_inspect_pending, jobs=config.jobs)
        interruption = run(recipe, tasks, recorder) if tasks else None
        batch = arc.batch(config.batch_id)
        if interruption is None and not batch.is_finished:
            batch = _finish(arc, config.batch_id, config.station_key)
        if config.out_dir is not None:
            export_batch(arc, config.batch_id, config.out_dir)
        parts = tuple(arc.parts(config.batch_id))
    return BatchOutcome(
        batch_id=config.batch_id,
        parts=parts,
        resumed=plan.resumed,
        was_finished=plan.batch.is_finished,
        inspected_now=recorder.recorded,
        finished=batch.is_finished,
        interruption=interruption,
        exit_code=batch_exit_code(parts),
    )


def check_station_key(arc: archive_mod.Archive, station_key: SigningKey | None) -> None:
    """Refuse, before any work, a station key the archive's register does not let sign a batch close."""
    if station_key is not None:
        arc.register().require_signer(
            station_key.fingerprint, archive_mod.utc_now(), "--station-key", station_allowed=True
        )


def open_batch(
    arc: archive_mod.Archive,
    batch_id: str,
    recipe: Recipe,
    parts: Sequence[tuple[str, str | None]],
    operator: str | None = None,
) -> archive_mod.BatchPlan:
    """Open the batch of ``parts`` (part key, image SHA-256 or None) judged with ``recipe``, or find it to resume."""
    return arc.start_batch(
        batch_id,
        recipe_name=recipe.name,
        recipe_revision=recipe.revision,
        recipe_path=recipe.path,
        recipe_sha256=recipe.sha256,
        parts=parts,
        operator=operator,
    )


def archive_inspected(
    arc: archive_mod.Archive,
    batch_id: str,
    recipe: Recipe,
    parts: Sequence[tuple[str, Path, str | None]],
    outputs: Iterable[dict],
    *,
    operator: str | None = None,
    station_key: SigningKey | None = None,
) -> archive_mod.BatchRow:
    """Record parts inspected elsewhere (by ``watch``) exactly as ``batch`` records its own, then close the batch.

    ``parts``: (part key, image file, image SHA-256 or None) in batch order; ``outputs``: one output per
    part as :func:`_inspect_one` returns it. Parts recorded by an interrupted close are skipped; the
    report and CSV are written (the close signed with ``station_key``) as at the end of :func:`run_batch`.
    """
    plan = open_batch(arc, batch_id, recipe, [(key, sha) for key, _, sha in parts], operator)
    recorder = _Recorder(arc, batch_id, {k: p for k, p, _ in parts}, {k: sha for k, _, sha in parts}, plan, None)
    pending = set(plan.pending)
    for out in outputs:
        if out["part_key"] in pending:
            recorder.worker_output(out)
    batch = arc.batch(batch_id)
    return batch if batch.is_finished else _finish(arc, batch_id, station_key)


class _Recorder:
    """Records each part in the archive as its outcome arrives, and tells ``on_part``."""

    def __init__(self, arc, batch_id, paths, hashes, plan: archive_mod.BatchPlan, on_part):
        self.arc, self.batch_id, self.paths, self.hashes, self.on_part = arc, batch_id, paths, hashes, on_part
        self.total = len(paths)
        self.done_before = self.total - len(plan.pending)
        self.recorded = 0

    def error(self, key: str, message: str) -> None:
        # the part's name within the batch folder, not this station's full path, goes into the record
        message = message.replace(str(self.paths[key]), key)
        self._record(key, archive_mod.error_record_json(key, self.hashes[key], message), None)

    def worker_output(self, out: dict) -> None:
        key = out["part_key"]
        if "error" in out:
            self.error(key, out["error"])
        elif json.loads(out["result_json"])["image"]["sha256"] != self.hashes[key]:
            self.error(key, f"{self.paths[key]}: the file changed while the batch ran")
        else:
            self._record(key, out["result_json"], out["overlay_png"])

    def _record(self, key: str, result_json: bytes, overlay_png: bytes | None) -> None:
        image_path = self.paths[key] if self.hashes[key] else None
        row = self.arc.record_part(
            self.batch_id, key, result_json=result_json, image_path=image_path, overlay_png=overlay_png
        )
        if row is None:
            return  # recorded meanwhile by another run of the same batch
        self.recorded += 1
        if self.on_part is not None:
            self.on_part(PartDone(key, row.verdict, self.done_before + self.recorded, self.total, row.error))


def _inspect_pending(
    recipe: Recipe, tasks: Sequence[tuple[int, str]], recorder: _Recorder, *, jobs: int | None
) -> str | None:
    """Inspect (position, part key) tasks in a process pool; returns why it stopped early, or None.

    Any exception in this process (a signal turned into one, an archive that
    cannot be written) ends the worker processes before it propagates: a
    stopped batch leaves no process behind. Workers also end by themselves
    when this process is killed (see :func:`_exit_with_batch`).
    """
    cores = os.cpu_count() or 1
    jobs = min(jobs or cores, len(tasks))
    names = dict(zip(recorder.paths, output_stems(list(recorder.paths))))
    # the hooks are read here: forkserver workers do not see the environment of later runs
    exit_at = os.environ.get(TEST_EXIT_AT_PART_ENV)
    hold_from = os.environ.get(TEST_HOLD_FROM_PART_ENV)
    context = _pool_context()
    batch_alive, batch_alive_writer = context.Pipe(duplex=False)
    lost = 0
    try:
        with ProcessPoolExecutor(
            max_workers=jobs,
            mp_context=context,
            initializer=_init_worker,
            initargs=(recipe, max(1, cores // jobs), batch_alive),
        ) as pool:
            try:
                futures = [
                    pool.submit(_inspect_one, position, key, str(recorder.paths[key]), names[key], exit_at, hold_from)
                    for position, key in tasks
                ]
                for future in as_completed(futures):
                    try:
                        recorder.worker_output(future.result())
                    except BrokenProcessPool:
                        lost += 1
            except BaseException:
                _terminate_workers(pool)
                raise
    finally:
        batch_alive.close()
        batch_alive_writer.close()
    if lost:
        return (
            f"a worker process ended abruptly; {lost} part(s) were not recorded "
            "(run the same command again to finish the batch)"
        )
    return None


def _terminate_workers(pool: ProcessPoolExecutor) -> None:
    """Cancel what is queued and end every worker now (``ProcessPoolExecutor.terminate_workers`` from Python 3.14)."""
    terminate = getattr(pool, "terminate_workers", None)
    if terminate is not None:
        terminate()
        return
    processes = list((getattr(pool, "_processes", None) or {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    for process in processes:
        try:
            if process.is_alive():
                process.terminate()
        except (ValueError, ProcessLookupError):  # already closed or gone
            pass
    for process in processes:
        try:
            process.join(timeout=5.0)
        except (ValueError, AssertionError):
            pass


def batch_exit_code(parts: Sequence[archive_mod.PartRow]) -> int:
    """0/1/3 as for ``inspect``; an error or a part not yet inspected counts as needing review."""
    verdicts = [
        PartVerdict(p.verdict) if p.verdict in {v.value for v in PartVerdict} else PartVerdict.REVIEW for p in parts
    ]
    return results.exit_code(verdicts)


def _finish(arc: archive_mod.Archive, batch_id: str, station_key: SigningKey | None = None) -> archive_mod.BatchRow:
    generated_at = archive_mod.utc_now()
    report = render_batch_report(arc, batch_id, generated_at=generated_at)
    return arc.finish_batch(
        batch_id,
        report_pdf=report,
        regions_csv=regions_csv(arc, batch_id),
        report_generated_at=generated_at,
        station_key=station_key,
    )


# ------------------------------------------------------------------- outputs


def _stored_parts(arc: archive_mod.Archive, batch_id: str):
    """(row, stored result dict) for every recorded part, in batch order."""
    return [(p, arc.read_result(p)) for p in arc.parts(batch_id) if p.result_sha256]


def _csv_value(v) -> str:
    if v is None:
        return ""
    if isinstance(v, list):
        return " ".join(_csv_value(x) for x in v)
    return str(v)


def regions_csv(arc: archive_mod.Archive, batch_id: str) -> bytes:
    """One CSV row per region of every part (one row for a part with an error or no region).

    Figures are written as the part's JSON holds them (same rounding);
    lists (expected lays of crossed lay) are space-separated.
    """
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(CSV_COLUMNS)
    for part, result in _stored_parts(arc, batch_id):
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
    arc: archive_mod.Archive, batch_id: str, *, signoff: SignOff | None = None, generated_at: str | None = None
) -> bytes:
    """The batch PDF report from what the archive holds (signed edition when ``signoff`` is given).

    Pictures are read from the archived images (the bytes that were
    inspected), as 8-bit grey to keep the memory of a large batch down. Parts
    whose image could not be read are counted on the summary and listed with their reasons.
    The signed edition is rendered with the unsigned report's own generation
    time, so that the two differ only in the sign-off block.

    Raises
    ------
    InputError
        When no part of the batch could be inspected (there is nothing to report).
    """
    from ..report.pdf import NotInspected, render_report

    batch = arc.batch(batch_id)
    stored = _stored_parts(arc, batch_id)
    judged = [(p, r) for p, r in stored if p.verdict != archive_mod.ERROR_VERDICT]
    failed = [
        (p.part_key, p.image_sha256 or "", p.error or "") for p, _ in stored if p.verdict == archive_mod.ERROR_VERDICT
    ]
    if not judged:
        raise InputError(
            f"batch {batch_id!r}: none of its {len(stored)} image(s) could be inspected; no report is made"
        )
    stamp = generated_at or batch.report_generated_at
    return render_report(
        [results.part_from_dict(r) for _, r in judged],
        [_picture_uint8(arc.object_path(p.image_sha256)) for p, _ in judged],
        report_id=batch_id,
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
