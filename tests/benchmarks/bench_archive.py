"""Benchmark: recording parts into the archive and verifying it, at 30 and 300 parts.

Run from the checkout root::

    python tests/benchmarks/bench_archive.py [--parts 30 300]

For each size: seconds per recorded part, the index size per part, and the
time of a full ``verify`` against a reference measured in the same run
(hashing every stored object once with hashlib, the least any verification
of the files must do). Parts are small generated images with hand-made
two-region results, so the numbers are the archive's own cost.
"""

from __future__ import annotations

import argparse
import hashlib
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "archive"))

from archive_helpers import RECIPE_TEXT, fill_batch, write_images  # noqa: E402

from surfinspect.archive import store  # noqa: E402
from surfinspect.archive.verify import verify_archive  # noqa: E402


def run(parts: int) -> dict[str, float]:
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        recipe = tmp / "r.yaml"
        recipe.write_text(RECIPE_TEXT)
        images = write_images(tmp / "in", [f"P{i:04d}.png" for i in range(parts)])
        root = tmp / "ar"
        start = time.perf_counter()
        fill_batch(root, "B1", images, recipe)
        record_s = time.perf_counter() - start
        start = time.perf_counter()
        report = verify_archive(root)
        verify_s = time.perf_counter() - start
        assert report.problems == [], report.problems
        start = time.perf_counter()
        for f in (root / "objects").rglob("*"):
            if f.is_file():
                hashlib.sha256(f.read_bytes()).hexdigest()
        hash_s = time.perf_counter() - start
        with store.Archive(root) as a:
            events = len(a.events())
        index_bytes = (root / "index.sqlite").stat().st_size
    return {
        "parts": parts,
        "record_ms_per_part": 1000 * record_s / parts,
        "index_kib_per_part": index_bytes / 1024 / parts,
        "events": events,
        "verify_s": verify_s,
        "hash_only_s": hash_s,
        "verify_over_hashing": verify_s / hash_s,
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--parts", type=int, nargs="+", default=[30, 300])
    args = parser.parse_args()
    rows = [run(n) for n in args.parts]
    for r in rows:
        print(
            f"{r['parts']:5d} parts: record {r['record_ms_per_part']:.2f} ms/part, index {r['index_kib_per_part']:.2f} KiB/part, "
            f"{r['events']} events; verify {r['verify_s']:.3f} s = {r['verify_over_hashing']:.1f} x hashing the objects "
            f"({r['hash_only_s']:.3f} s)"
        )
    if len(rows) > 1:
        a, b = rows[0], rows[-1]
        print(
            f"verify time per part, {b['parts']} vs {a['parts']} parts: {(b['verify_s'] / b['parts']) / (a['verify_s'] / a['parts']):.2f}"
        )


if __name__ == "__main__":
    main()
