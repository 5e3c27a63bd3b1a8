"""Benchmark: a batch of 40 demo-sized LW-220 panels with --jobs 1 and --jobs 2.

Run from the checkout root::

    python tests/benchmarks/bench_batch.py [--parts 40] [--jobs 2]

Prints the wall time of each run, split into the inspection phase (pool
start to the last part recorded) and the whole batch (with the PDF report,
the CSV and the archive), and the ratio jobs-1 time / jobs-N time.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import cv2

from surfinspect.measure import synth
from surfinspect.station import batch, demo

RECIPE = Path(__file__).resolve().parents[2] / "recipes" / "lw-220-wall-panel.yaml"


def make_panels(folder: Path, count: int) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    for i in range(count):
        lay = 90.0 + (8.0 if i % 10 == 3 else 0.4 * ((i % 5) - 2))  # every tenth panel brushed off grain
        img = synth.brushed_panel(demo.PANEL_SHAPE, lay, seed=1000 + i)
        cv2.imwrite(str(folder / f"lw-220-{i + 1:04d}.png"), synth.to_uint8(img))


def timed_run(folder: Path, archive: Path, jobs: int) -> tuple[float, float, int]:
    last_part = [0.0]
    start = time.perf_counter()

    def on_part(_: batch.PartDone) -> None:
        last_part[0] = time.perf_counter()

    outcome = batch.run_batch(
        batch.BatchConfig(recipe_path=RECIPE, folder=folder, archive_dir=archive, batch_id=f"bench-j{jobs}", jobs=jobs),
        on_part=on_part,
    )
    end = time.perf_counter()
    assert outcome.finished and len(outcome.parts) == len(list(folder.iterdir()))
    return last_part[0] - start, end - start, outcome.exit_code


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--parts", type=int, default=40)
    parser.add_argument("--jobs", type=int, default=2)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "panels"
        make_panels(folder, args.parts)
        rows, cols = demo.PANEL_SHAPE
        print(f"{args.parts} panels of {cols}x{rows} px, recipe {RECIPE.name}")
        timings = {}
        for jobs in (1, args.jobs):
            inspect_s, total_s, code = timed_run(folder, Path(tmp) / f"archive-{jobs}", jobs)
            timings[jobs] = (inspect_s, total_s)
            print(
                f"--jobs {jobs}: inspection {inspect_s:6.2f} s ({inspect_s / args.parts * 1000:5.0f} ms/part), "
                f"whole batch {total_s:6.2f} s, exit {code}"
            )
        (i1, t1), (i2, t2) = timings[1], timings[args.jobs]
        print(f"speed-up --jobs {args.jobs} vs --jobs 1: inspection {i1 / i2:.2f}x, whole batch {t1 / t2:.2f}x")


if __name__ == "__main__":
    main()
