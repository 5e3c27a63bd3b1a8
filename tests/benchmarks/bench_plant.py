"""Benchmark: the plant archive (PostgreSQL index) and re-judging on a Dask cluster, against the local references.

Run from the checkout root (PostgreSQL server binaries installed; nothing else running is best)::

    python tests/benchmarks/bench_plant.py [--parts 200] [--jobs 2]

1. A batch of N demo-sized LW-220 panels into a SQLite folder archive and into a
   PostgreSQL archive (a throw-away server started here, fsync on as in production),
   same images, same --jobs, same run: ratio PostgreSQL / SQLite (target <= 1.3).
2. ``rejudge`` of those N parts under revision 4 of the recipe: on a Dask
   ``LocalCluster`` of 2 worker processes (the engine loaded on the workers first, as on a long-lived cluster) against
   ``--jobs 2`` on a local process pool: ratio cluster / pool (target <= 1.2).
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE.parent / "archive"))

from bench_batch import RECIPE, make_panels  # noqa: E402
from pg_server import start_server  # noqa: E402

from surfinspect.station import batch  # noqa: E402
from surfinspect.station.rejudge import RejudgeConfig, rejudge  # noqa: E402


def timed_batch(folder: Path, archive: str, jobs: int) -> float:
    start = time.perf_counter()
    outcome = batch.run_batch(
        batch.BatchConfig(recipe_path=RECIPE, folder=folder, archive_dir=archive, batch_id="bench", jobs=jobs)
    )
    assert outcome.finished and len(outcome.parts) == len(list(folder.iterdir()))
    return time.perf_counter() - start


def timed_recording(location: str, images: list[Path], recipe: Path) -> float:
    """The index's share alone: plan a batch and record hand-made results for every image (no inspection)."""
    import hashlib

    from archive_helpers import region, result_json

    from surfinspect import results
    from surfinspect.archive import store as arc

    recipe_sha = hashlib.sha256(recipe.read_bytes()).hexdigest()
    bodies = [result_json(p, recipe_sha, [region("face", results.RegionVerdict.PASS, 90.1)]) for p in images]
    start = time.perf_counter()
    with arc.Archive(location, create=True) as a:
        a.start_batch(
            "rec",
            recipe_name="lw-220-wall-panel",
            recipe_revision=3,
            recipe_path=recipe,
            recipe_sha256=recipe_sha,
            parts=[(p.name, hashlib.sha256(p.read_bytes()).hexdigest()) for p in images],
        )
        for p, body in zip(images, bodies):
            a.record_part("rec", p.name, result_json=body, image_path=p, overlay_png=b"png")
    return time.perf_counter() - start


def timed_rejudge(archive: str, recipe: Path, out: Path, **kw) -> float:
    start = time.perf_counter()
    rejudge(RejudgeConfig(archive=archive, recipe_path=recipe, out_dir=out, **kw))
    return time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--parts", type=int, default=200)
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument(
        "--only-rejudge", action="store_true", help="skip the batch comparison (the archive is still made)"
    )
    args = parser.parse_args()
    server = start_server(fsync=True)
    try:
        with tempfile.TemporaryDirectory() as tmp:
            tmp = Path(tmp)
            folder = tmp / "panels"
            make_panels(folder, args.parts)
            url = server.archive_url(server.create_database(), tmp / "pg-objects")
            print(f"{args.parts} panels, recipe {RECIPE.name}, --jobs {args.jobs}")
            images = sorted(folder.iterdir())
            if args.only_rejudge:
                timed_batch(folder, str(tmp / "sqlite"), args.jobs)
            else:
                r_sqlite = timed_recording(str(tmp / "rec-sqlite"), images, RECIPE)
                r_pg = timed_recording(server.archive_url(server.create_database(), tmp / "rec-pg"), images, RECIPE)
                print(f"recording only (no inspection): SQLite {r_sqlite:5.2f} s, PostgreSQL {r_pg:5.2f} s")
                # interleaved (SQLite, PostgreSQL, PostgreSQL, SQLite) so that a load change on a shared machine
                # weighs on both alike; each run is a new batch into a new archive
                second = server.archive_url(server.create_database(), tmp / "pg-objects-2")
                t_sqlite = timed_batch(folder, str(tmp / "sqlite"), args.jobs)
                t_pg = timed_batch(folder, url, args.jobs)
                t_pg += timed_batch(folder, second, args.jobs)
                t_sqlite += timed_batch(folder, str(tmp / "sqlite-2"), args.jobs)
                print(f"batch into SQLite      {t_sqlite / 2:7.1f} s (mean of 2)")
                print(
                    f"batch into PostgreSQL  {t_pg / 2:7.1f} s (mean of 2)   ratio {t_pg / t_sqlite:.2f} (target <= 1.30)"
                )

            tight = tmp / "rev4.yaml"
            text = (
                RECIPE.read_text()
                .replace("revision: 3", "revision: 4")
                .replace("tolerance_deg: 3.0", "tolerance_deg: 1.0")
            )
            tight.write_text(text)
            from distributed import LocalCluster

            archive = str(tmp / "sqlite")
            with LocalCluster(
                n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None
            ) as c:
                # a cluster's workers are long-lived: load the engine on them before the clock starts
                from distributed import Client

                with Client(c.scheduler_address) as client:
                    client.run(lambda: __import__("surfinspect.station.rejudge"))
                # interleaved: pool, cluster, cluster, pool
                t_pool = timed_rejudge(archive, tight, tmp / "rj-pool", jobs=2)
                t_cluster = timed_rejudge(archive, tight, tmp / "rj-dask", scheduler=c.scheduler_address)
                t_cluster += timed_rejudge(archive, tight, tmp / "rj-dask-2", scheduler=c.scheduler_address)
                t_pool += timed_rejudge(archive, tight, tmp / "rj-pool-2", jobs=2)
            same = (tmp / "rj-pool" / "rejudge.json").read_bytes() == (tmp / "rj-dask" / "rejudge.json").read_bytes()
            print(f"rejudge --jobs 2             {t_pool / 2:7.1f} s (mean of 2)")
            print(
                f"rejudge LocalCluster 2 wkrs  {t_cluster / 2:7.1f} s (mean of 2)   ratio {t_cluster / t_pool:.2f} "
                f"(target <= 1.20); identical output: {same}"
            )
    finally:
        server.stop()


if __name__ == "__main__":
    main()
