"""The numeric core against analytic cases and reference libraries."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import ndimage as ndi
from skimage.feature import hog, structure_tensor

from surfinspect.measure import orientation as o
from surfinspect.measure import synth

ANGLES = np.arange(0.0, 180.0, 2.5)


def _region_lay(image, margin=8, cell_px=32, sigma=1.0):
    rows, cols = image.shape
    mask = np.ones((rows - 2 * margin, cols - 2 * margin), bool)
    cs = o.cell_sums(image, mask, (margin, margin, cols - 2 * margin, rows - 2 * margin), cell_px=cell_px, sigma=sigma)
    return o.tensor_lay(cs.jxx.sum(), cs.jxy.sum(), cs.jyy.sum())


@pytest.mark.parametrize("period", [4, 7, 12, 30])
def test_sine_gratings_all_angles_within_002_deg(period):
    # Analytic: a sine grating's lines run exactly along lay_deg (synth.sine_grating builds it
    # from the normal vector); the region lay must be within 0.02 deg at every 2.5 deg.
    shape = (160, 160) if period < 30 else (240, 240)
    errors = []
    for lay in ANGLES:
        est, coherence = _region_lay(synth.sine_grating(shape, lay, period))
        errors.append(abs(o.wrap_deviation(est, lay)))
        assert coherence > 0.9
    assert max(errors) < 0.02, f"worst {max(errors):.4f} deg at period {period}"


def _tensor_lay_with(derivative, image):
    gr, gc = derivative(image)
    m = np.zeros(image.shape)
    m[8:-8, 8:-8] = 1
    return o.tensor_lay(*o.structure_tensor_sums(gc, gr, m))[0]


def test_central_differences_and_sobel_are_biased_on_fine_grain():
    # The reason for Gaussian derivatives (design note: central differences err by degrees at
    # period 4 px, Sobel by ~3 deg). This shows the grating test above can fail for a poor filter.
    def central(img):
        return np.gradient(img.astype(np.float64))

    def sobel(img):
        return ndi.sobel(img, axis=0), ndi.sobel(img, axis=1)

    worst_c = max(
        abs(o.wrap_deviation(_tensor_lay_with(central, synth.sine_grating((96, 96), a, 4)), a)) for a in ANGLES
    )
    worst_s = max(abs(o.wrap_deviation(_tensor_lay_with(sobel, synth.sine_grating((96, 96), a, 4)), a)) for a in ANGLES)
    assert worst_c > 3.0
    assert worst_s > 1.0


def test_region_tensor_matches_skimage_structure_tensor():
    # scikit-image 0.26 structure_tensor: Sobel derivatives, products smoothed by a Gaussian of
    # sigma; with sigma=0 the smoothing is the identity, so Arr, Arc, Acc are the raw products.
    img = synth.brushed_panel((96, 128), 33.0, seed=4).astype(np.float64)
    arr, arc, acc = structure_tensor(img, sigma=0, mode="reflect", order="rc")
    gr, gc = ndi.sobel(img, axis=0, mode="reflect"), ndi.sobel(img, axis=1, mode="reflect")
    jxx, jxy, jyy = o.structure_tensor_sums(gc, gr)
    # our y axis points up: jyy = sum(g_row^2), jxy = -sum(g_col * g_row)
    assert jxx == pytest.approx(acc.sum(), rel=1e-9)
    assert jyy == pytest.approx(arr.sum(), rel=1e-9)
    assert jxy == pytest.approx(-arc.sum(), rel=1e-9)


def test_tensor_lay_equals_doubled_angle_mean_of_gradients():
    # Axial statistics (Mardia & Jupp 2000, sec. 9.3.2): the summed tensor's orientation equals
    # the doubled-angle circular mean of gradient directions weighted by squared magnitude.
    img = synth.brushed_panel((80, 80), 121.0, seed=9)
    gc, gr = o.gradients(img)
    gx, gy = gc.astype(np.float64), -gr.astype(np.float64)
    theta = np.degrees(np.arctan2(gy, gx))
    mean_grad, _ = o.axial_mean(theta.ravel(), (gx**2 + gy**2).ravel())
    lay, _ = o.tensor_lay(*o.structure_tensor_sums(gc, gr))
    assert o.wrap_deviation(lay, (mean_grad + 90) % 180) == pytest.approx(0.0, abs=1e-9)


@pytest.mark.parametrize("dtype", [np.float32, np.float64, np.uint8])
@pytest.mark.parametrize("cell", [(8, 8), (16, 12)])
def test_hog_compatibility_equals_skimage_hog(dtype, cell):
    # scikit-image 0.26 hog with one-cell blocks and L1 normalisation: each block is
    # hist / (sum|hist| + 1e-5). Our per-cell histogram, normalised the same way, must agree.
    rng = np.random.default_rng(3)
    img = synth.brushed_panel((67, 90), 57.0, seed=2)
    img = (img * 255).astype(np.uint8) if dtype is np.uint8 else img.astype(dtype)
    ref = hog(img, orientations=9, pixels_per_cell=cell, cells_per_block=(1, 1), block_norm="L1", feature_vector=False)
    ours = o.hog_cell_histograms(img, orientations=9, pixels_per_cell=cell)
    ours = ours / (np.abs(ours).sum(axis=-1, keepdims=True) + 1e-5)
    assert ref.shape[:2] == ours.shape[:2]
    np.testing.assert_allclose(ref[:, :, 0, 0, :], ours, rtol=2e-6, atol=1e-7)
    del rng


def test_cell_histogram_linear_votes_match_direct_sum():
    # Dalal & Triggs 2005: magnitude votes split linearly between the two nearest bin centres.
    # Direct per-pixel reference with numpy's arctan2 (ours uses cv2.phase, ~0.01 deg).
    img = synth.brushed_panel((70, 90), 33.0, seed=1)
    mask = np.ones((60, 75), bool)
    mask[10:25, 20:40] = False
    cs = o.cell_sums(img, mask, (10, 5, 75, 60), cell_px=16, bins=12)
    gc, gr = o.gradients(img)
    gx, gy = gc[5:65, 10:85].astype(np.float64), -gr[5:65, 10:85].astype(np.float64)
    mag = np.hypot(gx, gy) * mask
    t = ((np.degrees(np.arctan2(gy, gx)) + 90) % 180) / 15 - 0.5
    lo = np.floor(t).astype(int)
    f = t - lo
    ref = np.zeros((4, 5, 12))
    rows, cols = np.indices(mask.shape)
    np.add.at(ref, (rows // 16, cols // 16, lo % 12), mag * (1 - f))
    np.add.at(ref, (rows // 16, cols // 16, (lo + 1) % 12), mag * f)
    np.testing.assert_allclose(cs.hist, ref, atol=2e-3 * ref.max())
    np.testing.assert_allclose(cs.hist.sum(axis=-1), ref.sum(axis=-1), rtol=1e-5)
    # area: region pixels per cell, counted directly from the mask (cells clipped to the 75x60 box)
    expected_area = [[mask[i * 16 : (i + 1) * 16, j * 16 : (j + 1) * 16].sum() for j in range(5)] for i in range(4)]
    np.testing.assert_allclose(cs.area, expected_area)


def test_strips_join_seamlessly(monkeypatch):
    # Memory is bounded by working in strips; the result must not depend on the strip height.
    from surfinspect.measure import cells

    img = synth.brushed_panel((300, 200), 71.0, seed=6)
    mask = np.ones((300, 200), bool)
    a = o.cell_sums(img, mask, (0, 0, 200, 300), cell_px=20, background_sigma=12.0)
    monkeypatch.setattr(cells, "STRIP_ROWS", 40)  # the module that cuts the strips reads it
    b = o.cell_sums(img, mask, (0, 0, 200, 300), cell_px=20, background_sigma=12.0, threads=2)
    np.testing.assert_allclose(a.jxx, b.jxx, rtol=1e-5)
    np.testing.assert_allclose(a.hist, b.hist, rtol=1e-5, atol=1e-9)


@pytest.mark.parametrize(
    "measured, expected, deviation",
    [
        (0.6, 179.0, 1.6),
        (179.0, 0.6, -1.6),
        (95.0, 90.0, 5.0),
        (0.0, 90.0, 90.0),
        (45.0, 135.0, 90.0),
        (10.0, 10.0, 0.0),
    ],
)
def test_axial_wrap(measured, expected, deviation):
    # DESIGN convention: deviation = measured - expected wrapped to (-90, 90].
    assert o.wrap_deviation(measured, expected) == pytest.approx(deviation)


def test_rayleigh_pigeon_example():
    # Mardia & Jupp (2000), Directional Statistics, example 6.1 (homing pigeons, ten directions):
    # mean resultant length 0.2229, mean direction 48.1 deg, 2 n R^2 = 0.993 (not significant).
    rt = o.rayleigh_test([55, 60, 65, 95, 100, 110, 260, 275, 285, 295])
    assert rt.mean_deg == pytest.approx(48.1, abs=0.05)
    assert rt.resultant_length == pytest.approx(0.2229, abs=5e-5)
    assert rt.statistic == pytest.approx(0.993, abs=5e-4)
    assert rt.p_value > 0.3


def test_noise_sigma_matches_known_white_noise(rng):
    # Immerkaer (1996): unbiased for white Gaussian noise on a flat image.
    img = 0.5 + 0.02 * rng.standard_normal((400, 300))
    assert o.noise_sigma(img) == pytest.approx(0.02, rel=0.03)


def test_noise_sigma_sampled_in_strips_on_a_large_image_agrees_with_every_pixel(rng):
    # Above NOISE_SAMPLE_PX only every k-th strip is read. The mean of n |Gaussian| values has a
    # relative spread sqrt(pi/2 - 1) / sqrt(n) (half-normal distribution), 0.05 % at the ~2.9 MP
    # read here; the texture's share of the response varies as little between evenly spaced strips.
    from surfinspect.measure import noise, synth

    img = (synth.brushed_panel((2400, 2400), 30.0, seed=3) + 0.01 * rng.standard_normal((2400, 2400))).astype(
        np.float32
    )
    every = noise.noise_sigma(img, max_pixels=None)
    sampled = noise.noise_sigma(img, max_pixels=3_000_000)  # every second strip
    assert sampled == pytest.approx(every, rel=0.005)
    assert sampled != every  # the sample is not the whole image
    white = 0.5 + 0.02 * rng.standard_normal((2400, 2400))
    assert noise.noise_sigma(white, max_pixels=3_000_000) == pytest.approx(0.02, rel=0.003)


def test_noise_gradient_energy_matches_simulation(rng):
    # Linear filtering of white noise: variance scales with the sum of squared kernel taps.
    img = (0.1 * rng.standard_normal((500, 500))).astype(np.float32)
    gc, gr = o.gradients(img, sigma=1.5)
    measured = float(np.mean(gc[10:-10, 10:-10] ** 2 + gr[10:-10, 10:-10] ** 2))
    assert measured == pytest.approx(o.noise_gradient_energy(0.1, sigma=1.5), rel=0.03)


def test_derivative_kernel_has_unit_gain_on_a_ramp():
    smooth, deriv = o.gaussian_derivative_kernels(1.3)
    x = np.arange(len(deriv)) - len(deriv) // 2
    assert float(np.sum(deriv * x)) == pytest.approx(1.0, abs=1e-6)
    assert float(smooth.sum()) == pytest.approx(1.0, abs=1e-6)
    with pytest.raises(ValueError, match="sigma must be > 0"):
        o.gaussian_derivative_kernels(0)


def test_rotated_histogram_offset():
    # Histograms in a rotated frame: subtracting the frame rotation moves the peak.
    img = synth.sine_grating((96, 96), 40.0, 6)
    mask = np.ones((80, 80), bool)
    a = o.cell_sums(img, mask, (8, 8, 80, 80), bins=36)
    b = o.cell_sums(img, mask, (8, 8, 80, 80), bins=36, angle_offset_deg=10.0)
    centres = (np.arange(36) + 0.5) * 5
    peak_a, _ = o.axial_mean(centres, a.hist.sum(axis=(0, 1)))
    peak_b, _ = o.axial_mean(centres, b.hist.sum(axis=(0, 1)))
    assert peak_a == pytest.approx(40.0, abs=0.3)
    assert peak_b == pytest.approx(30.0, abs=0.3)
    assert math.isclose(a.hist.sum(), b.hist.sum(), rel_tol=1e-5)


@pytest.mark.parametrize("lay", [0.0, 37.0, 90.0])
def test_histogram_from_every_second_pixel_keeps_its_shape(lay):
    # The engine takes histogram votes on a 2x2 pixel lattice (a quarter of the votes). Compared
    # with all-pixel votes, the normalised region histogram differs by under 2 % of its peak bin,
    # and its axial mean by under 0.1 deg.
    img = synth.brushed_panel((256, 256), lay, seed=11)
    mask = np.ones((240, 240), bool)
    full = o.cell_sums(img, mask, (8, 8, 240, 240), vote_step=1).hist.sum(axis=(0, 1))
    half = o.cell_sums(img, mask, (8, 8, 240, 240), vote_step=2).hist.sum(axis=(0, 1))
    full, half = full / full.sum(), half / half.sum()
    assert np.abs(full - half).max() < 0.02 * full.max()
    centres = (np.arange(36) + 0.5) * 5
    assert abs(o.wrap_deviation(o.axial_mean(centres, full)[0], o.axial_mean(centres, half)[0])) < 0.1
