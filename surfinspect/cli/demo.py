"""surfinspect demo: run the demo scenario on the bundled demo parts."""

from __future__ import annotations

import argparse
from pathlib import Path

from ..errors import InputError
from ..fsutil import OutputFolder
from ._checks import load_recipe
from .console import Console

HELP = "run the demo scenario (LW-220 wall panels, CP-14 cover plates) and write its results and reports"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--out", "-o", default="demo-out", metavar="DIR", help="output folder (default: %(default)s)")
    p.add_argument("--project", metavar="DIR", help="folder holding recipes/ and demo_parts/ (default: found)")
    p.add_argument("--regenerate", action="store_true", help="write the demo images into demo_parts/ again, then run")
    p.add_argument(
        "--overwrite",
        action="store_true",
        help="write into a folder holding other files, removing first what surfinspect wrote there before "
        "(the demo's own earlier output is replaced without it)",
    )


def _project_dir(given: str | None) -> Path:
    candidates = [Path(given)] if given else [Path.cwd(), Path(__file__).resolve().parents[2]]
    for c in candidates:
        if (c / "recipes").is_dir() and (c / "demo_parts").is_dir():
            return c
    where = given or "the current folder or the source checkout"
    raise InputError(
        f"{where}: no recipes/ and demo_parts/ folders found (run the demo from the project checkout, or give --project DIR)"
    )


def run(args: argparse.Namespace, console: Console) -> int:
    from ..station.demo import DEMO_PARTS, make_demo_parts
    from ..station.runner import run_exit_code, verdict_counts

    project = _project_dir(args.project)
    parts_dir = project / "demo_parts"
    if args.regenerate or not all((parts_dir / p.file).exists() for p in DEMO_PARTS):
        make_demo_parts(parts_dir)
        console.info(f"demo images written to {parts_dir}")
    folder = OutputFolder(args.out, "--out", overwrite=args.overwrite, owner="demo").claim()
    try:
        all_outcomes = _run_scenario(project, parts_dir, folder.path, console)
    finally:
        written = folder.finish()
    counts = verdict_counts(o.result for o in all_outcomes if o.result is not None)
    code = run_exit_code(all_outcomes)
    console.info("")  # a blank line before the summary (info escapes a newline inside a line)
    console.info(
        f"demo: {counts['accept']} accept, {counts['reject']} reject, {counts['review']} review; "
        f"wrote {len(written)} file(s) to {folder.path}/ (exit code {code}: the demo batch holds rejects and a blank on purpose)"
    )
    return code


def _run_scenario(project: Path, parts_dir: Path, out: Path, console: Console) -> list:
    from ..station.demo import DEMO_PARTS
    from ..station.runner import inspect_path, output_stems, write_part_report
    from ._results_table import print_results

    all_outcomes = []
    by_recipe: dict[str, list] = {}
    for p in DEMO_PARTS:
        by_recipe.setdefault(p.recipe, []).append(p)
    for recipe_file, parts in by_recipe.items():
        recipe = load_recipe(project / "recipes" / recipe_file, console)
        sub = out / recipe.name
        paths = [parts_dir / p.file for p in parts]
        outcomes, pixels = [], []
        for path, stem in zip(paths, output_stems(paths)):
            o, px = inspect_path(path, recipe, sub, stem, keep_pixels=True)
            if o.error:
                console.error(o.error)
            outcomes.append(o)
            pixels.append(px)
        console.info("")
        console.info(f"{recipe.name} (revision {recipe.revision}):")
        print_results(console, outcomes)
        done = [(o.result, px) for o, px in zip(outcomes, pixels) if o.result is not None]
        if done:
            write_part_report(sub / "report.pdf", [r for r, _ in done], [px for _, px in done], operator="demo")
            console.info(f"report: {sub / 'report.pdf'}")
        all_outcomes.extend(outcomes)
    return all_outcomes
