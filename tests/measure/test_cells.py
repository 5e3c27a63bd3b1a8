"""Per-cell sums: regions at the image border measure only real pixels."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from surfinspect.measure import synth
from surfinspect.measure.cells import cell_sums
from surfinspect.measure.derivatives import tensor_lay
from surfinspect.measure.orientation import wrap_deviation

SHAPE = (256, 320)
BORDER_BOXES = {
    "full frame": (0, 0, 320, 256),
    "40 px top-left corner": (0, 0, 40, 40),
    "40 px bottom-right corner": (280, 216, 40, 40),
    "strip on the top edge": (100, 0, 80, 60),
}


def _worst_error(bbox, *, interior_only: bool) -> float:
    x, y, w, h = bbox
    worst = 0.0
    for lay in np.arange(0.0, 180.0, 7.5):
        for period in (4.0, 7.0, 13.0, 30.0):
            img = synth.sine_grating(SHAPE, lay, period, phase=0.3)
            c = cell_sums(img, np.ones((h, w), bool), bbox, cell_px=32, interior_only=interior_only)
            measured, _ = tensor_lay(c.jxx.sum(), c.jxy.sum(), c.jyy.sum())
            worst = max(worst, abs(wrap_deviation(measured, lay)))
    return worst


@pytest.mark.parametrize("where", list(BORDER_BOXES))
def test_regions_touching_the_border_are_unbiased(where):
    # Analytic truth: a sine grating's gradient is everywhere parallel to its wave vector, so the
    # summed tensor of any window of real pixels points exactly across the lines. Mirrored pixels
    # beyond the border (BORDER_REFLECT_101) break that; measuring only pixels whose kernel lies
    # inside the image keeps the lay within 0.02 deg (measured 0.0024 deg, the derivative's own).
    assert _worst_error(BORDER_BOXES[where], interior_only=True) <= 0.02


def test_mirrored_border_pixels_would_bias_the_lay():
    # the same regions with the mirrored pixels kept: 0.14 deg (full frame) to 0.6 deg (edge strip)
    assert _worst_error(BORDER_BOXES["40 px top-left corner"], interior_only=False) > 0.1


def test_area_counts_measured_pixels_and_region_area_counts_the_region():
    img = synth.sine_grating(SHAPE, 30.0, 8.0)
    keep = np.ones((40, 40), bool)
    keep[10:20, 10:20] = False
    c = cell_sums(img, np.ones((40, 40), bool), (0, 0, 40, 40), cell_px=20, keep=keep)
    assert c.region_area.sum() == 1600
    # the 4 px border band (kernel radius of sigma 1) and the 100 masked pixels are not measured
    assert c.area.sum() == 36 * 36 - 100


@pytest.mark.parametrize("where", ["full frame", "40 px top-left corner", "strip on the top edge"])
def test_engine_lay_at_the_border_is_unbiased(where):
    # the whole engine (robust lay, spectral combination) on noise-free gratings at the border
    from recipe_helpers import directional_recipe

    from surfinspect import inspect_image

    worst = 0.0
    for lay in np.arange(0.0, 180.0, 15.0):
        for period in (5.0, 13.0):
            img = synth.sine_grating(SHAPE, lay, period, phase=0.3)
            region = inspect_image(img, directional_recipe(BORDER_BOXES[where], lay)).regions[0]
            worst = max(worst, abs(wrap_deviation(region.lay_deg, lay)))
    assert worst <= 0.02


def _clipped_panel(spots: int, seed: int = 5) -> np.ndarray:
    img = synth.brushed_panel(SHAPE, 30.0, seed=seed, shading=0.0)
    rng = np.random.default_rng(seed)
    img.flat[rng.integers(0, img.size, spots)] = 1.0  # clipped pixels scattered over the frame
    return synth.add_glare(img, (250.0, 60.0), 25.0)  # and a clipped highlight near the top edge


CLIP_CASES = {
    "full frame, few clipped": ((0, 0, 320, 256), None, 40),
    "full frame, most clipped": ((0, 0, 320, 256), None, 40_000),
    "interior box, clipped just outside it": ((30, 50, 200, 150), None, 400),
    "circle in a box at the border": ((0, 0, 200, 180), "circle", 400),
}


@pytest.mark.parametrize("case", list(CLIP_CASES))
def test_clipped_pixels_found_in_strips_equal_the_grown_mask_of_the_box(case):
    # the definition: saturated_pixels of the box grown by the kernel radius (or to the image's
    # edge), its complement passed as keep. The strips find the same pixels, sparse or dense.
    (x, y, w, h), shape, spots = CLIP_CASES[case]
    img = _clipped_panel(spots)
    mask = np.ones((h, w), bool)
    if shape == "circle":
        yy, xx = np.mgrid[:h, :w]
        mask = (yy - h / 2) ** 2 + (xx - w / 2) ** 2 <= (0.45 * min(h, w)) ** 2
    grown = _grown_box_mask(img, (x, y, w, h))
    reference = cell_sums(img, mask, (x, y, w, h), cell_px=24, keep=~grown, vote_step=2, threads=2)
    found = cell_sums(img, mask, (x, y, w, h), cell_px=24, saturation_level=1.0, vote_step=2, threads=2)
    for field in ("jxx", "jxy", "jyy", "area", "hist", "region_area"):
        np.testing.assert_array_equal(getattr(found, field), getattr(reference, field), err_msg=field)
    assert found.clipped_px == np.count_nonzero(grown & mask) > 0
    assert reference.clipped_px == 0  # keep alone is not counted as clipped


def _grown_box_mask(img, box, radius=4):
    """The definition: ``saturated_pixels`` of the box grown by the radius (or to the image's edge)."""
    from surfinspect.measure.conditions import saturated_pixels

    x, y, w, h = box
    gy0, gx0 = max(0, y - radius), max(0, x - radius)
    grown = saturated_pixels(img[gy0 : y + h + radius, gx0 : x + w + radius], 1.0, radius)
    if grown is None:
        return np.zeros((h, w), bool)
    return grown[y - gy0 : y - gy0 + h, x - gx0 : x - gx0 + w]


@settings(max_examples=60, deadline=None)
@given(
    x=st.integers(0, 200),
    y=st.integers(0, 150),
    w=st.integers(1, 320),
    h=st.integers(1, 256),
    spots=st.sampled_from([0, 1, 30, 3000, 60_000]),
    cell=st.sampled_from([8, 24, 32]),
    holes=st.booleans(),
    seed=st.integers(0, 2**16),
)
def test_clipped_pixels_in_strips_match_the_definition_for_any_box(x, y, w, h, spots, cell, holes, seed):
    # fuzzed boxes (at every border, one pixel wide, larger than a strip), clipped densities from none
    # to most of the frame, whole or holed masks: the strips' sums equal those of keep = ~grown
    w, h = min(w, 320 - x), min(h, 256 - y)
    rng = np.random.default_rng(seed)
    img = synth.brushed_panel(SHAPE, 60.0, seed=seed % 7, shading=0.0)
    img.flat[rng.integers(0, img.size, spots)] = 1.0
    mask = rng.random((h, w)) > 0.3 if holes else np.ones((h, w), bool)
    grown = _grown_box_mask(img, (x, y, w, h))
    reference = cell_sums(img, mask, (x, y, w, h), cell_px=cell, keep=~grown, vote_step=2, threads=2)
    found = cell_sums(img, mask, (x, y, w, h), cell_px=cell, saturation_level=1.0, vote_step=2, threads=2)
    for field in ("jxx", "jxy", "jyy", "area", "hist", "region_area"):
        np.testing.assert_array_equal(getattr(found, field), getattr(reference, field), err_msg=field)
    assert found.clipped_px == np.count_nonzero(grown & mask)


def test_the_same_pixels_give_the_same_sums_wherever_they_lie_in_memory():
    # a measurement is repeatable to the last bit: the image copied to buffers of every alignment
    # (0-15 float32 elements past a 64-byte boundary) gives identical sums and histograms
    img = _clipped_panel(40)
    results = []
    for offset in range(16):
        buffer = np.empty(img.size + 16, np.float32)
        copy = buffer[offset : offset + img.size].reshape(img.shape)
        copy[...] = img
        results.append(cell_sums(copy, np.ones(SHAPE, bool), (0, 0, 320, 256), cell_px=24, saturation_level=1.0))
    for r in results[1:]:
        for field in ("jxx", "jxy", "jyy", "area", "hist"):
            np.testing.assert_array_equal(getattr(r, field), getattr(results[0], field), err_msg=field)
