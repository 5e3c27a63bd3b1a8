"""surfinspect check RECIPE: validate a recipe without an image."""

from __future__ import annotations

import argparse

from ._checks import load_recipe
from .console import Console

HELP = "validate recipe files without an image (exit 0 when valid, 2 listing every problem)"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("recipes", nargs="+", metavar="RECIPE", help="recipe YAML files")


def run(args: argparse.Namespace, console: Console) -> int:
    from ..errors import RecipeError

    problems: list[str] = []
    for path in args.recipes:
        try:
            r = load_recipe(path, console)
        except RecipeError as exc:
            problems.extend(exc.problems)
            continue
        regions = ", ".join(
            f"{g.name} ({g.lay.value}{'' if not g.lay_deg else ' ' + '/'.join(f'{a:g}°' for a in g.lay_deg)})"
            for g in r.regions
        )
        console.info(f"{path}: ok: recipe {r.name} revision {r.revision}, datum {r.datum}, regions: {regions}")
    if problems:
        from ..errors import InputError

        raise InputError(problems[0], problems)
    return 0
