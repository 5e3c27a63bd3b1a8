"""``surfinspect bias``: bias, repeatability and linearity from images of known-angle targets.

Each image is inspected with the recipe; every region's measured lay is paired
with its nominal angle (the region's ``lay_deg``, or ``--nominal-lay`` for
all). Exit code: 0 when every measurement was made (and, with ``--max-bias``,
every nominal's |bias| is within it), 1 when a bias exceeds ``--max-bias``,
3 when some region had no measurable texture (none rejected), 2 for bad input.
"""

from __future__ import annotations

import argparse
import json
from typing import TYPE_CHECKING

from ..errors import InputError
from ..fsutil import write_text_atomic
from ._checks import check_number, check_output_file, load_recipe
from .console import Console

if TYPE_CHECKING:
    from ..qualify import bias

HELP = "measure known-angle target images: bias and repeatability per nominal angle, linearity line"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("recipe", metavar="RECIPE", help="recipe whose regions cover the target gratings")
    parser.add_argument("images", metavar="IMAGE", nargs="+", help="target images (repeat images for repeatability)")
    parser.add_argument(
        "--nominal-lay",
        type=float,
        metavar="DEG",
        help="nominal lay of every region (default: each region's lay_deg in the recipe)",
    )
    parser.add_argument("--region", action="append", metavar="NAME", help="use only this region (repeatable)")
    parser.add_argument(
        "--max-bias", type=float, metavar="DEG", help="exit 1 when any nominal's |bias| exceeds DEG (> 0)"
    )
    parser.add_argument("--json", metavar="FILE", help="write the measurements and the study as JSON")


def run(args: argparse.Namespace, console: Console) -> int:
    from ..measure.engine import inspect_image
    from ..measure.imaging import read_image
    from ..measure.orientation import wrap_deviation
    from ..qualify import bias, gauge_forms
    from ..results import EXIT_CODES, PartVerdict

    check_number("--max-bias", args.max_bias, lo=0.0, lo_open=True)
    if args.nominal_lay is not None and not 0.0 <= args.nominal_lay < 180.0:
        raise InputError(f"--nominal-lay: {args.nominal_lay:g} is outside the allowed range 0 <= lay < 180 degrees")
    if args.json:
        inputs = [("the recipe", args.recipe), *(("an input image", image) for image in args.images)]
        check_output_file("--json", args.json, not_same_as=inputs)
    recipe = load_recipe(args.recipe, console)
    names = [r.name for r in recipe.regions]
    wanted = args.region or names
    unknown = [n for n in wanted if n not in names]
    if unknown:
        raise InputError(f"--region: {', '.join(unknown)} not in {args.recipe} (allowed {', '.join(names)})")

    measurements = []
    missing = []
    for path in args.images:
        image = read_image(path)
        result = inspect_image(image.pixels, recipe, image_info=image.info)
        for region in result.regions:
            if region.name not in wanted:
                continue
            nominal = args.nominal_lay if args.nominal_lay is not None else region.expected_lay_deg
            if not isinstance(nominal, (int, float)):
                raise InputError(
                    f"{args.recipe}: regions.{region.name}: no single nominal lay (got {nominal!r}); give --nominal-lay"
                )
            if region.lay_deg is None:
                missing.append((path, region.name))
                console.warn(f"{path}: region {region.name}: no measurable texture; left out")
                continue
            measurements.append(
                {
                    "image": str(path),
                    "region": region.name,
                    "nominal_deg": float(nominal),
                    "measured_deg": float(region.lay_deg),
                    "deviation_deg": float(wrap_deviation(region.lay_deg, nominal)),
                }
            )
    if not measurements:
        raise InputError("bias: no region of any image had measurable texture; nothing to analyse")
    study = bias.bias_study([m["nominal_deg"] for m in measurements], [m["measured_deg"] for m in measurements])
    _report(study, console)

    exceeded = []
    if args.max_bias is not None:
        exceeded = [b for b in study.per_nominal if abs(b.bias_deg) > args.max_bias]
        for b in exceeded:
            console.info(f"bias at {b.nominal_deg:g}° is {b.bias_deg:+.4f}°, beyond ±{args.max_bias:g}°")
    if args.json:
        doc = gauge_forms.bias_to_dict(study)
        doc["recipe"] = {"path": str(args.recipe), "name": recipe.name, "revision": recipe.revision}
        doc["measurements"] = measurements
        doc["missing"] = [{"image": str(p), "region": n} for p, n in missing]
        write_text_atomic(args.json, json.dumps(doc, indent=2, sort_keys=True) + "\n")
        console.info(f"wrote {args.json}")
    if exceeded:
        return EXIT_CODES[PartVerdict.REJECT]
    if missing:
        return EXIT_CODES[PartVerdict.REVIEW]
    return EXIT_CODES[PartVerdict.ACCEPT]


def _fmt(v: float | None, spec: str = "+.4f") -> str:
    return "-" if v is None else format(v, spec)


def _report(study: bias.BiasStudy, console: Console) -> None:

    level = f"{100 * study.confidence:g}%"
    console.table(
        ["nominal °", "n", "mean measured °", "bias °", "repeatability °", f"bias {level} CI °", "p (bias = 0)"],
        [
            [
                f"{b.nominal_deg:g}",
                b.n,
                f"{b.mean_measured_deg:.4f}",
                _fmt(b.bias_deg),
                _fmt(b.repeatability_deg, ".4f"),
                "-" if b.ci_deg is None else f"{b.ci_deg[0]:+.4f} .. {b.ci_deg[1]:+.4f}",
                _fmt(b.p_value, ".4f"),
            ]
            for b in study.per_nominal
        ],
    )
    lin = study.linearity
    if lin is None:
        console.info("linearity: needs at least 2 nominal angles and 3 measurements")
        return
    console.info(
        f"linearity: bias = {lin.slope:+.6f} x nominal {lin.intercept:+.4f}°  (n = {lin.n}, R² = {lin.r_squared:.3f})"
    )
    console.info(
        f"  slope {level} CI {lin.slope_ci[0]:+.6f} .. {lin.slope_ci[1]:+.6f} per degree (p = {lin.slope_p_value:.4f})"
    )
    console.info(f"  intercept {level} CI {lin.intercept_ci[0]:+.4f} .. {lin.intercept_ci[1]:+.4f}°")
