"""The line station: judge each image as the camera drops it into a folder, publish the verdict at once.

Flow per part: :mod:`.arrivals` says a file is complete; a worker thread reads
and inspects it (the same read and engine as ``inspect`` and ``batch``),
publishes the verdict (a JSON line, OPC UA when asked) and then draws the
overlay and records the part durably in the station's journal
(:mod:`.spool`). Closing the batch (a stop signal, ``stop_after`` parts,
``idle_timeout_s`` without a part) hands every recorded part to the archive
through ``batch``'s own recording and writes the batch report and CSV
(:func:`.batch.archive_inspected`), so the archive holds the batch exactly as
``batch`` would have put it.

Publishing comes before recording so that the line controller is not kept
waiting for the overlay: a station killed in between judges that part again
after a restart (the verdict is published twice, recorded once).

Faults: a file that stays unreadable (unchanged over the settle time) is
recorded as not inspected with its reason; a file that vanishes before it is
judged is skipped with a warning; a journal that cannot be written (full
disk, no permission) stops the station with an :class:`InputError` (exit 2)
after the parts in flight, and every part recorded before stays recorded.
"""

from __future__ import annotations

import contextlib
import json
import threading
import time
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

from .. import results
from ..archive import store as archive_mod
from ..archive.location import open_archive, parse_location
from ..archive.signing import SigningKey
from ..errors import InputError
from ..fsutil import sha256_file
from ..recipe import Recipe, load_recipe
from ..results import EXIT_CODES, EXIT_INPUT_ERROR, PartVerdict
from . import batch
from .arrivals import Arrival, Arrivals, is_part_image, start_observer
from .opcua import PublishedPart, PublishedRegion, VerdictServer, parse_endpoint
from .runner import judge_path, part_error_text
from .spool import ImageChanged, Spool

__all__ = ["DEFAULT_SETTLE_S", "WatchConfig", "JudgedPart", "StationStatus", "WatchOutcome", "Station"]

#: Settle time of a file that was neither renamed in nor closed after writing, s.
DEFAULT_SETTLE_S = 1.0
_TICK_S = 0.1
#: Parts waiting for their record, at most (each holds its pixels until its overlay is drawn).
RECORD_BACKLOG = 4


@dataclass(frozen=True)
class WatchConfig:
    recipe_path: Path
    folder: Path
    archive_dir: Path | str  # a folder or a postgresql:// URL (archive.location); the journal sits in its root
    batch_id: str
    jobs: int = 1
    operator: str | None = None
    opcua: str | None = None  # endpoint, e.g. opc.tcp://127.0.0.1:4840
    stop_after: int | None = None  # close when the batch holds this many parts
    idle_timeout_s: float | None = None  # close after this long without a new part
    settle_s: float = DEFAULT_SETTLE_S
    poll: bool = False  # watchdog's polling observer instead of inotify
    station_key: SigningKey | None = None  # enrolled station key: signs the chain head at the batch close


@dataclass(frozen=True)
class JudgedPart:
    """One part as published: the JSON line on stdout and the OPC UA values."""

    part: str
    image_sha256: str | None
    verdict: str  # accept | reject | review, or the archive's error verdict (not inspected)
    code: int  # the exit code of this verdict: 0 accept, 1 reject, 3 review, 2 not inspected
    regions: tuple[PublishedRegion, ...]
    latency_ms: float  # file complete -> verdict ready to publish
    error: str | None = None
    judged_at: str = field(default_factory=archive_mod.utc_now)  # UTC, when the verdict was ready

    def json_line(self) -> str:
        record = {
            "part": self.part,
            "image_sha256": self.image_sha256,
            "verdict": self.verdict,
            "code": self.code,
            "regions": [
                {"name": r.name, "lay_deg": r.lay_deg, "deviation_deg": r.deviation_deg, "verdict": r.verdict}
                for r in self.regions
            ],
            "latency_ms": round(self.latency_ms, 2),
            "judged_at": self.judged_at,
        }
        if self.error is not None:
            record["error"] = self.error
        return json.dumps(record, ensure_ascii=False)


@dataclass(frozen=True)
class StationStatus:
    counts: dict[str, int]
    judged: int
    parts_per_minute: float
    last: JudgedPart | None


@dataclass(frozen=True)
class WatchOutcome:
    batch_id: str
    closed: bool
    why_closed: str
    parts: tuple[archive_mod.PartRow, ...]
    judged_now: int
    exit_code: int
    left_unjudged: tuple[str, ...] = ()


@dataclass
class _Counts:
    by_verdict: dict[str, int] = field(default_factory=lambda: {v: 0 for v in ("accept", "reject", "review", "error")})
    judged: int = 0

    def add(self, verdict: str) -> None:
        self.by_verdict[verdict] = self.by_verdict.get(verdict, 0) + 1
        self.judged += 1


def verdict_code(verdict: str) -> int:
    """The exit code a single part's verdict gives: 0, 1, 3, and 2 for a part not inspected."""
    try:
        return EXIT_CODES[PartVerdict(verdict)]
    except ValueError:
        return EXIT_INPUT_ERROR


class Station:
    """One station watching one folder into one batch; :meth:`run` until the batch closes.

    ``on_judged`` is called once per part, in the order the verdicts are
    published, from a worker thread; ``on_warning`` with one line per fault
    that does not stop the station.
    """

    def __init__(
        self,
        config: WatchConfig,
        *,
        on_judged: Callable[[JudgedPart, StationStatus], None] | None = None,
        on_warning: Callable[[str], None] | None = None,
        on_note: Callable[[str], None] | None = None,
    ):
        self.config = config
        self.on_judged = on_judged or (lambda part, status: None)
        self.on_warning = on_warning or (lambda text: None)
        self.on_note = on_note or (lambda text: None)
        self._stop = threading.Event()
        self._why_stop = ""
        self._fatal: str | None = None
        self._publish_lock = threading.RLock()
        self._counts = _Counts()
        self._retried: set[str] = set()
        self._inflight: dict[str, Future] = {}
        self._started = time.monotonic()
        self._last_part_at = self._started
        self._judged_now = 0
        self._server: VerdictServer | None = None
        self._recording: ThreadPoolExecutor | None = None
        self._backlog = threading.BoundedSemaphore(RECORD_BACKLOG)
        self._left: tuple[str, ...] = ()  # complete files not judged before the close

    def request_stop(self, why: str) -> None:
        """Close the batch after the parts in flight (safe from a signal handler)."""
        if not self._stop.is_set():
            self._why_stop = why
            self._stop.set()

    # ------------------------------------------------------------ the run

    def run(self) -> WatchOutcome:
        """Watch until the batch closes; returns the closed batch.

        Raises
        ------
        InputError
            For a bad recipe, folder, batch id, flag value or endpoint, a batch
            id already closed, or a journal or archive that cannot be written
            (recorded parts stay recorded; run again to go on).
        """
        cfg = self.config
        if cfg.jobs < 1:
            raise InputError(f"--jobs: must be at least 1 (got {cfg.jobs})")
        if cfg.stop_after is not None and cfg.stop_after < 1:
            raise InputError(f"--stop-after: must be at least 1 (got {cfg.stop_after})")
        if cfg.idle_timeout_s is not None and not cfg.idle_timeout_s > 0:
            raise InputError(f"--idle-timeout: must be more than 0 seconds (got {cfg.idle_timeout_s})")
        if not cfg.settle_s > 0:
            raise InputError(f"--settle: must be more than 0 seconds (got {cfg.settle_s})")
        if cfg.opcua:
            parse_endpoint(cfg.opcua)
        archive_mod.check_batch_id(cfg.batch_id)
        recipe = load_recipe(cfg.recipe_path)
        if not cfg.folder.is_dir():
            raise InputError(f"{cfg.folder}: not a folder (the folder the camera writes into)")
        with open_archive(cfg.archive_dir, create=True) as arc:
            batch.check_station_key(arc, cfg.station_key)
            existing = arc.find_batch(cfg.batch_id)
            if existing is not None and existing.is_finished:
                raise InputError(
                    f"--batch-id: batch {cfg.batch_id!r} was closed at {existing.finished_at}; use a new batch id"
                )
            spool = Spool(parse_location(cfg.archive_dir).root, cfg.batch_id, recipe.sha256)
            if existing is not None and not len(spool):
                raise InputError(
                    f"--batch-id: batch {cfg.batch_id!r} is a folder batch of `surfinspect batch`; use a new batch id"
                )
            for part in spool.parts():
                self._counts.add(part.verdict)
            if existing is None:  # a batch is handed to the archive when it closes
                try:
                    self._watch(recipe, spool)
                except BaseException:
                    self._stop_server()
                    raise
            else:
                self._why_stop = "finishing the close that was interrupted"
            return self._close(arc, recipe, spool)

    def _watch(self, recipe: Recipe, spool: Spool) -> None:
        cfg = self.config
        self._recipe, self._spool = recipe, spool
        self._arrivals = arrivals = Arrivals(cfg.folder, settle_s=cfg.settle_s)
        if cfg.stop_after is not None and len(spool) >= cfg.stop_after:
            self.request_stop(f"the batch holds {len(spool)} parts (--stop-after {cfg.stop_after})")
            return
        if cfg.opcua:
            self._server = VerdictServer(
                cfg.opcua,
                batch_id=cfg.batch_id,
                recipe=f"{recipe.name} rev {recipe.revision}",
                region_names=[r.name for r in recipe.regions],
            )
            self._server.start(self._counts.by_verdict, self._counts.judged)
        observer = None
        try:
            observer, method = start_observer(arrivals, poll=cfg.poll)
            self._say_started(method, len(spool))
            for path in sorted(cfg.folder.iterdir()):  # what arrived while the station was down
                if is_part_image(path) and path.name not in spool:
                    arrivals.note(path, "existing")
            # verdicts from ``jobs`` threads; overlays and records in one thread behind them, in publishing order
            with ThreadPoolExecutor(max_workers=1, thread_name_prefix="record") as self._recording:
                with ThreadPoolExecutor(max_workers=cfg.jobs, thread_name_prefix="judge") as pool:
                    self._loop(pool)
            left = sorted(a.path.name for a in arrivals.take(0))
            self._left = tuple(left) + (("(and files still being written)",) if arrivals.pending_count() else ())
        finally:
            if observer is not None:
                observer.stop()
                observer.join(timeout=5.0)
        if self._fatal is not None:
            self._stop_server()
            raise InputError(self._fatal)

    def _say_started(self, method: str, recorded: int) -> None:
        cfg = self.config
        resumed = f"; {recorded} part(s) recorded before, not judged again" if recorded else ""
        served = f"; OPC UA at {self._server.url}" if self._server is not None else ""
        self.on_note(
            f"batch {cfg.batch_id}: watching {cfg.folder} ({method}){resumed}{served}; Ctrl-C or SIGTERM closes the batch"
        )

    def _loop(self, pool: ThreadPoolExecutor) -> None:
        cfg, spool, arrivals = self.config, self._spool, self._arrivals
        while self._fatal is None:
            self._inflight = {k: f for k, f in self._inflight.items() if not f.done()}
            room = None if cfg.stop_after is None else cfg.stop_after - self._counts.judged - len(self._inflight)
            if room is not None and room <= 0 and not self._inflight:
                self.request_stop(f"the batch holds {self._counts.judged} parts (--stop-after {cfg.stop_after})")
            if self._stop.is_set():
                return
            idle = time.monotonic() - self._last_part_at
            quiet = not self._inflight and not arrivals.pending_count()
            if cfg.idle_timeout_s is not None and quiet and idle >= cfg.idle_timeout_s:
                self.request_stop(f"no new part for {cfg.idle_timeout_s:g} s (--idle-timeout)")
                return
            if room is not None and room <= 0:
                time.sleep(_TICK_S / 4)  # full: wait for the parts in flight
                continue
            for arrival in arrivals.take(_TICK_S)[:room]:
                key = arrival.path.name
                if key in self._inflight:  # being judged while it changed again: look once more when it settles
                    arrivals.note(arrival.path, "changed")
                elif key in spool:
                    self.on_warning(
                        f"{key}: already judged in batch {cfg.batch_id}; a file written again under that name "
                        "is not judged again"
                    )
                else:
                    self._inflight[key] = pool.submit(self._guarded, self._judge, arrival)

    # ------------------------------------------------------ one part

    def _guarded(self, work: Callable, arrival: Arrival, *args) -> None:
        """Run one stage of a part; a fault that must stop the station stops it (no part is lost silently)."""
        if self._fatal is not None:
            return  # stopping: the part stays in the folder for the next run
        try:
            work(arrival, *args)
        except ImageChanged:
            self._arrivals.note(arrival.path, "changed")  # rewritten in place while judged: again once settled
        except OSError as exc:
            where = exc.filename or self._spool.root
            self._fail(
                f"{where}: cannot record part {arrival.path.name} ({exc.strerror or exc}); the station stopped, "
                "the parts recorded before are kept: run the same command again to go on"
            )
        except Exception as exc:  # a fault of this program: stop rather than lose the part silently
            self._fail(
                f"{arrival.path.name}: internal error while judging ({type(exc).__name__}: {exc}); the station stopped"
            )

    def _record_stage(self, work: Callable, arrival: Arrival, *args) -> None:
        try:
            self._guarded(work, arrival, *args)
        finally:
            self._backlog.release()

    def _fail(self, message: str) -> None:
        if self._fatal is None:
            self._fatal = message
        self._stop.set()

    def _judge(self, arrival: Arrival) -> None:
        """Judge one part, publish its verdict and hand it to the recorder."""
        path, key = arrival.path, arrival.path.name
        before = _stat_or_none(path)
        try:
            staged = self._spool.stage(path)
        except FileNotFoundError:
            self.on_warning(f"{key}: the file vanished before it was judged; skipped")
            return
        try:
            loaded, result = judge_path(path, self._recipe, key)
        except InputError as exc:
            reason = part_error_text(exc, path).replace(str(path), key)
            self._not_judged(arrival, staged, before, reason)
            return
        except BaseException:
            self._spool.unstage(staged)
            raise
        verdict = result.verdict.value
        regions = tuple(
            PublishedRegion(r.name, results._num(r.lay_deg, 3), results._num(r.deviation_deg, 3), r.verdict.value)
            for r in result.regions
        )
        latency = _ms_since(arrival.completed_at)
        part = JudgedPart(key, result.image.sha256, verdict, verdict_code(verdict), regions, latency)
        self._publish_and_hand_over(part, self._record, arrival, staged, result, loaded.pixels)

    def _publish_and_hand_over(self, part: JudgedPart, work: Callable, arrival: Arrival, *args) -> None:
        """Publish the verdict, then queue the part's record once the recorder has room.

        The verdict never waits for the recorder; when the recorder is behind by
        ``RECORD_BACKLOG`` parts (each holding its pixels), the next verdicts wait.
        Records are queued in the order the verdicts were published.
        """
        with self._publish_lock:
            self._publish(part)
            self._backlog.acquire()
            try:
                self._recording.submit(self._record_stage, work, arrival, *args)
            except BaseException:
                self._backlog.release()
                raise

    def _record(self, arrival: Arrival, staged: Path, result, pixels) -> None:
        result_json, overlay_png = _result_files(pixels, result)
        try:
            self._spool.record(
                arrival.path.name,
                image=staged,
                image_sha256=result.image.sha256,
                verdict=result.verdict.value,
                result_json=result_json,
                overlay_png=overlay_png,
            )
        finally:
            self._spool.unstage(staged)

    def _not_judged(self, arrival: Arrival, staged: Path, before, reason: str) -> None:
        """A file that could not be read: judged again once it settles, recorded as not inspected if it stays so."""
        path, key = arrival.path, arrival.path.name
        now = _stat_or_none(path)
        if now is None or now != before or key not in self._retried:
            self._spool.unstage(staged)
            if now is None:
                self.on_warning(f"{key}: the file vanished before it was judged; skipped")
            else:  # still being written, or caught at a bad moment: once more when it stays unchanged
                self._retried.add(key)
                self._arrivals.note(path, "changed")
            return
        try:
            sha = sha256_file(staged)
        except OSError as exc:
            sha, reason = None, f"{key}: cannot read the file ({exc.strerror or exc})"
        error = archive_mod.ERROR_VERDICT
        part = JudgedPart(key, sha, error, verdict_code(error), (), _ms_since(arrival.completed_at), reason)
        self._publish_and_hand_over(part, self._record_not_inspected, arrival, staged, sha, reason)

    def _record_not_inspected(self, arrival: Arrival, staged: Path, sha: str | None, reason: str) -> None:
        try:
            self._spool.record(
                arrival.path.name,
                image=staged if sha else None,
                image_sha256=sha,
                verdict=archive_mod.ERROR_VERDICT,
                error=reason,
            )
        finally:
            self._spool.unstage(staged)

    def _publish(self, part: JudgedPart) -> None:
        with self._publish_lock:
            self._counts.add(part.verdict)
            self._judged_now += 1
            self._last_part_at = time.monotonic()
            if self._server is not None:
                self._send_opcua(
                    PublishedPart(
                        name=part.part,
                        image_sha256=part.image_sha256 or "",
                        verdict=part.verdict,
                        verdict_code=part.code,
                        latency_ms=part.latency_ms,
                        regions=part.regions,
                        counts=dict(self._counts.by_verdict),
                        parts_judged=self._counts.judged,
                    )
                )
            minutes = max(self._last_part_at - self._started, 1e-9) / 60.0
            status = StationStatus(dict(self._counts.by_verdict), self._counts.judged, self._judged_now / minutes, part)
            self.on_judged(part, status)

    def _send_opcua(self, part: PublishedPart) -> None:
        try:
            self._server.publish(part)
        except Exception as exc:  # the controller misses this part's values; the part is still recorded
            self.on_warning(f"{part.name}: OPC UA values not updated ({type(exc).__name__}: {exc})")

    # ------------------------------------------------------------ close

    def _close(self, arc: archive_mod.Archive, recipe: Recipe, spool: Spool) -> WatchOutcome:
        cfg = self.config
        if self._server is not None:
            with contextlib.suppress(Exception):  # the close goes on without the controller being told
                self._server.set_state("closing")
        try:
            parts = spool.parts()
            if not parts:
                return WatchOutcome(cfg.batch_id, False, self._why_stop or "stopped", (), 0, 0, self._left)
            batch.archive_inspected(
                arc,
                cfg.batch_id,
                recipe,
                [(p.part_key, spool.image_path(p), p.image_sha256) for p in parts],
                spool.outputs(),
                operator=cfg.operator,
                station_key=cfg.station_key,
            )
            spool.discard()
            rows = tuple(arc.parts(cfg.batch_id))
        finally:
            self._stop_server()
        return WatchOutcome(
            cfg.batch_id,
            True,
            self._why_stop or "stopped",
            rows,
            self._judged_now,
            batch.batch_exit_code(rows),
            self._left,
        )

    def _stop_server(self) -> None:
        if self._server is not None:
            self._server.stop()
            self._server = None


def _stat_or_none(path: Path):
    try:
        st = path.stat()
    except OSError:
        return None
    return (st.st_size, st.st_mtime_ns)


def _ms_since(t: float) -> float:
    return (time.monotonic() - t) * 1e3


def _result_files(pixels, result) -> tuple[bytes, bytes]:
    """The result JSON and overlay PNG bytes exactly as ``inspect`` and ``batch`` write them."""
    import tempfile

    from ..report.overlay import write_overlay_png
    from .runner import OVERLAY_MAX_SIDE

    with tempfile.TemporaryDirectory(prefix="surfinspect-part-") as tmp:
        overlay = Path(tmp) / "overlay.png"
        write_overlay_png(overlay, pixels, result, max_side=OVERLAY_MAX_SIDE)
        return results.dumps(result).encode("utf-8"), overlay.read_bytes()
