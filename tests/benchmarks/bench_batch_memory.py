"""Benchmark: peak memory of the batch parent process, 30 parts against 300 parts.

Run from the checkout root::

    python tests/benchmarks/bench_batch_memory.py [--small 30] [--large 300] [--jobs 2]

Each batch runs in a fresh process (so that one run's peak does not hide the
other's); that process reports its own peak resident set size
(``getrusage(RUSAGE_SELF).ru_maxrss``), which leaves out the worker processes.
Panels are the demo's size (600 x 400 px). Prints both peaks and their ratio;
the target is a ratio of at most 1.2 (memory flat in the number of parts).
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

CHILD = r"""
import json, resource, sys, time
from pathlib import Path
from surfinspect.station import batch
recipe, folder, archive, jobs = sys.argv[1:5]
start = time.perf_counter()
outcome = batch.run_batch(batch.BatchConfig(recipe_path=Path(recipe), folder=Path(folder),
                          archive_dir=Path(archive), batch_id="MEM", jobs=int(jobs)))
assert outcome.finished, outcome.interruption
print(json.dumps({"parts": len(outcome.parts), "seconds": time.perf_counter() - start,
                  "peak_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
"""


def run(recipe: Path, folder: Path, archive: Path, jobs: int) -> dict:
    done = subprocess.run(
        [sys.executable, "-c", CHILD, str(recipe), str(folder), str(archive), str(jobs)],
        capture_output=True,
        text=True,
    )
    if done.returncode != 0:
        raise SystemExit(f"the batch failed (exit {done.returncode}):\n{done.stderr[-3000:]}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from bench_batch import RECIPE, make_panels

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--small", type=int, default=30)
    parser.add_argument("--large", type=int, default=300)
    parser.add_argument("--jobs", type=int, default=2)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        peaks = {}
        for count in (args.small, args.large):
            folder = Path(tmp) / f"panels-{count}"
            t0 = time.perf_counter()
            make_panels(folder, count)
            made = time.perf_counter() - t0
            r = run(RECIPE, folder, Path(tmp) / f"archive-{count}", args.jobs)
            peaks[count] = r["peak_rss_mb"]
            print(
                f"{count:4d} parts: batch parent peak RSS {r['peak_rss_mb']:7.1f} MB, "
                f"batch {r['seconds']:6.1f} s (panels made in {made:.1f} s)"
            )
        ratio = peaks[args.large] / peaks[args.small]
        verdict = "flat" if ratio <= 1.2 else "GROWS"
        print(f"peak parent RSS ratio {args.large} vs {args.small} parts: {ratio:.2f} (target <= 1.2: {verdict})")


if __name__ == "__main__":
    main()
