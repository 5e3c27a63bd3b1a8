"""surfinspect inspect RECIPE IMAGE... --out DIR"""

from __future__ import annotations

import argparse
from pathlib import Path

from ..fsutil import OutputFolder
from ._checks import load_recipe
from ._options import add_overwrite_option
from .console import Console

HELP = "measure and judge the lay of one or more part images against a recipe"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("recipe", help="recipe YAML file")
    p.add_argument("images", nargs="+", metavar="IMAGE", help="part images (PNG, TIFF, JPEG, BMP)")
    p.add_argument("--out", "-o", default="surfinspect-out", metavar="DIR", help="output folder (default: %(default)s)")
    p.add_argument("--operator", metavar="NAME", help="who inspected, printed in the report")
    p.add_argument("--no-report", action="store_true", help="write JSON and overlays only, no PDF")
    add_overwrite_option(p)


def run(args: argparse.Namespace, console: Console) -> int:
    from ..results import NOT_INSPECTED
    from ..station.runner import (
        inspect_path,
        output_stems,
        part_names,
        run_exit_code,
        verdict_counts,
        write_part_report,
    )
    from ._results_table import print_results

    recipe = load_recipe(args.recipe, console)
    folder = OutputFolder(args.out, "--out", overwrite=args.overwrite).claim()
    outcomes, pixels = [], []
    try:
        for path, stem, name in zip(args.images, output_stems(args.images), part_names(args.images)):
            outcome, px = inspect_path(path, recipe, args.out, stem, keep_pixels=not args.no_report, name=name)
            if outcome.error:
                console.error(outcome.error)
            outcomes.append(outcome)
            pixels.append(px)
        print_results(console, outcomes)
        done = [(o.result, px) for o, px in zip(outcomes, pixels) if o.result is not None]
        if done and not args.no_report:
            report = Path(args.out) / "report.pdf"
            write_part_report(report, [r for r, _ in done], [px for _, px in done], operator=args.operator)
    finally:
        written = folder.finish()
    counts = verdict_counts(r for r, _ in done)
    errors = sum(o.result is None for o in outcomes)
    console.info(
        f"{counts['accept']} accept, {counts['reject']} reject, {counts['review']} review"
        + (f", {errors} {NOT_INSPECTED} (see the errors above)" if errors else "")
    )
    _say_what_was_written(console, folder.path, written)
    return run_exit_code(outcomes)


def _say_what_was_written(console: Console, out: Path, written: list[Path]) -> None:
    """Name what this run wrote, and nothing when it wrote nothing."""
    if not written:
        console.info(f"nothing written to {out}")
        return
    report = out / "report.pdf"
    if report in written:
        console.info(f"report: {report}")
    console.info(f"wrote {len(written)} file(s) to {out}")
