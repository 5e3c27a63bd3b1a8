"""The summary's worst deviation is the worst of region and patch, and says which; the console says what
its lay and deviation columns hold for crossed and centred lay."""

from __future__ import annotations

import io

import pytest

from surfinspect import inspect_image, parse_recipe
from surfinspect.cli._results_table import print_results
from surfinspect.cli.console import Console
from surfinspect.measure import synth
from surfinspect.report.regions import _PartFigures
from surfinspect.report.summary import _part_row
from surfinspect.results import region_to_dict
from surfinspect.station.runner import PartOutcome

RECIPE = (
    "recipe: t\nrevision: 1\nregions:\n  - name: face\n    rect: [8, 8, 304, 224]\n    lay_deg: 90\n    cell_px: 32\n"
)


def test_worst_deviation_is_the_patch_when_the_region_lay_is_fine():
    # vertical grain with a horizontal re-brushed patch (the demo's LW-220-0004 story): the region's
    # lay is within a fraction of a degree, the patch is about 90 deg off
    img = synth.brushed_panel((240, 320), 90.0, seed=8, patch_rect=(128, 96, 96, 64), patch_lay_deg=0.0)
    part = inspect_image(img, parse_recipe(RECIPE))
    region = part.regions[0]
    assert abs(region.deviation_deg) < 1.0 and region.patches
    worst_patch = max((p.deviation_deg for p in region.patches), key=abs)
    row = _part_row(0, _PartFigures(part, tuple(region_to_dict(r) for r in part.regions)))
    assert row[5].endswith("(patch)") and abs(worst_patch) > 80
    assert row[5].startswith(("+", "-", "−")) and f"{abs(round(worst_patch, 2)):.2f}" in row[5]


def test_worst_deviation_is_the_region_when_no_patch_is_worse():
    part = inspect_image(synth.brushed_panel((240, 320), 91.0, seed=3), parse_recipe(RECIPE))  # no patch
    row = _part_row(0, _PartFigures(part, tuple(region_to_dict(r) for r in part.regions)))
    assert row[5].endswith("(region)")


@pytest.mark.parametrize(
    "lay, says",
    [
        ("lay: crossed\n    lay_deg: [30, 120]", "both peaks; the larger deviation of the two"),
        ("lay: circular\n    centre: [160, 120]", "no one lay; mean cell deviation from the tangent"),
        ("lay_deg: 45", "region lay; its deviation"),
    ],
)
def test_console_says_what_the_columns_hold(lay, says):
    recipe = parse_recipe(f"recipe: t\nrevision: 1\nregions:\n  - name: face\n    rect: [8, 8, 304, 224]\n    {lay}\n")
    part = inspect_image(synth.brushed_panel((240, 320), 45.0, seed=1), recipe)
    out = io.StringIO()
    print_results(Console(out=out, err=io.StringIO()), [PartOutcome("p.png", "p", result=part, name="p.png")])
    text = out.getvalue()
    assert "lay and deviation are" in text.splitlines()[0] and says in text
    if "crossed" in lay:
        assert " / " in text.splitlines()[2]  # both peaks in the lay column


def test_the_figures_line_is_words_not_a_python_dict():
    from surfinspect.report.regions import _figures_text

    part = inspect_image(synth.brushed_panel((240, 320), 91.0, seed=3), parse_recipe(RECIPE))
    d = region_to_dict(part.regions[0])
    assert isinstance(d["extra"]["uncertainty_budget"], dict)  # the result file nests the budget
    text = _figures_text(part.regions[0], d)
    assert not any(ch in text for ch in "{}[]_") and "': " not in text, text
    budget = d["extra"]["uncertainty_budget"]
    assert f"statistical {budget['statistical_deg']:.2f}°" in text and "standard uncertainties:" in text
