"""Inspecting parts on a Dask distributed cluster: ``batch --scheduler`` and ``rejudge --scheduler``.

A batch's images live on the station, not on the workers: each task carries
the image's bytes (read when the task is submitted, a bounded number in
flight so a large batch never sits in memory at once), the worker inspects
them through :func:`.runner.inspect_path` exactly as a local worker does and
sends back the result JSON (with the station's file path in it, as a local
run writes it) and the overlay. The station records them in the archive as
they arrive. A worker lost mid-run is replaced by the scheduler and its
tasks run again elsewhere.

References
----------
Dask distributed documentation, "Resilience" and ``as_completed``,
https://distributed.dask.org/en/stable/resilience.html
"""

from __future__ import annotations

import json
import tempfile
import uuid
from pathlib import Path
from typing import Callable, Iterable, Sequence

from ..errors import InputError
from ..recipe import Recipe
from .runner import inspect_path

__all__ = ["connect", "inspect_bytes", "inspect_on_cluster", "map_on_cluster"]

#: Tasks in flight per worker thread: enough to keep every worker busy, few enough to bound memory.
IN_FLIGHT_PER_THREAD = 2


def connect(scheduler: str):
    """A client of the scheduler at ``tcp://HOST:PORT``; an :class:`InputError` when it cannot be reached."""
    try:
        from distributed import Client
    except ImportError:
        raise InputError("--scheduler: needs Dask distributed (pip install 'surfinspect[cluster]')") from None
    try:
        return Client(scheduler, timeout="15s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(f"--scheduler {scheduler}: cannot reach the Dask scheduler ({exc})") from None


def _one_thread_for_opencv() -> None:
    """A worker process runs one task per thread: OpenCV's own threads would oversubscribe its cores
    (the local pool sets the same in its initializer); set in the task, so that a restarted worker has it too."""
    import cv2

    if cv2.getNumThreads() != 1:
        cv2.setNumThreads(1)


def _task(function: Callable, *args):
    _one_thread_for_opencv()
    return function(*args)


def inspect_bytes(data: bytes, path: str, stem: str, part_key: str, recipe: Recipe) -> dict:
    """One image's bytes inspected on a worker, as :func:`.batch._inspect_one` does it on the station."""
    _one_thread_for_opencv()
    with tempfile.TemporaryDirectory(prefix="surfinspect-part-") as tmp:
        src = Path(tmp) / ("image" + Path(path).suffix)
        src.write_bytes(data)
        outcome, _ = inspect_path(src, recipe, tmp, stem, name=part_key)
        if outcome.error is not None:
            return {"error": outcome.error.replace(str(src), path)}
        doc = json.loads(Path(outcome.json_path).read_text(encoding="utf-8"))
        doc["image"]["path"] = path  # the station's file, as a local run records it
        return {
            "result_json": (json.dumps(doc, indent=2, sort_keys=True, ensure_ascii=False) + "\n").encode("utf-8"),
            "overlay_png": Path(outcome.overlay_path).read_bytes(),
        }


def inspect_on_cluster(
    scheduler: str, recipe: Recipe, items: Sequence[tuple[str, str, str]], on_output: Callable[[dict], None]
) -> None:
    """Inspect (part key, image path, output stem) items on the cluster; ``on_output`` gets each outcome."""
    from distributed import as_completed

    client = connect(scheduler)
    try:
        shared = client.scatter(recipe, broadcast=True)
        window = max(1, IN_FLIGHT_PER_THREAD * sum(client.nthreads().values()))
        pending = iter(items)
        keys = {}

        def submit(item):
            key, path, name = item
            future = client.submit(inspect_bytes, Path(path).read_bytes(), path, name, key, shared, pure=False)
            keys[future.key] = key
            return future

        running = as_completed([submit(item) for _, item in zip(range(window), pending)])
        for future in running:
            on_output({"part_key": keys.pop(future.key), **future.result()})
            nxt = next(pending, None)
            if nxt is not None:
                running.add(submit(nxt))
    finally:
        client.close()


def map_on_cluster(scheduler: str, function: Callable, tasks: Iterable, *args) -> list:
    """``[function(task, *args) for task in tasks]`` on the cluster, in task order (``args`` sent once)."""
    client = connect(scheduler)
    try:
        shared = [client.scatter(a, broadcast=True) for a in args]
        run = uuid.uuid4().hex[:12]  # keys unique to this run: two runs on one cluster never share a result
        name = getattr(function, "__name__", "task").strip("_").replace("_", "-")
        futures = [
            client.submit(function, t, *shared, key=f"{name}-{run}-{i}", pure=False) for i, t in enumerate(tasks)
        ]
        return client.gather(futures)
    finally:
        client.close()


def on_cluster(scheduler: str, recipe: Recipe, tasks, recorder) -> None:
    """A batch's (position, part key) tasks inspected on the cluster, each recorded as it arrives."""
    from .runner import output_stems

    names = dict(zip(recorder.paths, output_stems(list(recorder.paths))))

    def record(out: dict) -> None:  # the cluster sends the bytes themselves, not files on this station
        if "error" in out:
            recorder.error(out["part_key"], out["error"])
        else:
            recorder.record_result(out["part_key"], out["result_json"], out["overlay_png"])

    inspect_on_cluster(scheduler, recipe, [(k, str(recorder.paths[k]), names[k]) for _, k in tasks], record)
