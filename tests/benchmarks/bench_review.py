"""Benchmark: the review station's pages on a batch of 500 parts.

Run from the checkout root::

    python tests/benchmarks/bench_review.py [--parts 500] [--repeat 7]

The five LW-220 demo parts are inspected once with ``surfinspect batch``;
their real results and overlays are then recorded again and again into a
batch of ``--parts`` parts through the archive's own calls (so the pages
read real JSON, overlays and region rows). Times are medians over
``--repeat`` requests through Starlette's test client (the whole
application: middleware, routing, archive reads, templates), printed
against a reference measured in the same run: reading what the page shows
straight from the archive (parts, regions, dispositions, sign-offs; for
the part page its stored result), without any HTML.

Targets (issue #13): batch page < 1 s, part page < 0.5 s after the first view.
"""

from __future__ import annotations

import argparse
import hashlib
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def _median_s(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def build(tmp: Path, parts: int) -> Path:
    from surfinspect.archive import store
    from surfinspect.cli.main import main

    images = tmp / "demo"
    images.mkdir()
    for p in sorted((ROOT / "demo_parts").glob("lw-220-*.png")):
        shutil.copy(p, images / p.name)
    recipe = ROOT / "recipes" / "lw-220-wall-panel.yaml"
    demo_root = tmp / "demo-archive"
    main(["-q", "batch", str(recipe), str(images), "--archive", str(demo_root), "--batch-id", "DEMO", "--jobs", "2"])
    with store.Archive(demo_root) as d:
        stored = [(p, d.read_object(p.result_sha256), d.read_object(p.overlay_sha256)) for p in d.parts("DEMO")]
        report = d.read_object(d.batch("DEMO").report_sha256)
    root = tmp / "archive"
    sources = [images / p.part_key for p, _, _ in stored]
    names = [f"P{i:04d}-{sources[i % len(sources)].name}" for i in range(parts)]
    with store.Archive(root, create=True) as a:
        a.start_batch(
            "BIG",
            recipe_name="lw-220-wall-panel",
            recipe_revision=3,
            recipe_path=recipe,
            recipe_sha256=hashlib.sha256(recipe.read_bytes()).hexdigest(),
            parts=[
                (n, hashlib.sha256(sources[i % len(sources)].read_bytes()).hexdigest()) for i, n in enumerate(names)
            ],
            operator="K. LINDQVIST",
            station="line-2",
        )
        for i, name in enumerate(names):
            _, result, overlay = stored[i % len(stored)]
            a.record_part("BIG", name, result_json=result, image_path=sources[i % len(sources)], overlay_png=overlay)
        a.finish_batch("BIG", report_pdf=report, regions_csv=b"csv\n", report_generated_at="2026-01-05T08:00:00Z")
    return root


def run(parts: int, repeat: int) -> dict[str, float]:
    from starlette.testclient import TestClient

    from surfinspect.archive import store
    from surfinspect.review.app import ReviewConfig, create_app

    with tempfile.TemporaryDirectory() as tmp:
        start = time.perf_counter()
        root = build(Path(tmp), parts)
        build_s = time.perf_counter() - start
        client = TestClient(create_app(ReviewConfig(root)))
        with store.Archive(root) as a:
            middle = a.parts("BIG")[parts // 2]

        def reference_batch():
            with store.Archive(root) as a:
                a.batch("BIG"), a.parts("BIG"), a.index.select("regions", {"batch_id": "BIG"})
                a.dispositions("BIG"), a.signoffs("BIG")

        def reference_part():
            with store.Archive(root) as a:
                a.read_result(a.part("BIG", middle.part_key))

        def get(path):
            r = client.get(path)
            assert r.status_code == 200, (path, r.status_code)

        first_batch_s = _time_once(lambda: get("/batch/BIG"))
        batch_s = _median_s(lambda: get("/batch/BIG"), repeat)
        part_url = f"/batch/BIG/part/{middle.position}"
        first_part_s = _time_once(lambda: get(part_url))
        part_s = _median_s(lambda: get(part_url), repeat)
        first_thumb_s = _time_once(lambda: get(part_url + "/thumb.png"))
        thumb_s = _median_s(lambda: get(part_url + "/thumb.png"), repeat)
        ref_batch_s = _median_s(reference_batch, repeat)
        ref_part_s = _median_s(reference_part, repeat)
    return {
        "parts": parts,
        "build_s": build_s,
        "batch_first_s": first_batch_s,
        "batch_s": batch_s,
        "batch_reference_s": ref_batch_s,
        "part_first_s": first_part_s,
        "part_s": part_s,
        "part_reference_s": ref_part_s,
        "thumb_first_s": first_thumb_s,
        "thumb_cached_s": thumb_s,
    }


def _time_once(fn) -> float:
    start = time.perf_counter()
    fn()
    return time.perf_counter() - start


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--parts", type=int, default=500)
    parser.add_argument("--repeat", type=int, default=7)
    args = parser.parse_args(argv)
    sys.path.insert(0, str(ROOT))
    r = run(args.parts, args.repeat)
    print(f"batch of {r['parts']} parts built in {r['build_s']:.1f} s")
    print(
        f"batch page: first {r['batch_first_s']:.3f} s, then median {r['batch_s']:.3f} s (target < 1 s); "
        f"reference (the archive reads alone) {r['batch_reference_s']:.3f} s, ratio {r['batch_s'] / r['batch_reference_s']:.1f}"
    )
    print(
        f"part page:  first {r['part_first_s']:.3f} s, then median {r['part_s']:.3f} s (target < 0.5 s); "
        f"reference (reading its result) {r['part_reference_s']:.4f} s, ratio {r['part_s'] / r['part_reference_s']:.1f}"
    )
    print(f"thumbnail:  first {r['thumb_first_s']:.3f} s (made and cached), then {r['thumb_cached_s']:.4f} s (cache)")
    ok = r["batch_s"] < 1.0 and r["part_s"] < 0.5
    print("targets met" if ok else "TARGETS MISSED")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
