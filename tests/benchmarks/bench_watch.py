"""Benchmark: latency of the line station from "file complete" to "verdict published", against inspect_image alone.

Run from the checkout root::

    python tests/benchmarks/bench_watch.py [--parts 100] [--interval 0.5] [--no-opcua]

A writer renames the demo images (demo_parts/, LW-220 and CP-14, each recipe
in its own station run) into the watched folder one every ``--interval``
seconds, ``--parts`` per recipe. The latency of a part is the time from its
rename (the moment it is complete) to the station's ``on_judged`` callback,
which runs after the JSON line's data and the OPC UA values are written
(served on a loopback port; the writes return when the server holds them).
The reference is ``inspect_image`` alone on the same pixels (already read),
timed in the benchmark's own thread just before each part is dropped (the
station idle, the machine under the same load), and beside it ``read_image`` +
``inspect_image`` (what any judge of a file must do).
Printed: median and 95th percentile of the latency, and of the latency
divided by the reference time of that part's image; the target is at most
1.3 against ``inspect_image`` alone.
"""

from __future__ import annotations

import argparse
import os
import shutil
import socket
import statistics
import tempfile
import threading
import time
from pathlib import Path

from surfinspect.measure.engine import inspect_image
from surfinspect.measure.imaging import read_image
from surfinspect.recipe import load_recipe
from surfinspect.station import watch

ROOT = Path(__file__).resolve().parents[2]
RUNS = {"lw-220-wall-panel.yaml": "lw-220-*.png", "cp-14-cover-plate.yaml": "cp-14-*.png"}


def reference_ms(recipe, image: Path) -> tuple[float, float]:
    """ms of ``inspect_image`` alone (pixels already read), and of ``read_image`` + it, on one image."""
    t0 = time.perf_counter()
    loaded = read_image(image)
    t1 = time.perf_counter()
    inspect_image(loaded.pixels, recipe, image_info=loaded.info)
    t2 = time.perf_counter()
    return (t2 - t1) * 1e3, (t2 - t0) * 1e3


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def station_latencies(
    recipe_path: Path, images: list[Path], parts: int, interval: float, opcua: bool
) -> list[tuple[float, float, float]]:
    """Per part: (latency ms, inspect_image alone ms, read + inspect ms), the references taken just before."""
    recipe = load_recipe(recipe_path)
    for image in images:
        reference_ms(recipe, image)  # warm up
    with tempfile.TemporaryDirectory() as tmp:
        folder, staging = Path(tmp) / "camera", Path(tmp) / "staging"
        folder.mkdir()
        staging.mkdir()
        renamed_at: dict[str, float] = {}
        seen: list[tuple[str, float]] = []
        done = threading.Event()

        def judged(part: watch.JudgedPart, status: watch.StationStatus) -> None:
            seen.append((part.part, time.monotonic()))
            if len(seen) == parts:
                done.set()

        config = watch.WatchConfig(
            recipe_path=recipe_path,
            folder=folder,
            archive_dir=Path(tmp) / "archive",
            batch_id="bench",
            opcua=f"opc.tcp://127.0.0.1:{_free_port()}" if opcua else None,
            stop_after=parts,
        )
        station = watch.Station(config, on_judged=judged)
        runner = threading.Thread(target=station.run)
        runner.start()
        time.sleep(4.0)  # the OPC UA server's start
        references = {}
        for i in range(parts):
            source = images[i % len(images)]
            name = f"{i:04d}-{source.name}"
            references[name] = reference_ms(recipe, source)  # the station is idle now: same machine load
            time.sleep(0.05)
            shutil.copyfile(source, staging / name)  # another folder of the same file system, as a camera does
            renamed_at[name] = time.monotonic()
            os.rename(staging / name, folder / name)
            time.sleep(interval)
        done.wait(120)
        runner.join(300)
        return [((t - renamed_at[name]) * 1e3, *references[name]) for name, t in seen]


def _p95(values: list[float]) -> float:
    return statistics.quantiles(values, n=20, method="inclusive")[-1]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--parts", type=int, default=100)
    parser.add_argument("--interval", type=float, default=0.5)
    parser.add_argument("--no-opcua", action="store_true")
    args = parser.parse_args()
    print(f"{args.parts} parts per recipe, one every {args.interval:g} s, OPC UA {'off' if args.no_opcua else 'on'}")
    for recipe_name, pattern in RUNS.items():
        recipe_path = ROOT / "recipes" / recipe_name
        images = sorted((ROOT / "demo_parts").glob(pattern))
        latencies = station_latencies(recipe_path, images, args.parts, args.interval, not args.no_opcua)
        ms = [v for v, _, _ in latencies]
        alone = [r for _, r, _ in latencies]
        with_read = [r for _, _, r in latencies]
        ratios = [v / r for v, r in zip(ms, alone)]
        ratios_read = [v / r for v, r in zip(ms, with_read)]
        print(
            f"{recipe_name}: {len(ms)} parts; latency median {statistics.median(ms):.1f} ms, p95 {_p95(ms):.1f} ms; "
            f"inspect_image alone median {statistics.median(alone):.1f} ms, read_image + inspect_image "
            f"{statistics.median(with_read):.1f} ms"
        )
        print(
            f"  latency / inspect_image alone, per part: median {statistics.median(ratios):.2f}x, "
            f"p95 {_p95(ratios):.2f}x (target <= 1.3x); latency / (read + inspect): median "
            f"{statistics.median(ratios_read):.2f}x, p95 {_p95(ratios_read):.2f}x"
        )
        print(
            f"  quantile against quantile: median latency / median inspect_image {statistics.median(ms) / statistics.median(alone):.2f}x, "
            f"p95 latency / p95 inspect_image {_p95(ms) / _p95(alone):.2f}x"
        )


if __name__ == "__main__":
    main()
