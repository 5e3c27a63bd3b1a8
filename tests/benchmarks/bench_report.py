"""Benchmark: PDF report time per part page, and overlay PNG time, for 12-megapixel images.

Run from the checkout root::

    python tests/benchmarks/bench_report.py [--parts 3] [--cell 32]

Each part is a synthetic 4000 x 3000 brushed panel (one full-frame region,
a re-brushed patch across the grain) inspected by the engine; the engine's
time is not counted. Prints the seconds of a one-part report, of an
n-part report, the time per part page from their difference (target < 1 s),
the PDF bytes per part page, and the time of one full-size overlay PNG.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from surfinspect.measure import synth
from surfinspect.measure.engine import inspect_image
from surfinspect.recipe import parse_recipe
from surfinspect.report.overlay import write_overlay_png
from surfinspect.report.pdf import render_report

SHAPE = (3000, 4000)  # rows, cols: 12 megapixels
WHEN = datetime(2031, 4, 2, 9, 0, tzinfo=timezone.utc)


def recipe_text(cell_px: int) -> str:
    return f"""
recipe: lw-220-wall-panel
revision: 3
datum: image
regions:
  - name: face
    rect: [20, 20, {SHAPE[1] - 40}, {SHAPE[0] - 40}]
    lay_deg: 90
    tolerance_deg: 3.0
    min_coherence: 0.2
    max_deviating_fraction: 0.02
    cell_px: {cell_px}
"""


def best_of(runs: int, fn) -> float:
    times = []
    for _ in range(runs):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--parts", type=int, default=3)
    parser.add_argument("--cell", type=int, default=32, help="cell side in px (more cells, more glyphs)")
    parser.add_argument("--runs", type=int, default=2)
    args = parser.parse_args()
    recipe = parse_recipe(recipe_text(args.cell))
    pixels = synth.brushed_panel(SHAPE, 90.0, seed=5, patch_rect=(1600, 1200, 500, 400), patch_lay_deg=0.0)
    part = inspect_image(pixels, recipe, name="LW-220-BENCH")
    cells = part.regions[0].cells
    print(
        f"image {SHAPE[1]}x{SHAPE[0]} px, {cells.lay_deg.size} cells of {args.cell} px, "
        f"{len(part.regions[0].patches)} patch(es), verdict {part.verdict.value}"
    )
    one = best_of(args.runs, lambda: render_report([part], [pixels], report_id="bench", generated_at=WHEN))
    many_parts = [part] * args.parts
    # pictures differ per part (shifted copies), as in a real batch: identical pictures would be
    # stored once in the PDF and hide the cost of the embedded photo
    pictures = [np.roll(pixels, 7 * k, axis=1) for k in range(args.parts)]
    many = best_of(args.runs, lambda: render_report(many_parts, pictures, report_id="bench", generated_at=WHEN))
    size_one = len(render_report([part], [pixels], report_id="bench", generated_at=WHEN))
    size_many = len(render_report(many_parts, pictures, report_id="bench", generated_at=WHEN))
    per_page = (many - one) / max(1, args.parts - 1)
    print(f"report, 1 part:            {one:.3f} s")
    print(f"report, {args.parts} parts:           {many:.3f} s")
    print(f"per part page:             {per_page:.3f} s   (target < 1 s)")
    print(f"PDF bytes per part page:   {(size_many - size_one) / max(1, args.parts - 1):,.0f}")
    with tempfile.TemporaryDirectory() as tmp:
        png = Path(tmp) / "bench.overlay.png"
        t_png = best_of(args.runs, lambda: write_overlay_png(png, pixels, part))
        print(f"overlay PNG, full size:    {t_png:.3f} s   ({png.stat().st_size:,} bytes)")


if __name__ == "__main__":
    main()
