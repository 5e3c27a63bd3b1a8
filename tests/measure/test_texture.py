"""The no-texture decision: a statistical test with a stated false-alarm rate."""

from __future__ import annotations

import numpy as np
import pytest
from recipe_helpers import directional_recipe
from scipy import fft, stats

from surfinspect import inspect_image, parse_recipe
from surfinspect.measure import synth
from surfinspect.measure.judge import TEXTURE_ALPHA
from surfinspect.measure.orientation import wrap_deviation
from surfinspect.results import RegionVerdict


def _pink(shape, seed: int) -> np.ndarray:
    """1/f noise: white noise with its Fourier amplitude divided by the frequency (no lay)."""
    rng = np.random.default_rng(seed)
    f = np.hypot(fft.rfftfreq(shape[1])[None, :], fft.fftfreq(shape[0])[:, None])
    f[0, 0] = 1.0
    spec = fft.rfft2(rng.standard_normal(shape)) / f
    spec[0, 0] = 0.0
    out = fft.irfft2(spec, s=shape)
    return (0.5 + 0.05 * out / out.std()).astype(np.float32)


def _tiled_recipe(size: int, spacing: int, count: int) -> str:
    lines = ["recipe: tiles", "revision: 1", "regions:"]
    for i in range(count):
        for j in range(count):
            lines += [
                f"  - name: r{i}_{j}",
                f"    rect: [{8 + j * spacing}, {8 + i * spacing}, {size}, {size}]",
                "    lay_deg: 30",
            ]
    return "\n".join(lines) + "\n"


def test_noise_is_no_texture_at_the_stated_false_alarm_rate():
    # White and 1/f noise (no direction by construction) in regions of 48, 96 and 192 px: 860
    # regions. Under the null the Hotelling test calls a region textured with probability
    # TEXTURE_ALPHA = 0.001 (expected 0.86 here); more than 5 would happen with probability 2e-4
    # (binomial tail, scipy.stats.binom) if the stated rate were true.
    rng = np.random.default_rng(11)
    calls, total = 0, 0
    for noise in ("white", "pink"):
        img = (
            (0.5 + 0.02 * rng.standard_normal((1024, 1024))).astype(np.float32)
            if noise == "white"
            else _pink((1024, 1024), 3)
        )
        for size, spacing, count in ((48, 56, 18), (96, 112, 9), (192, 200, 5)):
            part = inspect_image(img, parse_recipe(_tiled_recipe(size, spacing, count)))
            calls += sum(r.verdict is not RegionVerdict.NO_TEXTURE for r in part.regions)
            total += len(part.regions)
    assert total == 860
    assert stats.binom.sf(5, total, TEXTURE_ALPHA) < 1e-3
    assert calls <= 5


@pytest.mark.parametrize("lay", [17.0, 30.0, 75.0, 142.0])
def test_grating_at_snr_1_is_measured(lay):
    # 256 px grating, period 10, amplitude = noise sigma (SNR 1): the Cramer-Rao bound of its angle
    # is 0.007 deg (test_spectrum.py derives it); before, 200 of 200 such regions were "no texture".
    rng = np.random.default_rng(int(lay))
    img = synth.sine_grating((272, 272), lay, 10.0, amplitude=0.05) + 0.05 * rng.standard_normal((272, 272))
    region = inspect_image(img.astype(np.float32), directional_recipe((8, 8, 256, 256), lay)).regions[0]
    assert region.verdict is not RegionVerdict.NO_TEXTURE, region.reasons
    assert abs(wrap_deviation(region.lay_deg, lay)) < 0.5


@pytest.mark.parametrize("quality", [50, 75, 95])
@pytest.mark.parametrize("lay", [30.0, 75.0])
def test_blank_panel_saved_as_jpeg_is_no_texture(quality, lay):
    # before: "lay 161.1 deg, fail" (q75), "lay 95.1 deg, coherence 0.285, fail" (q50)
    for seed in (1, 2):
        img = synth.jpeg_roundtrip(synth.polished_blank((448, 448), seed=seed), quality)
        region = inspect_image(img, directional_recipe((32, 32, 384, 384), lay)).regions[0]
        assert region.verdict is RegionVerdict.NO_TEXTURE, region.reasons
        assert region.lay_deg is None


@pytest.mark.parametrize("quality", [50, 75])
def test_brushed_panel_saved_as_jpeg_is_still_measured(quality):
    img = synth.jpeg_roundtrip(synth.brushed_panel((448, 448), 30.0, seed=4, shading=0.0), quality)
    region = inspect_image(img, directional_recipe((32, 32, 384, 384), 30.0)).regions[0]
    assert region.verdict is RegionVerdict.PASS, region.reasons
    assert abs(region.deviation_deg) < 0.3
