"""The local check: one default cell size, partial and unmeasured cells, small patches found."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest
from recipe_helpers import directional_recipe

from surfinspect import inspect_image, parse_recipe
from surfinspect.measure import synth
from surfinspect.measure.cells import cell_sums, merge_edge_slivers
from surfinspect.recipe import REGION_DEFAULTS
from surfinspect.results import RegionVerdict

README = Path(__file__).resolve().parents[2] / "README.md"
SHAPE = (448, 448)


def _default_recipe(rect, lay):
    x, y, w, h = rect
    return parse_recipe(
        f"recipe: t\nrevision: 1\nregions:\n  - name: face\n    rect: [{x}, {y}, {w}, {h}]\n    lay_deg: {lay}\n"
    )


def test_default_cell_size_is_the_same_in_code_and_readme():
    documented = re.findall(r"cell_px: (\d+) +# cell size of the local check \(default (\d+)\)", README.read_text())
    assert documented and all(int(default) == REGION_DEFAULTS["cell_px"] for _, default in documented)


@pytest.mark.parametrize("offset", [0, 7, 12, 19])
@pytest.mark.parametrize("lay", [30.0, 75.0])
def test_a_48_px_cross_grain_patch_is_found_at_the_default_cell_size(offset, lay):
    # Analytic truth: a 48 x 48 px re-brushed patch at lay + 90 pasted into the panel (synth.brushed_panel)
    x, y = 200 + offset, 150 + offset
    img = synth.brushed_panel(SHAPE, lay, seed=offset, shading=0.0, patch_rect=(x, y, 48, 48), patch_lay_deg=lay + 90.0)
    region = inspect_image(img, _default_recipe((32, 32, 384, 384), lay)).regions[0]
    assert region.patches, region.reasons
    p = region.patches[0]
    px, py, pw, ph = p.bbox_px
    assert px <= x + 24 and py <= y + 24 and px + pw >= x + 24 and py + ph >= y + 24  # the box holds the patch's centre
    assert abs(((p.lay_deg - lay - 90.0 + 90.0) % 180.0) - 90.0) < 10.0


def test_a_sliver_at_the_edge_is_merged_so_every_pixel_is_checked():
    img = synth.brushed_panel((160, 160), 30.0, seed=1, shading=0.0)
    sums = cell_sums(img, np.ones((100, 110), bool), (20, 20, 110, 100), cell_px=24)
    assert sums.area.shape == (5, 5)  # 100 = 4 x 24 + 4, 110 = 4 x 24 + 14
    merged = merge_edge_slivers(sums)
    assert merged.area.shape == (4, 5)  # the 4 px strip is merged, the 14 px one is a cell of its own
    assert merged.region_area.sum() == 100 * 110 and merged.jxx.sum() == pytest.approx(sums.jxx.sum())
    boxes = merged.cell_boxes()
    assert boxes[-1, 0, 3] == 28 and boxes[0, -1, 2] == 14
    region = inspect_image(img, directional_recipe((20, 20, 110, 100), 30.0, cell_px=24)).regions[0]
    assert np.isfinite(region.cells.lay_deg).all()  # every cell measured and checked


def test_a_40_px_region_has_an_uncertainty():
    img = synth.brushed_panel((120, 120), 30.0, seed=2, shading=0.0)
    region = inspect_image(img, _default_recipe((40, 40, 40, 40), 30.0)).regions[0]
    assert region.verdict is RegionVerdict.PASS, region.reasons
    assert region.uncertainty_deg is not None and region.uncertainty_deg > abs(region.deviation_deg)


def test_unmeasurable_cells_are_not_deviating_and_too_many_send_the_region_to_review():
    # the left 45 % of the region is polished (no texture): unmeasured, not deviating
    lay = 30.0
    img = synth.brushed_panel(SHAPE, lay, seed=5, shading=0.0)
    blank = synth.shade_and_noise(np.zeros(SHAPE, np.float32), seed=5, shading=0.0)  # same mean level, no edge
    img[:, :205] = blank[:, :205]
    region = inspect_image(img, _default_recipe((32, 32, 384, 384), lay)).regions[0]
    assert region.patches == ()
    assert region.verdict is RegionVerdict.REVIEW
    assert "could not be measured" in region.reasons[0]
    assert 0.35 < region.extra["unmeasured_fraction"] < 0.55
