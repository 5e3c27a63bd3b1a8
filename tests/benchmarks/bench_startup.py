"""Benchmark: start-up time of the command line against ``python -c pass``, measured in the same run.

Run from the checkout root (with the package installed)::

    python tests/benchmarks/bench_startup.py [--repeat 7]

Prints the median wall time of ``python -c pass``, then of ``surfinspect --version``,
``surfinspect check recipes/*.yaml`` and ``surfinspect --help`` as ratios to it (target: at most
4x each), and the wall time of ``surfinspect inspect`` of one demo part into a new folder
(target: at most 1.5 s, JSON, overlay and the PDF report included).

Every command runs with Python's bytecode cache, as an installed package does (pip compiles the
modules at install time): ``PYTHONDONTWRITEBYTECODE`` is removed from the commands' environment, so
the warm-up run writes ``__pycache__`` and the timed runs read it. ``--no-bytecode-cache`` measures a
checkout without it instead: it removes the package's ``__pycache__`` folders and sets
``PYTHONDONTWRITEBYTECODE=1``, so every run compiles every surfinspect module it imports (Python
still reads a cache that exists, which is why the folders are removed).
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
CLI = [sys.executable, "-m", "surfinspect"]


ENV = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}


def timed(argv: list[str]) -> float:
    start = time.perf_counter()
    subprocess.run(argv, cwd=ROOT, capture_output=True, check=False, env=ENV)
    return time.perf_counter() - start


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=15)
    ap.add_argument("--no-bytecode-cache", action="store_true", help="compile the package's modules on every run")
    args = ap.parse_args()
    if args.no_bytecode_cache:
        ENV["PYTHONDONTWRITEBYTECODE"] = "1"
        for cache in (ROOT / "surfinspect").rglob("__pycache__"):
            shutil.rmtree(cache)
    print(f"bytecode cache: {'off' if ENV.get('PYTHONDONTWRITEBYTECODE') else 'on'} (PYTHONDONTWRITEBYTECODE)")
    recipes = sorted(str(p) for p in (ROOT / "recipes").glob("*.yaml"))
    commands = {
        "python -c pass": [sys.executable, "-c", "pass"],
        "surfinspect --version": [*CLI, "--version"],
        "surfinspect check recipes/*.yaml": [*CLI, "check", *recipes],
        "surfinspect --help": [*CLI, "--help"],
    }
    times: dict[str, list[float]] = {k: [] for k in commands}
    for argv in commands.values():  # warm the file cache
        timed(argv)
    for _ in range(args.repeat):  # interleaved, so that a busy machine slows every command alike
        for label, argv in commands.items():
            times[label].append(timed(argv))
    base_med, base_min = statistics.median(times["python -c pass"]), min(times["python -c pass"])
    print(f"python -c pass: median {1000 * base_med:.1f} ms, best {1000 * base_min:.1f} ms (the reference)")
    for label in list(commands)[1:]:
        med, best = statistics.median(times[label]), min(times[label])
        print(
            f"{label}: median {1000 * med:.1f} ms = {med / base_med:.1f}x, best {1000 * best:.1f} ms = "
            f"{best / base_min:.1f}x python -c pass (target <= 4x)"
        )
    part = ROOT / "demo_parts" / "lw-220-0001.png"
    recipe = ROOT / "recipes" / "lw-220-wall-panel.yaml"
    times, cpu = [], []
    for _ in range(max(3, args.repeat // 2)):
        with tempfile.TemporaryDirectory() as tmp:
            before = resource.getrusage(resource.RUSAGE_CHILDREN)
            start = time.perf_counter()
            subprocess.run(
                [*CLI, "inspect", str(recipe), str(part), "--out", f"{tmp}/out"], capture_output=True, env=ENV
            )
            times.append(time.perf_counter() - start)
            after = resource.getrusage(resource.RUSAGE_CHILDREN)
            cpu.append(after.ru_utime - before.ru_utime + after.ru_stime - before.ru_stime)
    print(
        f"surfinspect inspect (one demo part, with its PDF): median {statistics.median(times):.2f} s wall, "
        f"best {min(times):.2f} s; CPU {statistics.median(cpu):.2f} s (target <= 1.5 s wall)"
    )
    print(f"load average while measuring: {', '.join(f'{v:.1f}' for v in os.getloadavg())} (2 cores)")


if __name__ == "__main__":
    main()
