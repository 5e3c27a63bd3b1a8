"""The spectral estimate: precision against the Cramer-Rao bound, and the angular spectrum's peaks."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import optimize

from surfinspect.measure import synth
from surfinspect.measure.orientation import wrap_deviation
from surfinspect.measure.spectrum import angular_power_spectrum, spectral_lay, spectral_peaks

N = 256
PERIOD = 10.0


def orientation_crb_deg(snr: float, n: int = N, period: float = PERIOD) -> float:
    r"""Cramer-Rao bound (standard deviation, degrees) of the orientation of a 2-D sinusoid in white noise.

    Model: ``s(x, y) = A cos(k (x cos t + y sin t) + phi) + e``, ``e ~ N(0, sigma^2)`` i.i.d., on an
    n x n grid with coordinates centred on the grid (x, y in {-(n-1)/2, ..., (n-1)/2}). For Gaussian
    noise the Fisher information is ``I_ij = (1/sigma^2) sum (ds/dp_i)(ds/dp_j)`` (Kay 1993,
    Fundamentals of Statistical Signal Processing I, eq. 3.33). With ``psi = k (x cos t + y sin t) + phi``:

    * ``ds/dt = -A sin(psi) k u`` where ``u = -x sin t + y cos t`` (the coordinate along the lines),
    * ``ds/dphi = -A sin(psi)``, ``ds/dk = -A sin(psi) v`` with ``v = x cos t + y sin t``,
    * ``ds/dA = cos(psi)``.

    Averaging ``sin^2 psi`` to 1/2 over many periods, and since on a centred square grid
    ``sum u = 0`` and ``sum u v = (sum y^2 - sum x^2) sin t cos t = 0``, the orientation decouples
    from the other parameters: ``I_tt = (A^2 k^2 / (2 sigma^2)) sum u^2`` and
    ``sum u^2 = sin^2 t sum x^2 + cos^2 t sum y^2 = n * n (n^2 - 1) / 12``. Hence

    ``var(t) >= 24 sigma^2 / (A^2 k^2 n^2 (n^2 - 1))``, with SNR = A / sigma and k = 2 pi / period.

    For n = 256, period 10 px, SNR 1: 0.0068 deg.
    """
    k = 2.0 * math.pi / period
    return math.degrees(math.sqrt(24.0 / (snr**2 * k**2 * n**2 * (n**2 - 1))))


def _trial(rng, snr: float):
    lay = rng.uniform(0.0, 180.0)
    phase = rng.uniform(0.0, 2.0 * math.pi)
    clean = synth.sine_grating((N, N), lay, PERIOD, amplitude=1.0, mean=0.0, phase=phase).astype(np.float64)
    return lay, clean + rng.standard_normal((N, N)) / snr, phase


def _least_squares_lay(img: np.ndarray, start_lay: float, snr: float) -> float:
    """Least-squares fit (scipy.optimize.least_squares) of A cos(k n.p + phi) + c: the maximum-likelihood estimate."""
    x = np.arange(N, dtype=np.float64)[None, :] - (N - 1) / 2
    y = -np.arange(N, dtype=np.float64)[:, None] + (N - 1) / 2

    def resid(p):
        a, b, k, t, c = p  # a cos + b sin avoids the phase wrap
        arg = k * (-math.sin(t) * x + math.cos(t) * y)
        return (a * np.cos(arg) + b * np.sin(arg) + c - img).ravel()

    # start from the spectral estimate, amplitude from a linear fit at that orientation
    t0 = math.radians(start_lay)
    arg = 2 * math.pi / PERIOD * (-math.sin(t0) * x + math.cos(t0) * y)
    a0, b0 = 2 * np.mean(img * np.cos(arg)), 2 * np.mean(img * np.sin(arg))
    fit = optimize.least_squares(resid, [a0, b0, 2 * math.pi / PERIOD, t0, 0.0], x_scale="jac")
    return math.degrees(fit.x[3]) % 180.0


@pytest.mark.slow
@pytest.mark.parametrize("snr", [2.0, 1.0, 0.5])
def test_spectral_lay_is_within_3_times_the_cramer_rao_bound(snr):
    # 200 trials at random angles and phases; the least-squares fit of the same data (20 trials,
    # the maximum-likelihood estimate) reaches the bound, which checks the derivation itself
    rng = np.random.default_rng(int(snr * 100))
    crb = orientation_crb_deg(snr)
    errors, ls_errors, se = [], [], []
    for i in range(200):
        lay, img, _ = _trial(rng, snr)
        est = spectral_lay(img, noise_sigma=1.0 / snr)
        assert est.method == "line"
        errors.append(wrap_deviation(est.lay_deg, lay))
        se.append(est.standard_error_deg)
        if i < 20:
            ls_errors.append(wrap_deviation(_least_squares_lay(img, est.lay_deg, snr), lay))
    ratio = float(np.std(errors)) / crb
    assert ratio <= 3.0  # measured 1.89 at every SNR (the Hann window's price)
    assert 0.7 <= float(np.sqrt(np.mean(np.square(ls_errors)))) / crb <= 1.35  # least squares: at the bound
    assert abs(float(np.mean(errors))) < 3 * float(np.std(errors)) / math.sqrt(200)  # no bias
    # the reported standard error (bound at the measured SNR x the window's factor) matches the scatter
    assert 0.8 <= float(np.mean(se)) / float(np.std(errors)) <= 1.25


def test_bound_of_the_issue_example():
    assert orientation_crb_deg(1.0) == pytest.approx(0.0068, abs=0.0001)


@pytest.mark.parametrize("a, b", [(30.0, 120.0), (45.0, 135.0), (20.0, 70.0)])
def test_angular_spectrum_has_one_peak_per_family_of_marks(a, b):
    # two summed gratings: the gradient histogram has no clean peaks, the spectrum has two lines
    img = synth.sine_grating((N, N), a, 8.0, amplitude=0.3) + synth.sine_grating((N, N), b, 11.0, amplitude=0.15)
    peaks = spectral_peaks(angular_power_spectrum(img), 2)
    found = sorted(p.lay_deg for p in peaks)
    assert [abs(wrap_deviation(f, e)) for f, e in zip(found, sorted([a, b]))] == pytest.approx([0, 0], abs=0.5)
    strong = max(peaks, key=lambda p: p.share)
    assert abs(wrap_deviation(strong.lay_deg, a)) < 0.5 and strong.share > 0.6  # 4:1 in power


def test_brushed_texture_lobe_gives_its_lay():
    img = synth.brushed_texture((N, N), 62.0, seed=3)
    est = spectral_lay(img)
    assert est.method == "lobe"
    assert abs(wrap_deviation(est.lay_deg, 62.0)) < 1.0
