"""Honest uncertainty: U (k = 2) covers the true error, or the region goes to review; blur is review."""

from __future__ import annotations

import math

import numpy as np
import pytest
from recipe_helpers import directional_recipe

from surfinspect import inspect_image
from surfinspect.measure import synth
from surfinspect.measure.orientation import wrap_deviation
from surfinspect.results import RegionVerdict

SHAPE = (448, 448)
RECT = (32, 32, 384, 384)


def _ends(angle_deg: float, centre=(224.0, 224.0), half=300.0):
    t = math.radians(angle_deg)
    dx, dy = half * math.cos(t), -half * math.sin(t)
    return (centre[0] - dx, centre[1] - dy), (centre[0] + dx, centre[1] + dy)


def _family(name: str, lay: float, seed: int) -> np.ndarray:
    panel = synth.brushed_panel(SHAPE, lay, seed=seed, shading=0.0)
    if name == "scratch":
        return synth.add_scratch(panel, *_ends(lay + 90.0 - 7.0 * (seed % 3)), width_px=3)
    if name == "glare":
        return synth.add_glare(panel, (120 + 17 * seed, 160 + 11 * seed), 18 + 3 * (seed % 5))
    if name == "streak":
        return synth.add_streak(panel, lay + 50.0, 12.0 * (seed % 5 - 2), 10 + 4 * (seed % 4))
    if name == "jpeg q50":
        return synth.jpeg_roundtrip(panel, 50)
    rng = np.random.default_rng(seed)  # "snr 2": 256 px grating, amplitude twice the noise sigma
    grating = synth.sine_grating(SHAPE, lay, 10.0, amplitude=0.05) + 0.025 * rng.standard_normal(SHAPE)
    return grating.astype(np.float32)


@pytest.mark.slow
@pytest.mark.parametrize("family", ["scratch", "glare", "streak", "jpeg q50", "snr 2"])
def test_uncertainty_covers_the_true_error_or_the_region_is_review(family):
    # Analytic truth: synth's lay (brushed_panel, sine_grating). Before: U covered the error in 0 %
    # of the scratch, streak and JPEG cases. 20 trials per family at lays 30 and 75 deg.
    covered, reviewed, widths = 0, 0, []
    for seed in range(10):
        for lay in (30.0, 75.0):
            region = inspect_image(_family(family, lay, seed), directional_recipe(RECT, lay, cell_px=24)).regions[0]
            assert region.verdict is not RegionVerdict.NO_TEXTURE, region.reasons
            if region.verdict is RegionVerdict.REVIEW:
                reviewed += 1
                continue
            widths.append(region.uncertainty_deg)
            covered += abs(wrap_deviation(region.lay_deg, lay)) <= region.uncertainty_deg
    assert covered + reviewed >= 0.9 * 20
    assert not widths or float(np.median(widths)) < 0.5  # and U stays useful against a 3 deg tolerance


def test_engine_reaches_the_spectral_precision_at_snr_2():
    # std of the engine's lay over 40 gratings at SNR 2 against the Cramer-Rao bound (test_spectrum.py)
    rng = np.random.default_rng(7)
    errors = []
    for _ in range(40):
        lay = rng.uniform(0.0, 180.0)
        img = synth.sine_grating((272, 272), lay, 10.0, amplitude=0.05, phase=rng.uniform(0, 6.3))
        img = (img + 0.025 * rng.standard_normal((272, 272))).astype(np.float32)
        region = inspect_image(img, directional_recipe((8, 8, 256, 256), lay)).regions[0]
        errors.append(wrap_deviation(region.lay_deg, lay))
    crb = math.degrees(math.sqrt(24.0 / (4.0 * (2 * math.pi / 10.0) ** 2 * 256**2 * (256**2 - 1))))
    assert float(np.std(errors)) <= 3.0 * crb  # before: 26 x the bound (tensor only)


def _blurred(lay: float, seed: int, blur) -> np.ndarray:
    # blur acts on the light before the sensor adds its noise
    clean = synth.brushed_panel(SHAPE, lay, seed=seed, shading=0.0, noise=0.0)
    return (blur(clean) + 0.01 * np.random.default_rng(seed + 99).standard_normal(SHAPE)).astype(np.float32)


@pytest.mark.parametrize("lay", [30.0, 75.0])
@pytest.mark.parametrize(
    "blur",
    [lambda x, lay: synth.motion_blur(x, 9, lay + 90.0), lambda x, lay: synth.defocus(x, 3.0)],
    ids=["motion 9 px across the lay", "defocus 3 px"],
)
def test_unsharp_images_go_to_review_with_a_reason(lay, blur):
    for seed in (0, 1):
        region = inspect_image(_blurred(lay, seed, lambda x: blur(x, lay)), directional_recipe(RECT, lay)).regions[0]
        assert region.verdict is RegionVerdict.REVIEW  # before: 9/16 and 2/16 rejected
        assert any(r.startswith("image not sharp enough") for r in region.reasons)
    sharp = inspect_image(_blurred(lay, 0, lambda x: x), directional_recipe(RECT, lay)).regions[0]
    assert sharp.verdict is RegionVerdict.PASS, sharp.reasons
