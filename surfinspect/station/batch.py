"""Batches: inspect a folder of images in parallel into the archive, resumable.

A batch is one folder of images judged with one recipe under one batch id. The parent plans it
(every image's hash into the archive first), worker processes (or a Dask cluster's) inspect, and the
parent records each part as its result arrives. A stopped batch (a killed process, a power cut) is
finished by running the same command again: recorded parts are not inspected again.

Outcome per part: accept, reject or review as the engine decides, or
``error`` when the image cannot be read (reported with the reason, counted,
listed, never dropped). A folder entry is refused without being read, and
recorded as not inspected with the reason, when its name is not valid UTF-8,
holds a control character or is longer than :data:`MAX_NAME_BYTES`, when it
is a symbolic link leading out of the batch folder, a FIFO, a device or a
socket, or when it is larger than the image size limit (see
:mod:`surfinspect.measure.imaging`). Such parts never stop the batch: it is
finished with the parts that could be judged.

The exit code is that of ``inspect`` over the parts, with an error counting as
"needs review": 1 when any part is rejected, else 3 when any part needs review
or has an error, else 0. 2 is kept for problems that stop the whole batch: a
bad recipe, a missing folder, a batch id bound to other images, and a batch
that stopped before every part was recorded (a worker that ended abruptly or
made no progress for :data:`PART_TIMEOUT_ENV` seconds, a full disk): run the
same command again to finish it.

Worker processes send the parent only a few hundred bytes per part (where
their outputs are, or the error), well under the size a pipe writes at once,
so a worker that dies cannot leave the parent waiting for the rest of a
message; the outputs travel through files in a scratch folder the parent owns.
"""

from __future__ import annotations

import json
import multiprocessing
import os
import shutil
import signal
import tempfile
import threading
import time
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures import TimeoutError as FutureTimeout  # builtin TimeoutError from 3.11 on, not on 3.10
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass
from functools import partial
from pathlib import Path
from typing import Callable, Iterable, Sequence

import cv2

from .. import results
from ..archive import store as archive_mod
from ..archive.location import open_archive
from ..archive.signing import SigningKey
from ..errors import InputError
from ..fsutil import ensure_output_dir, write_bytes_atomic
from ..inputs import env_limit, escape_text
from ..recipe import Recipe, load_recipe
from ..results import EXIT_INPUT_ERROR, PartVerdict
from .batch_outputs import CSV_COLUMNS, export_batch, regions_csv, render_batch_report
from .cluster import on_cluster
from .intake import MAX_NAME_BYTES, FoundPart, _hash_file, discover_images
from .runner import inspect_path, output_stems

__all__ = [
    "BatchConfig",
    "BatchOutcome",
    "PartDone",
    "FoundPart",
    "MAX_NAME_BYTES",
    "PART_TIMEOUT_ENV",
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
    "CSV_COLUMNS",
]

#: Test hook: when set to N, the worker that takes the batch's N-th part (1-based) ends abruptly.
TEST_EXIT_AT_PART_ENV = "SURFINSPECT_TEST_EXIT_AT_PART"
#: Test hook: when set to N, workers wait (up to a minute) before the batch's N-th part and every later one.
TEST_HOLD_FROM_PART_ENV = "SURFINSPECT_TEST_HOLD_FROM_PART"
_TEST_HOLD_S = 60.0
#: Exit status of a worker that ends because the batch process is gone.
_EXIT_PARENT_GONE = 75
#: Environment variable: seconds the batch waits for the next part from its workers (default 600)
#: before it stops, ends them and exits 2.
PART_TIMEOUT_ENV = "SURFINSPECT_PART_TIMEOUT_S"
_ERROR_BYTES = 2000  # an error sent back by a worker stays a short message


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
    position: int, part_key: str, path: str, name: str, scratch: str, exit_at: str | None, hold_from: str | None
) -> dict:
    """Inspect one part into ``scratch``; returns a short message: the outputs' file names, or the error."""
    if exit_at == str(position + 1):
        os._exit(70)
    if hold_from is not None and position + 1 >= int(hold_from):
        time.sleep(_TEST_HOLD_S)
    # the same read-inspect-write as ``inspect``, into the parent's scratch folder (one sub-folder per part)
    out = Path(scratch) / str(position)
    out.mkdir()
    outcome, _ = inspect_path(path, _worker_recipe, out, name, follow_symlinks=False, name=part_key)
    if outcome.error is not None:
        # in bytes, so that the whole message stays one atomic pipe write (PIPE_BUF is 4096 on Linux)
        error = outcome.error.encode("utf-8")[:_ERROR_BYTES].decode("utf-8", "ignore")
        return {"position": position, "error": error}
    return {"position": position, "result_json": outcome.json_path, "overlay_png": outcome.overlay_path}


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
    OSError, sqlite3.Error
        When the archive cannot be written (a full disk); what was recorded stays, the rest is pending.
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
        # a refused entry is not read at all: it has no hash, and its record says why
        hashed = {f.key: (None, f.refusal) if f.refusal else _hash_file(f.path) for f in images}
        plan = open_batch(arc, config.batch_id, recipe, [(f.key, hashed[f.key][0]) for f in images], config.operator)
        paths = {f.key: f.path for f in images}
        recorder = _Recorder(arc, config.batch_id, paths, {k: h for k, (h, _) in hashed.items()}, plan, on_part)
        tasks = []
        for position, found in enumerate(images):
            if found.key not in plan.pending:
                continue
            if hashed[found.key][0] is None:
                recorder.error(found.key, hashed[found.key][1])
            else:
                tasks.append((position, found.key))
        run = partial(on_cluster, config.scheduler) if config.scheduler else partial(_inspect_pending, jobs=config.jobs)
        interruption = run(recipe, tasks, recorder) if tasks else None
        batch = arc.batch(config.batch_id)
        if interruption is None and not batch.is_finished:
            batch, interruption = _finish(arc, config.batch_id, config.station_key)
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
        exit_code=EXIT_INPUT_ERROR if interruption else batch_exit_code(parts),
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
        key = out["part_key"]
        if key not in pending:
            continue
        if "error" in out:
            recorder.error(key, out["error"])
        else:
            recorder.record_result(key, out["result_json"], out["overlay_png"])
    batch = arc.batch(batch_id)
    if batch.is_finished:
        return batch
    batch, interruption = _finish(arc, batch_id, station_key)
    if interruption is not None:
        raise InputError(f"batch {batch_id}: not closed: {interruption}")
    return batch


class _Recorder:
    """Records each part in the archive as its outcome arrives, and tells ``on_part``."""

    def __init__(self, arc, batch_id, paths, hashes, plan: archive_mod.BatchPlan, on_part):
        self.arc, self.batch_id, self.paths, self.hashes, self.on_part = arc, batch_id, paths, hashes, on_part
        self.total = len(paths)
        self.done_before = self.total - len(plan.pending)
        self.recorded = 0

    def error(self, key: str, message: str) -> None:
        """Record a part as not inspected, with the reason (prefixed by its key when the text does not name it)."""
        # the part's name within the batch folder, not this station's full path, goes into the record
        where = str(self.paths[key])
        message = message.replace(where, key).replace(escape_text(where), key)
        if not message.startswith(key):
            message = f"{key}: {message}"
        self._record(key, archive_mod.error_record_json(key, self.hashes[key], message), None)

    def worker_output(self, key: str, out: dict) -> None:
        """Record what a worker sent for part ``key``: an error, or the result and overlay files it wrote."""
        if "error" in out:
            self.error(key, out["error"])
            return
        result_json = Path(out["result_json"]).read_bytes()
        overlay_png = Path(out["overlay_png"]).read_bytes()
        shutil.rmtree(Path(out["result_json"]).parent, ignore_errors=True)
        self.record_result(key, result_json, overlay_png)

    def record_result(self, key: str, result_json: bytes, overlay_png: bytes) -> None:
        """Record a part's result and overlay (an error instead when its image changed since it was hashed)."""
        if json.loads(result_json)["image"]["sha256"] != self.hashes[key]:
            self.error(key, f"{self.paths[key]}: the file changed while the batch ran")
        else:
            self._record(key, result_json, overlay_png)

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
    keys = dict(tasks)
    # the hooks are read here: forkserver workers do not see the environment of later runs
    exit_at = os.environ.get(TEST_EXIT_AT_PART_ENV)
    hold_from = os.environ.get(TEST_HOLD_FROM_PART_ENV)
    timeout_s = env_limit(PART_TIMEOUT_ENV, 600.0, lo=1.0, hi=1e6)
    context = _pool_context()
    batch_alive, batch_alive_writer = context.Pipe(duplex=False)
    scratch = tempfile.mkdtemp(prefix="surfinspect-batch-")
    lost = 0
    try:
        with ProcessPoolExecutor(
            max_workers=jobs,
            mp_context=context,
            initializer=_init_worker,
            initargs=(recipe, max(1, cores // jobs), batch_alive),
        ) as pool:
            try:
                waiting = {
                    pool.submit(
                        _inspect_one, position, key, str(recorder.paths[key]), names[key], scratch, exit_at, hold_from
                    ): position
                    for position, key in tasks
                }
                while waiting:
                    done, _ = wait(waiting, timeout=timeout_s, return_when=FIRST_COMPLETED)
                    if not done:
                        _terminate_workers(pool)
                        return (
                            f"no part finished within {timeout_s:g} s ({PART_TIMEOUT_ENV}); the workers were "
                            f"stopped and {len(waiting)} part(s) were not recorded (run the same command again)"
                        )
                    for future in done:
                        position = waiting.pop(future)
                        try:
                            out = future.result()
                        except BrokenProcessPool:
                            lost += 1
                            continue
                        recorder.worker_output(keys[position], out)
            except BaseException:
                _terminate_workers(pool)
                raise
    finally:
        batch_alive.close()
        batch_alive_writer.close()
        shutil.rmtree(scratch, ignore_errors=True)
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


def _finish(
    arc: archive_mod.Archive, batch_id: str, station_key: SigningKey | None = None
) -> tuple[archive_mod.BatchRow, str | None]:
    """Write the batch report and CSV and close the batch; (batch row, why it could not be finished or None)."""
    generated_at = archive_mod.utc_now()
    report, interruption = _render_report_in_own_process(arc, batch_id, generated_at)
    if report is None:
        return arc.batch(batch_id), interruption
    batch = arc.finish_batch(
        batch_id,
        report_pdf=report,
        regions_csv=regions_csv(arc, batch_id),
        report_generated_at=generated_at,
        station_key=station_key,
    )
    return batch, None


def _render_report_file(archive_dir: str, batch_id: str, generated_at: str, out: str, replaced=None) -> None:
    with open_archive(archive_dir) as arc:
        write_bytes_atomic(out, render_batch_report(arc, batch_id, generated_at=generated_at, replaced=replaced))


def _render_report_in_own_process(
    arc: archive_mod.Archive, batch_id: str, generated_at: str, replaced: dict | None = None
) -> tuple[bytes | None, str | None]:
    """The batch report's bytes, rendered in a process of its own; (None, why) when that process fails.

    Every part's picture and page is held while a report is made; in a
    process of its own that memory is given back when it ends, so the batch
    process stays the same size for 30 parts or 3000. The wait is bounded
    like a part's (:data:`PART_TIMEOUT_ENV`). ``replaced``: see :func:`.batch_outputs.render_batch_report`.
    """
    timeout_s = env_limit(PART_TIMEOUT_ENV, 600.0, lo=1.0, hi=1e6)
    with tempfile.TemporaryDirectory(prefix="surfinspect-report-") as tmp:
        out = Path(tmp) / "report.pdf"
        with ProcessPoolExecutor(max_workers=1, mp_context=_pool_context()) as pool:
            future = pool.submit(_render_report_file, arc.opened_as, batch_id, generated_at, str(out), replaced)
            try:
                future.result(timeout=timeout_s)
            except BrokenProcessPool:
                return None, "the process writing the batch report ended abruptly (run the same command again)"
            except FutureTimeout:
                _terminate_workers(pool)
                return None, f"the batch report was not written within {timeout_s:g} s ({PART_TIMEOUT_ENV})"
        return out.read_bytes(), None
