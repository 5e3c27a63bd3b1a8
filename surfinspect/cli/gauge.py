"""``surfinspect gauge``: crossed gauge R&R study by the ANOVA method.

The study table holds a measured value per row, or (with ``--recipe``) an
image per row, which is inspected first: the value is the lay deviation of
the chosen region in degrees.

Exit code: 0 when the gauge is acceptable, 3 when it is acceptable only with a
documented reason (%GRR 10-30 %: it needs a person's review, as a part that
needs review does), 1 when it is not acceptable, 2 for a bad study table or flag.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import TYPE_CHECKING

from .._lazy import module
from ..errors import InputError
from ..fsutil import write_text_atomic
from ._checks import check_number, check_output_file
from .console import Console

if TYPE_CHECKING:
    from ..qualify import study_table

gauge = module("surfinspect.qualify.gauge")
gauge_forms = module("surfinspect.qualify.gauge_forms")

HELP = "analyse a gauge R&R study table (part, appraiser, trial, value) by the ANOVA method"

#: Exit code by the study's verdict (``GaugeVerdict`` values).
EXIT_BY_VERDICT = {"acceptable": 0, "not-acceptable": 1, "conditional": 3}


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "study", metavar="STUDY.csv", help="study table with columns part, appraiser, trial and value (or image)"
    )
    parser.add_argument(
        "--tolerance-width",
        required=True,
        type=float,
        metavar="W",
        help="the full tolerance width USL - LSL in the units of the values (a recipe tolerance of ±3° is 6)",
    )
    parser.add_argument("--tolerance", type=float, dest="old_tolerance", help=argparse.SUPPRESS)
    parser.add_argument("--recipe", metavar="RECIPE", help="for a table of images: the recipe to inspect them with")
    parser.add_argument(
        "--region",
        metavar="NAME",
        help="for a table of images: the region whose lay deviation is the value (default: the recipe's only region)",
    )
    parser.add_argument("--json", metavar="FILE", help="write the full result as JSON")
    parser.add_argument("--pdf", metavar="FILE", help="write the one-page study report as PDF")
    parser.add_argument(
        "--basis",
        choices=("larger", "tolerance", "total-variation"),
        default="larger",
        help="which %%GRR the verdict is judged on: the larger of %%GRR of tolerance and of total variation "
        "(default), or one of them",
    )
    parser.add_argument(
        "--resolution",
        type=float,
        metavar="R",
        help="the gauge's resolution (default: the smallest step seen between study values)",
    )
    parser.add_argument(
        "--interaction-alpha",
        type=float,
        default=0.25,
        metavar="A",
        help="pool the part x appraiser interaction into repeatability when its p-value is at least A "
        "(default %(default)s: the preliminary test of Bancroft, Biometrics 20(3), 1964, doi:10.2307/2528486)",
    )


def _image_measure(recipe_path: str, region_name: str | None) -> study_table.Measure:
    """A study ``measure`` function: inspect the image, return the region's lay deviation."""
    from ..measure.engine import inspect_image
    from ..measure.imaging import read_image
    from ..recipe import load_recipe

    recipe = load_recipe(recipe_path)
    names = [r.name for r in recipe.regions]
    if region_name is None:
        if len(names) != 1:
            raise InputError(f"--region: {recipe_path} has {len(names)} regions; name one (allowed {', '.join(names)})")
        region_name = names[0]
    elif region_name not in names:
        raise InputError(f"--region: {region_name} not in {recipe_path} (allowed {', '.join(names)})")

    def measure(path: Path) -> float:
        image = read_image(path)
        result = inspect_image(image.pixels, recipe, image_info=image.info)
        region = next(r for r in result.regions if r.name == region_name)
        if region.deviation_deg is None:
            why = "; ".join(region.reasons) or "no measurable lay"
            raise InputError(f"{path}: region {region_name}: no value ({why})")
        return float(region.deviation_deg)

    return measure


def run(args: argparse.Namespace, console: Console) -> int:
    from ..qualify import study_table

    if args.old_tolerance is not None:
        raise InputError(
            "--tolerance: renamed --tolerance-width (the full width USL - LSL; a recipe tolerance of ±3° is 6), "
            "so that it is not read as a ± tolerance"
        )
    check_number("--tolerance-width", args.tolerance_width, lo=0.0, lo_open=True)
    check_number("--resolution", args.resolution, lo=0.0)
    check_number("--interaction-alpha", args.interaction_alpha, lo=0.0, hi=1.0, lo_open=True, hi_open=True)
    if args.region and not args.recipe:
        raise InputError("--region: only with --recipe (for a table of images)")
    inputs = [("the study table", args.study), ("the recipe", args.recipe)]
    if args.json:
        check_output_file("--json", args.json, not_same_as=inputs)
    if args.pdf:
        check_output_file("--pdf", args.pdf, suffixes=(".pdf",), not_same_as=[*inputs, ("the --json file", args.json)])
    measure = _image_measure(args.recipe, args.region) if args.recipe else None
    table = study_table.read_study_csv(args.study, measure=measure)
    study = gauge.gauge_rr(
        table.values,
        tolerance=args.tolerance_width,
        parts=table.parts,
        appraisers=table.appraisers,
        interaction_alpha=args.interaction_alpha,
        resolution=args.resolution,
        basis=args.basis,
        source=table.source,
    )
    report(study, console)
    if args.json:
        write_text_atomic(args.json, json.dumps(gauge_forms.gauge_to_dict(study), indent=2, sort_keys=True) + "\n")
        console.info(f"wrote {args.json}")
    if args.pdf:
        from ..report.gauge_page import write_gauge_pdf

        write_gauge_pdf(study, args.pdf)
        console.info(f"wrote {args.pdf}")
    return EXIT_BY_VERDICT[study.verdict.value]


def report(study: gauge.GaugeStudy, console: Console) -> None:
    """Print the study summary: ANOVA table, variance components, headline figures, verdict."""
    console.info(
        f"gauge study {study.source}: {len(study.parts)} parts x {len(study.appraisers)} appraisers x "
        f"{study.n_trials} trials, tolerance width {study.tolerance:g}"
    )
    console.info(f"model: {study.model_reason}")
    console.info(
        f"ANOVA ({'with the interaction' if study.model == 'interaction' else 'interaction pooled'}; "
        "the JSON holds both tables):"
    )
    console.table(gauge_forms.ANOVA_HEADER, gauge_forms.anova_text_rows(study.anova))
    console.info("")
    console.table(gauge_forms.COMPONENT_HEADER, gauge_forms.component_text_rows(study))
    console.info("")
    console.info(f"%GRR of total variation: {study.grr_percent_of_total_variation:.2f}%")
    console.info(f"%GRR of tolerance:       {study.grr_percent_of_tolerance:.2f}%")
    console.info(f"distinct categories:     {'undefined' if study.ndc is None else study.ndc}")
    console.info(f"verdict: gauge {study.verdict.value}")
    for reason in study.reasons:
        console.info(f"  - {reason}")
    for warning in study.warnings:
        console.warn(warning)
