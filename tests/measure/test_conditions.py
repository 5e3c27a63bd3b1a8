"""Photo conditions: clipped glare left out, uneven light removed, the JPEG block grid detected."""

from __future__ import annotations

import numpy as np
import pytest
from recipe_helpers import directional_recipe

from surfinspect import inspect_image, parse_recipe
from surfinspect.measure import synth
from surfinspect.measure.conditions import block_grid, illumination_background, saturated_pixels
from surfinspect.measure.orientation import wrap_deviation
from surfinspect.results import PartVerdict, RegionVerdict

SHAPE = (448, 448)
RECT = (32, 32, 384, 384)
LAYS = [30.0, 75.0]
SEEDS = [0, 1, 2]


def _panel(lay: float, seed: int) -> np.ndarray:
    # Analytic truth for every check here: synth.brushed_panel's lay (Fourier-domain filtering along lay_deg)
    return synth.brushed_panel(SHAPE, lay, seed=seed, shading=0.0)


def _region(img, lay):
    return inspect_image(img, directional_recipe(RECT, lay)).regions[0]


def test_saturated_pixels_grow_by_the_kernel_radius():
    block = np.zeros((20, 20), np.float32)
    block[10, 10] = 1.0
    grown = saturated_pixels(block, 1.0, 4)
    assert grown.sum() == 81 and grown[6:15, 6:15].all()
    assert saturated_pixels(block * 0.5, 1.0, 4) is None
    assert saturated_pixels(block * 0.5, 0.5, 4).sum() == 81  # a recipe saturation_level below full scale


@pytest.mark.parametrize("lay", LAYS)
@pytest.mark.parametrize("seed", SEEDS)
def test_a_small_highlight_is_left_out_and_the_part_accepted(lay, seed):
    img = synth.add_glare(_panel(lay, seed), (150 + 20 * seed, 220), 22)
    region = _region(img, lay)
    assert 0.01 < region.extra["masked_fraction"] < 0.10
    assert region.verdict is RegionVerdict.PASS, region.reasons  # before: 16/16 good panels rejected
    assert abs(region.deviation_deg) < 0.2


@pytest.mark.parametrize("lay", LAYS)
@pytest.mark.parametrize("seed", SEEDS)
def test_much_glare_or_a_tube_light_streak_is_review_never_fail(lay, seed):
    for img in (
        synth.add_glare(_panel(lay, seed), (200, 220), 45),
        synth.add_streak(_panel(lay, seed), lay + 50.0, 10.0 * (seed - 1), 26),
    ):
        region = _region(img, lay)
        assert region.extra["masked_fraction"] > 0.10
        assert region.verdict is RegionVerdict.REVIEW
        assert region.reasons[0].startswith("glare covers ")
        assert abs(region.deviation_deg) < 0.3  # the rest is still measured, and reported


def test_saturation_level_from_the_recipe_masks_a_12_bit_camera_in_a_16_bit_file():
    lay = 30.0
    img = synth.add_glare(_panel(lay, 0), (200, 220), 45) * np.float32(4095 / 65535)  # clips at code 4095
    text = "recipe: t\nrevision: 1\nsaturation_level: {level}\nregions:\n  - name: face\n    rect: [32, 32, 384, 384]\n    lay_deg: 30\n"
    full = inspect_image(img, parse_recipe(text.format(level=1.0))).regions[0]
    camera = inspect_image(img, parse_recipe(text.format(level=4095 / 65535))).regions[0]
    assert full.extra["masked_fraction"] == 0.0
    assert camera.extra["masked_fraction"] > 0.10 and camera.verdict is RegionVerdict.REVIEW


def test_background_of_a_ramp_is_the_ramp():
    # a Gaussian passes a linear function unchanged (analytic): the background equals the ramp
    rows, cols = np.mgrid[0:200, 0:240].astype(np.float32)
    ramp = 0.2 + 0.001 * cols + 0.0005 * rows
    bg = illumination_background(ramp, 12.0)
    inner = bg.sample(40, 160, 40, 200) - ramp[40:160, 40:200]
    assert np.abs(inner).max() < 1e-4


@pytest.mark.parametrize("lay", LAYS)
@pytest.mark.parametrize("seed", SEEDS)
def test_uneven_light_changes_neither_lay_nor_verdict(lay, seed):
    clean = _region(_panel(lay, seed), lay)
    low_contrast = synth.shade_and_noise(synth.brushed_texture(SHAPE, lay, seed=seed), contrast=0.03, shading=0.0)
    for img in (
        synth.illumination_ramp(_panel(lay, seed) - 0.25, 120 / 255),
        synth.vignette(_panel(lay, seed), 0.5),
        synth.illumination_ramp(low_contrast - 0.25, 120 / 255),
    ):
        region = _region(img, lay)
        assert region.verdict is RegionVerdict.PASS, region.reasons
        assert abs(wrap_deviation(region.lay_deg, clean.lay_deg)) < 0.1
    assert clean.verdict is RegionVerdict.PASS


@pytest.mark.parametrize("quality", [50, 75])
def test_block_grid_shows_on_blank_jpegs_and_little_on_brushed_ones(quality):
    blank = synth.jpeg_roundtrip(synth.polished_blank(SHAPE, seed=quality), quality)
    brushed = synth.jpeg_roundtrip(_panel(30.0, quality), quality)
    assert block_grid(blank).present
    assert block_grid(brushed).contrast < 0.5 * block_grid(blank).contrast
    assert not block_grid(_panel(75.0, 1)).present  # uncompressed: no grid
    assert (block_grid(blank).phase_col, block_grid(blank).phase_row) == (0, 0)
    # cropped by 3 px after compression: the grid is found at its shifted phase
    assert block_grid(blank[3:, 3:], origin=(0, 0)).phase_col == 5


def test_part_with_glare_review_has_exit_code_3_semantics():
    img = synth.add_glare(_panel(30.0, 0), (200, 220), 45)
    assert inspect_image(img, directional_recipe(RECT, 30.0)).verdict is PartVerdict.REVIEW
