"""``surfinspect target``: printable reference gratings at known lay angles.

PDF (default): A4 pages at true scale, to print at 100 %. With ``--png``: one
raster sheet at ``--dpi``, the resolution recorded in the file; ``--recipe``
then writes a recipe that measures each grating of that raster.
"""

from __future__ import annotations

import argparse

from ..errors import InputError
from ._checks import check_output_file
from .console import Console

HELP = "render reference gratings at known lay angles (PDF at true scale, or PNG at a stated dpi)"


def _angles(text: str) -> list[float]:
    try:
        return [float(v) for v in text.split(",") if v.strip()]
    except ValueError:
        raise argparse.ArgumentTypeError(f"angles must be numbers separated by commas (got {text!r})") from None


def add_arguments(parser: argparse.ArgumentParser) -> None:
    from ..qualify import targets

    parser.add_argument(
        "--lay",
        required=True,
        type=_angles,
        metavar="DEG,DEG,...",
        help="nominal lay angles in [0, 180), counter-clockwise from +X with +Y up",
    )
    parser.add_argument(
        "--period-mm", required=True, type=float, metavar="P", help="grating period across the lines, mm"
    )
    parser.add_argument(
        "--size-mm", required=True, type=float, nargs=2, metavar=("W", "H"), help="grating width and height, mm"
    )
    parser.add_argument("--out", required=True, metavar="FILE", help="the .pdf (or .png with --png) to write")
    parser.add_argument("--square", action="store_true", help="square-wave gratings (default: sine)")
    parser.add_argument("--png", action="store_true", help="write a PNG raster instead of a PDF")
    low, high = targets.DPI_RANGE
    parser.add_argument(
        "--dpi",
        type=float,
        default=600.0,
        metavar="N",
        help=f"PNG resolution, dots per inch, {low:g} to {high:g} (default %(default)g)",
    )
    parser.add_argument(
        "--raster-dpi",
        type=float,
        default=600.0,
        metavar="N",
        help=f"resolution of the sine rasters inside the PDF, {low:g} to {high:g} (default %(default)g)",
    )
    parser.add_argument("--recipe", metavar="FILE.yaml", help="with --png: also write a recipe measuring each grating")
    parser.add_argument(
        "--tolerance-deg",
        type=float,
        default=0.5,
        metavar="DEG",
        help="tolerance of the regions in the --recipe file, 0 < DEG <= 45 (default %(default)g)",
    )


def run(args: argparse.Namespace, console: Console) -> int:
    from ..qualify import targets

    kind = "square" if args.square else "sine"
    size = (args.size_mm[0], args.size_mm[1])
    if args.recipe and not args.png:
        raise InputError("--recipe: only with --png (pixel positions are known only for a raster)")
    targets.check_dpi(args.dpi, "--dpi")
    targets.check_dpi(args.raster_dpi, "--raster-dpi")
    check_output_file("--out", args.out, suffixes=(".png",) if args.png else (".pdf",))
    if args.recipe:
        targets.check_recipe_tolerance(args.tolerance_deg)
        check_output_file(
            "--recipe", args.recipe, suffixes=(".yaml", ".yml"), not_same_as=[("the --out file", args.out)]
        )
    if args.png:
        sheet, rects = targets.write_target_png(
            args.out,
            args.lay,
            period_mm=args.period_mm,
            size_mm=size,
            dpi=args.dpi,
            kind=kind,
            recipe_path=args.recipe,
            tolerance_deg=args.tolerance_deg,
        )
        console.info(
            f"wrote {args.out}: {len(sheet.gratings)} {kind} gratings, period {args.period_mm:g} mm "
            f"= {args.period_mm * args.dpi / targets.MM_PER_INCH:.2f} px at {args.dpi:g} dpi"
        )
        console.table(
            ["lay", "x px", "y px", "w px", "h px"],
            [[f"{g.lay_deg:g}", *rect] for g, rect in zip(sheet.gratings, rects)],
        )
        if args.recipe:
            console.info(f"wrote {args.recipe}")
        return 0
    from ..qualify.target_pdf import write_target_pdf

    sheets = write_target_pdf(
        args.out, args.lay, period_mm=args.period_mm, size_mm=size, kind=kind, raster_dpi=args.raster_dpi
    )
    count = sum(len(s.gratings) for s in sheets)
    pages = "page" if len(sheets) == 1 else "pages"
    console.info(f"wrote {args.out}: {count} {kind} gratings on {len(sheets)} A4 {pages}, period {args.period_mm:g} mm")
    console.info(f"print at 100 % (no fit to page) and check the {targets.SCALE_BAR_MM:g} mm scale bar with a ruler")
    return 0
