"""Re-judging archived parts under another recipe revision: which recorded verdicts would now change.

Each selected part's archived image (the very bytes that were inspected,
found by hash in the object folder) goes through the same
read-inspect-write path as ``inspect`` and ``batch``
(:func:`.runner.inspect_path`) under the new recipe. Nothing in the archive
changes: the comparison is written to ``--out``:

``rejudge.json``
    ``{"format": "surfinspect.rejudge/1", "archive_id", "recipe": {name,
    revision, sha256}, "parts": [{batch_id, part_key, image_sha256,
    recorded: {verdict, recipe}, new: {verdict, regions: [{name, verdict,
    lay_deg, deviation_deg}], error}, changed}]}``, parts in archive order,
    no times (two runs over the same parts give the same bytes).
``rejudge.csv``
    One row a part: batch, part, image hash, recorded recipe and verdict,
    new verdict, changed (yes/no), new regions not passed or the error.
``rejudge.pdf``
    The summary: verdict counts recorded × new, and every part that changes.

The work runs in-process (``jobs=1``), on a local process pool (``jobs``
N), or on a Dask distributed cluster (``scheduler``): each task carries the
image hash, a worker reads the object from the folder (mounted at the same
path on every worker machine) and checks its hash before inspecting it. A
worker lost mid-run is replaced by the scheduler, which runs its tasks
again elsewhere; results do not depend on where a task ran.

References
----------
Dask distributed documentation, "Resilience" (tasks of a lost worker are
recomputed), https://distributed.dask.org/en/stable/resilience.html
"""

from __future__ import annotations

import csv
import io
import json
import os
import tempfile
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Sequence

from .. import results
from ..archive.location import open_archive
from ..errors import InputError
from ..fsutil import ensure_output_dir, sha256_file, write_bytes_atomic
from ..recipe import Recipe, load_recipe
from .runner import inspect_path, output_stems

__all__ = ["RejudgeConfig", "RejudgeOutcome", "Task", "rejudge", "select_tasks", "REJUDGE_FORMAT"]

REJUDGE_FORMAT = "surfinspect.rejudge/1"
OUTPUT_FILES = ("rejudge.json", "rejudge.csv", "rejudge.pdf")


@dataclass(frozen=True)
class RejudgeConfig:
    archive: str
    recipe_path: Path
    out_dir: Path
    batch_ids: tuple[str, ...] = ()
    since: str | None = None  # batches started at or after (YYYY-MM-DD, or an ISO 8601 UTC time)
    scheduler: str | None = None  # tcp://HOST:PORT of a Dask scheduler
    jobs: int | None = None  # local worker processes (None: every core)


@dataclass(frozen=True)
class Task:
    batch_id: str
    part_key: str
    stem: str
    image_sha256: str | None
    recorded_verdict: str
    recorded_recipe: str


@dataclass(frozen=True)
class RejudgeOutcome:
    parts: tuple[dict, ...]
    changed: int
    files: tuple[Path, ...]
    exit_code: int


def _since(text: str | None) -> datetime | None:
    if text is None:
        return None
    try:
        when = datetime.fromisoformat(text.replace("Z", "+00:00"))
    except ValueError:
        raise InputError(
            f"--since {text!r}: not a date (allowed: YYYY-MM-DD, or YYYY-MM-DDTHH:MM:SSZ in UTC)"
        ) from None
    return when if when.tzinfo else when.replace(tzinfo=timezone.utc)


def _started(b) -> datetime:
    return datetime.fromisoformat(b.started_at.replace("Z", "+00:00"))


def select_tasks(arc, batch_ids: Sequence[str] = (), since: str | None = None) -> list[Task]:
    """The inspected parts of the chosen batches (all, by default), in archive order."""
    after = _since(since)
    batches = [arc.batch(b) for b in dict.fromkeys(batch_ids)] if batch_ids else arc.batches()
    batches = [b for b in batches if after is None or _started(b) >= after]
    tasks = []
    for b in batches:
        done = [p for p in arc.parts(b.batch_id) if p.is_done]
        stems = output_stems([p.part_key for p in done])
        recipe = f"{b.recipe_name} rev {b.recipe_revision}"
        for p, stem in zip(done, stems):
            tasks.append(Task(b.batch_id, p.part_key, stem, p.image_sha256, p.verdict, recipe))
    return tasks


# ----------------------------------------------------------------- one part (runs on a worker)


def rejudge_part(task: Task, recipe: Recipe, objects_dir: str) -> dict[str, Any]:
    """Inspect one archived image under ``recipe``; the new verdict and its regions, or the error."""
    if task.image_sha256 is None:
        return {"verdict": results.PartVerdict.REVIEW.value, "regions": [], "error": "no image was archived"}
    path = Path(objects_dir) / task.image_sha256[:2] / task.image_sha256[2:]
    if not path.is_file():
        error = f"archived image {task.image_sha256[:12]}… not found under {objects_dir} on this worker"
        return {"verdict": "error", "regions": [], "error": error}
    if sha256_file(path) != task.image_sha256:
        return {"verdict": "error", "regions": [], "error": "archived image has changed (hash mismatch)"}
    with tempfile.TemporaryDirectory(prefix="surfinspect-rejudge-") as tmp:
        outcome, _ = inspect_path(path, recipe, tmp, task.stem, name=task.part_key)
        if outcome.error is not None:
            return {"verdict": "error", "regions": [], "error": outcome.error.replace(str(path), task.part_key)}
        doc = json.loads(Path(outcome.json_path).read_text(encoding="utf-8"))
    regions = [{k: r.get(k) for k in ("name", "verdict", "lay_deg", "deviation_deg")} for r in doc.get("regions", [])]
    return {"verdict": doc["verdict"], "regions": regions, "error": None}


_pool_recipe: Recipe | None = None


def _pool_init(recipe: Recipe) -> None:
    global _pool_recipe
    import cv2

    _pool_recipe = recipe
    cv2.setNumThreads(1)  # the pool is the parallelism


def _pool_part(task: Task, objects_dir: str) -> dict[str, Any]:
    return rejudge_part(task, _pool_recipe, objects_dir)


def _run_local(tasks: Sequence[Task], recipe: Recipe, objects_dir: str, jobs: int | None) -> list[dict]:
    jobs = min(jobs or os.cpu_count() or 1, max(1, len(tasks)))
    if jobs == 1:
        return [rejudge_part(t, recipe, objects_dir) for t in tasks]
    from .batch import _pool_context

    with ProcessPoolExecutor(jobs, mp_context=_pool_context(), initializer=_pool_init, initargs=(recipe,)) as pool:
        return list(pool.map(_pool_part, tasks, [objects_dir] * len(tasks)))


# ----------------------------------------------------------------- outputs


def _not_passed(new: dict) -> str:
    if new["error"]:
        return new["error"]
    return ", ".join(f"{r['name']}: {r['verdict']}" for r in new["regions"] if r["verdict"] != "pass")


def _csv(parts: Sequence[dict]) -> bytes:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(
        ["batch_id", "part_key", "image_sha256", "recorded_recipe", "recorded_verdict", "new_verdict"]
        + [
            "changed",
            "new_not_passed",
        ]
    )
    for p in parts:
        w.writerow(
            [p["batch_id"], p["part_key"], p["image_sha256"] or "", p["recorded"]["recipe"], p["recorded"]["verdict"]]
            + [p["new"]["verdict"], "yes" if p["changed"] else "no", _not_passed(p["new"])]
        )
    return buf.getvalue().encode("utf-8")


def _pdf(arc_location: str, recipe: Recipe, parts: Sequence[dict]) -> bytes:
    from ..report.rejudge_page import ChangedPart, render_rejudge_summary

    counts: dict[str, dict[str, int]] = {}
    for p in parts:
        row = counts.setdefault(p["recorded"]["verdict"], {})
        row[p["new"]["verdict"]] = row.get(p["new"]["verdict"], 0) + 1
    changed = [
        ChangedPart(p["batch_id"], p["part_key"], p["recorded"]["verdict"], p["new"]["verdict"], _not_passed(p["new"]))
        for p in parts
        if p["changed"]
    ]
    return render_rejudge_summary(
        archive=arc_location,
        old_recipes=sorted({p["recorded"]["recipe"] for p in parts}) or ["-"],
        new_recipe=f"{recipe.name} rev {recipe.revision}",
        generated_at=datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        parts_total=len(parts),
        counts=counts,
        changed=changed,
    )


def rejudge(config: RejudgeConfig) -> RejudgeOutcome:
    """Re-inspect the selected archived parts under ``config.recipe_path`` and write the comparison.

    Raises
    ------
    InputError
        For a bad recipe, archive, batch id, ``--since`` date, ``jobs`` < 1,
        an unreachable scheduler, or no part to re-judge.
    """
    if config.jobs is not None and config.jobs < 1:
        raise InputError(f"--jobs: must be at least 1 (got {config.jobs})")
    recipe = load_recipe(config.recipe_path)
    ensure_output_dir(config.out_dir, "--out")
    with open_archive(config.archive) as arc:
        tasks = select_tasks(arc, config.batch_ids, config.since)
        objects_dir, archive_id, location = str(arc.objects.root), arc.archive_id, arc.location
    if not tasks:
        raise InputError(f"{location}: no inspected part in the batches chosen (--batch-id / --since)")
    if config.scheduler:
        from .cluster import map_on_cluster

        new = map_on_cluster(config.scheduler, rejudge_part, tasks, recipe, objects_dir)
    else:
        new = _run_local(tasks, recipe, objects_dir, config.jobs)
    parts = tuple(
        {
            "batch_id": t.batch_id,
            "part_key": t.part_key,
            "image_sha256": t.image_sha256,
            "recorded": {"verdict": t.recorded_verdict, "recipe": t.recorded_recipe},
            "new": n,
            "changed": n["verdict"] != t.recorded_verdict,
        }
        for t, n in zip(tasks, new)
    )
    doc = {
        "format": REJUDGE_FORMAT,
        "archive_id": archive_id,
        "recipe": {"name": recipe.name, "revision": recipe.revision, "sha256": recipe.sha256},
        "parts": list(parts),
    }
    out = Path(config.out_dir)
    files = tuple(out / name for name in OUTPUT_FILES)
    write_bytes_atomic(files[0], (json.dumps(doc, indent=2, sort_keys=True) + "\n").encode("utf-8"))
    write_bytes_atomic(files[1], _csv(parts))
    write_bytes_atomic(files[2], _pdf(location, recipe, parts))
    verdicts = [results.PartVerdict(p["new"]["verdict"]) if p["new"]["verdict"] != "error" else None for p in parts]
    code = results.exit_code([v or results.PartVerdict.REVIEW for v in verdicts])
    return RejudgeOutcome(parts, sum(p["changed"] for p in parts), files, code)
