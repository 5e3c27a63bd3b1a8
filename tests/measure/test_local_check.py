"""The local check: one default cell size, partial and unmeasured cells, small patches found."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest
from recipe_helpers import directional_recipe

from surfinspect import inspect_image, parse_recipe
from surfinspect.measure import synth
from surfinspect.measure.cells import cell_sums, merge_edge_slivers, merge_outline_slivers
from surfinspect.measure.engine import frame_for, region_masks
from surfinspect.measure.judge import CELL_MIN_COVER
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


@pytest.mark.parametrize("shape", ["circle: [224, 224, 170]", "annulus: [224, 224, 80, 170]"])
def test_slivers_at_a_curved_outline_are_merged_so_every_pixel_is_in_a_checked_cell(shape):
    # Analytic truth: the region's own mask (region_masks) and a 48 px re-brushed patch at lay + 90
    # centred on the outer outline at 60 deg, half of it inside the region (synth.brushed_panel)
    lay, cell = 30.0, 24
    x, y = int(224 + 170 * np.cos(np.radians(60))) - 24, int(224 - 170 * np.sin(np.radians(60))) - 24
    img = synth.brushed_panel(SHAPE, lay, seed=3, shading=0.0, patch_rect=(x, y, 48, 48), patch_lay_deg=lay + 90.0)
    recipe = parse_recipe(f"recipe: t\nrevision: 1\nregions:\n  - name: r\n    {shape}\n    lay_deg: {lay}\n")
    frame, _ = frame_for(recipe, img)
    bbox, mask, _, _ = region_masks(recipe.regions[0], frame, img.shape)
    sums = merge_edge_slivers(cell_sums(img, mask, bbox, cell_px=cell))
    assert ((sums.region_area > 0) & (sums.region_area < cell * cell / 2)).sum() > 10  # the outline leaves slivers
    merged = merge_outline_slivers(sums)
    # no pixel and no energy lost; every cell left holds at least half a cell of the region
    assert merged.region_area.sum() == mask.sum() and merged.jxx.sum() == pytest.approx(sums.jxx.sum())
    held = merged.region_area[merged.region_area > 0]
    assert held.min() >= cell * cell / 2 and (merged.area[merged.region_area > 0] >= CELL_MIN_COVER * cell**2).all()
    # every region pixel's cell is such a cell, or was merged into one next to it
    n_rows, n_cols = merged.area.shape
    rows, cols = np.nonzero(mask)  # the last row and column of cells hold the box's edge (merge_edge_slivers)
    flat = np.minimum(rows // cell, n_rows - 1) * n_cols + np.minimum(cols // cell, n_cols - 1)
    holder = np.where(merged.merged_into.ravel()[flat] >= 0, merged.merged_into.ravel()[flat], flat)
    assert (merged.region_area.ravel()[holder] >= cell * cell / 2).all()
    assert np.abs(holder // n_cols - flat // n_cols).max() <= 2 and np.abs(holder % n_cols - flat % n_cols).max() <= 2
    # the engine checks them all: every cell with region pixels has a coherence, and the rim patch is found
    region = inspect_image(img, recipe).regions[0]
    assert np.isfinite(region.cells.coherence[sums.region_area > 0]).all()
    assert any(p.bbox_px[0] <= x + 24 <= p.bbox_px[0] + p.bbox_px[2] for p in region.patches), region.patches
    assert any(p.bbox_px[1] <= y + 24 <= p.bbox_px[1] + p.bbox_px[3] for p in region.patches), region.patches
