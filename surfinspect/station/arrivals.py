"""Which images in the station's folder are complete: watchdog events in, finished files out.

An image is complete when

- it was renamed into the folder (the usual way a camera hands a file over:
  write under another name, then rename): at once;
- its writer closed it (inotify's close-after-write) and nothing changed for
  ``CLOSE_QUIET_S`` after: a writer that closes and reopens is caught by the
  next rule;
- otherwise (created or modified, or seen by polling, where no close event
  exists): when its size and modification time stay unchanged for the settle
  time.

Events come from the ``watchdog`` library: inotify on Linux, its polling
observer where inotify is missing or is asked against (network shares, where
inotify does not see other machines' writes).
"""

from __future__ import annotations

import os
import threading
import time
from dataclasses import dataclass
from pathlib import Path

from watchdog.events import FileSystemEventHandler

from ..measure.imaging import IMAGE_SUFFIXES

__all__ = ["CLOSE_QUIET_S", "Arrival", "Arrivals", "start_observer", "is_part_image"]

#: Quiet time after a close-after-write before a file counts as complete, s.
CLOSE_QUIET_S = 0.05
#: Interval of the polling observer, s.
POLL_INTERVAL_S = 0.25


def is_part_image(path: str | os.PathLike) -> bool:
    """An image suffix, not an overlay this tool wrote, not a hidden (temporary) name."""
    name = Path(path).name
    return (
        Path(name).suffix.lower() in IMAGE_SUFFIXES and not name.endswith(".overlay.png") and not name.startswith(".")
    )


@dataclass(frozen=True)
class Arrival:
    path: Path
    completed_at: float  # time.monotonic() when the file was found complete
    how: str  # renamed | closed | settled


@dataclass
class _Pending:
    how: str
    since: float  # when the event arrived
    deadline: float
    stat: tuple[int, int] | None


def _stat(path: Path) -> tuple[int, int] | None:
    try:
        st = path.stat()
    except OSError:
        return None
    return (st.st_size, st.st_mtime_ns)


class Arrivals:
    """Thread-safe record of files on their way in; :meth:`take` hands out the complete ones."""

    def __init__(self, folder: str | os.PathLike, *, settle_s: float):
        self.folder = Path(folder)
        self.settle_s = settle_s
        self._pending: dict[Path, _Pending] = {}
        self._cond = threading.Condition()

    def note(self, path: str | os.PathLike, how: str) -> None:
        """A file event: ``renamed`` (moved in), ``closed`` (closed after writing), ``changed`` or ``existing``."""
        path = Path(path)
        if path.parent != self.folder or not is_part_image(path):
            return
        now = time.monotonic()
        stat = _stat(path)
        if how == "existing" and stat is not None and time.time() - stat[1] / 1e9 > self.settle_s:
            how = "renamed"  # untouched for longer than the settle time: complete
        delay = {"renamed": 0.0, "closed": CLOSE_QUIET_S}.get(how, self.settle_s)
        with self._cond:
            self._pending[path] = _Pending("settled" if how in ("changed", "existing") else how, now, now + delay, stat)
            self._cond.notify_all()

    def forget(self, path: str | os.PathLike) -> None:
        with self._cond:
            self._pending.pop(Path(path), None)

    def wake(self) -> None:
        """Let a waiting :meth:`take` return now (to stop)."""
        with self._cond:
            self._cond.notify_all()

    def pending_count(self) -> int:
        with self._cond:
            return len(self._pending)

    def take(self, timeout: float) -> list[Arrival]:
        """Files found complete now, oldest first; waits up to ``timeout`` s for one."""
        end = time.monotonic() + timeout
        with self._cond:
            while True:
                now = time.monotonic()
                done = self._collect(now)
                if done or now >= end:
                    return done
                deadlines = [p.deadline for p in self._pending.values()]
                wait = min([end] + deadlines) - now
                self._cond.wait(max(wait, 0.001))

    def _collect(self, now: float) -> list[Arrival]:
        done = []
        for path, p in list(self._pending.items()):
            if p.deadline > now:
                continue
            stat = _stat(path)
            if stat is None:  # gone before it was complete (a temporary name renamed away, or deleted)
                del self._pending[path]
            elif p.how == "renamed" or stat == p.stat:
                del self._pending[path]
                done.append(Arrival(path, p.since if p.how != "settled" else now, p.how))
            else:  # still being written
                p.how, p.deadline, p.stat = "settled", now + self.settle_s, stat
        done.sort(key=lambda a: a.completed_at)
        return done


class _Handler(FileSystemEventHandler):
    """watchdog event handler feeding :class:`Arrivals`."""

    def __init__(self, arrivals: Arrivals):
        super().__init__()
        self.arrivals = arrivals

    def dispatch(self, event) -> None:
        if event.is_directory:
            return
        kind = event.event_type
        if kind == "moved":
            if event.src_path:
                self.arrivals.forget(os.fsdecode(event.src_path))
            if event.dest_path:
                self.arrivals.note(os.fsdecode(event.dest_path), "renamed")
        elif kind in ("created", "modified"):
            self.arrivals.note(os.fsdecode(event.src_path), "changed")
        elif kind == "closed":
            self.arrivals.note(os.fsdecode(event.src_path), "closed")
        elif kind == "deleted":
            self.arrivals.forget(os.fsdecode(event.src_path))


def start_observer(arrivals: Arrivals, *, poll: bool = False):
    """Start a watchdog observer on the folder; returns (observer, "inotify" | "polling").

    inotify reports renames from outside the folder as moves (full events),
    so a file renamed in from another folder is complete at once. Where
    inotify cannot start (another system, no inotify watches left) the
    polling observer is used.
    """
    observer, method = None, "polling"
    if not poll:
        try:
            from watchdog.observers.inotify import InotifyObserver

            observer, method = InotifyObserver(generate_full_events=True), "inotify"
            observer.schedule(_Handler(arrivals), str(arrivals.folder), recursive=False)
            observer.start()
            return observer, method
        except (ImportError, OSError):
            observer = None
    from watchdog.observers.polling import PollingObserver

    observer = PollingObserver(timeout=POLL_INTERVAL_S)
    observer.schedule(_Handler(arrivals), str(arrivals.folder), recursive=False)
    observer.start()
    return observer, method
