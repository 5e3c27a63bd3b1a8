"""Benchmark: latency of the line station from "file complete" to "verdict published", against inspect_image alone.

Run from the checkout root::

    python tests/benchmarks/bench_watch.py [--parts 100] [--interval 0.25] [--no-opcua]

A writer renames the demo images (demo_parts/, LW-220 and CP-14, each recipe
in its own station run) into the watched folder one every ``--interval``
seconds, ``--parts`` per recipe. The latency of a part is the time from its
rename (the moment it is complete) to the station's ``on_judged`` callback,
which runs after the JSON line's data and the OPC UA values are written
(served on a loopback port; the writes return when the server holds them).
The reference is ``inspect_image`` alone on the same pixels (already read,
median of 5 runs per image, in the same process), and beside it
``read_image`` + ``inspect_image`` (what any judge of a file must do).
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


def reference_ms(recipe_path: Path, images: list[Path], repeats: int = 5) -> dict[str, tuple[float, float]]:
    """Per image: median ms of ``inspect_image`` alone (pixels already read), and of ``read_image`` + it."""
    recipe = load_recipe(recipe_path)
    out = {}
    for image in images:
        inspect_only, read_and_inspect = [], []
        for _ in range(repeats + 1):  # the first round warms up
            t0 = time.perf_counter()
            loaded = read_image(image)
            t1 = time.perf_counter()
            inspect_image(loaded.pixels, recipe, image_info=loaded.info)
            t2 = time.perf_counter()
            inspect_only.append((t2 - t1) * 1e3)
            read_and_inspect.append((t2 - t0) * 1e3)
        out[image.name] = (statistics.median(inspect_only[1:]), statistics.median(read_and_inspect[1:]))
    return out


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def station_latencies(
    recipe_path: Path, images: list[Path], parts: int, interval: float, opcua: bool
) -> list[tuple[str, float]]:
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
        for i in range(parts):
            source = images[i % len(images)]
            name = f"{i:04d}-{source.name}"
            shutil.copyfile(source, staging / name)  # another folder of the same file system, as a camera does
            renamed_at[name] = time.monotonic()
            os.rename(staging / name, folder / name)
            time.sleep(interval)
        done.wait(120)
        runner.join(300)
        return [(name, (t - renamed_at[name]) * 1e3) for name, t in seen]


def _p95(values: list[float]) -> float:
    return statistics.quantiles(values, n=20, method="inclusive")[-1]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--parts", type=int, default=100)
    parser.add_argument("--interval", type=float, default=0.25)
    parser.add_argument("--no-opcua", action="store_true")
    args = parser.parse_args()
    print(f"{args.parts} parts per recipe, one every {args.interval:g} s, OPC UA {'off' if args.no_opcua else 'on'}")
    for recipe_name, pattern in RUNS.items():
        recipe_path = ROOT / "recipes" / recipe_name
        images = sorted((ROOT / "demo_parts").glob(pattern))
        ref = reference_ms(recipe_path, images)
        latencies = station_latencies(recipe_path, images, args.parts, args.interval, not args.no_opcua)
        ms = [v for _, v in latencies]
        alone = [ref[name.split("-", 1)[1]][0] for name, _ in latencies]
        with_read = [ref[name.split("-", 1)[1]][1] for name, _ in latencies]
        ratios = [v / r for v, r in zip(ms, alone)]
        ratios_read = [v / r for v, r in zip(ms, with_read)]
        print(
            f"{recipe_name}: {len(ms)} parts; latency median {statistics.median(ms):.1f} ms, p95 {_p95(ms):.1f} ms; "
            f"inspect_image alone median {statistics.median(alone):.1f} ms, read_image + inspect_image "
            f"{statistics.median(with_read):.1f} ms"
        )
        print(
            f"  latency / inspect_image alone: median {statistics.median(ratios):.2f}x, p95 {_p95(ratios):.2f}x "
            f"(target <= 1.3x); latency / (read + inspect): median {statistics.median(ratios_read):.2f}x, "
            f"p95 {_p95(ratios_read):.2f}x"
        )


if __name__ == "__main__":
    main()
