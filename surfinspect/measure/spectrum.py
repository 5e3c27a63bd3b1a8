"""Direction from the power spectrum: the angular spectrum of a region and its refined peaks.

Oriented marks put their power on a ridge through the origin of the 2-D power spectrum, across
the marks; the angular power spectrum (power summed over a band of frequencies, per direction)
has one peak per family of marks, whatever their phase or relative strength. This is the idea
behind the texture direction ``Std`` of ISO 25178-2. Two estimates come from it:

* :func:`angular_power_spectrum` and :func:`spectral_peaks`: the spectrum per direction (lay
  convention, part frame) and its peaks, each refined between bins as the doubled-angle centroid
  of its own lobe (for several families of marks, e.g. a crossed lay);
* :func:`spectral_lay`: one lay, refined to the maximum of the windowed Fourier transform
  (near the maximum-likelihood estimate for a grating in white noise) when one line dominates
  the spectrum, else the centroid of the strongest lobe.

Pure functions on arrays; the window is a 2-D Hann window (times the region mask).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy import fft

__all__ = [
    "AngularSpectrum",
    "SpectralPeak",
    "SpectralLay",
    "HANN_VARIANCE_FACTOR",
    "angular_power_spectrum",
    "spectral_peaks",
    "spectral_lay",
    "finest_period",
    "tensor_angle_standard_error",
]

#: Lowest frequency of the band, cycles per pixel (marks coarser than 64 px are light, not lay).
F_MIN = 1.0 / 64.0

#: The strongest line is taken as the lay (refined on the Fourier transform) when its main lobe holds
#: at least this share of the band's power above the noise (gratings at SNR 0.5-2 and noise-free:
#: 0.50-0.70, the Hann lobe's own share being 0.63; brushed regions of 48-384 px: 0.03-0.24);
#: otherwise the lobe centroid is used.
LINE_SHARE = 0.4

#: Variance of the Hann-windowed peak estimate over the Cramer-Rao bound of a rectangular window,
#: measured on 256 px gratings at SNR 0.5-2 (tests/measure/test_spectrum.py): std 1.9 x the bound.
HANN_VARIANCE_FACTOR = 3.6


@dataclass(frozen=True)
class AngularSpectrum:
    """Power per direction: ``power[k]`` is the noise-subtracted power whose lay lies in bin k.

    ``angles_deg`` are the bin centres (lay convention: degrees counter-clockwise from +X, +Y up);
    ``noise_power`` the white-noise power that was subtracted from every frequency bin.
    """

    angles_deg: np.ndarray
    power: np.ndarray
    noise_power: float
    band: tuple[float, float]

    @property
    def bin_width_deg(self) -> float:
        return 180.0 / self.power.size


@dataclass(frozen=True)
class SpectralPeak:
    lay_deg: float  # refined between bins
    share: float  # the lobe's share of the angular spectrum's power
    width_deg: float  # full width of the lobe at half its height


@dataclass(frozen=True)
class SpectralLay:
    """The lay from the spectrum, with its standard error where a model gives one."""

    lay_deg: float
    method: str  # "line" (refined Fourier peak) or "lobe" (centroid of the angular lobe)
    frequency: float  # cycles per pixel of the strongest line
    standard_error_deg: float | None  # from the Cramer-Rao bound at the measured SNR ("line" only)
    spectrum: AngularSpectrum
    finest_period_px: float = float("inf")  # the finest period whose power stands above the noise
    spectrum_pixels: int = 0  # pixels the estimate saw (in the mask)


def finest_period(power, fx, fy, noise: float, *, step: float = 1.0 / 64.0) -> float:
    """The finest period (px) at which the texture's power stands clear of the noise.

    The radial power spectrum in rings of ``step`` cycles per pixel; the highest ring whose mean
    power is at least twice the white noise's (signal at least equal to the noise) gives the
    period. A blurred image loses its fine detail first (defocus and motion blur are low-pass
    filters), so this is the sharpness figure; inf when no ring stands out.
    """
    ok, ring, counts = _rings(np.hypot(fx, fy), step)
    return _finest(power, ok, ring, counts, noise, step)


def _rings(f: np.ndarray, step: float):
    """Pixels within the rings of ``step`` cycles per pixel up to 0.5, their ring index, and the pixels per ring."""
    ring = np.floor(f / step).astype(np.intp)
    n = int(0.5 / step) + 1
    ok = ring < n
    return ok, ring[ok], np.bincount(ring[ok], None, n)


def _finest(power, ok, ring, counts, noise: float, step: float) -> float:
    n = counts.size
    sums = np.bincount(ring, power[ok], n)
    mean = sums / np.maximum(counts, 1)
    above = np.nonzero((mean >= 2.0 * max(noise, 1e-300)) & (np.arange(n) >= 1))[0]
    return float(1.0 / ((above.max() + 1) * step)) if above.size else float("inf")


def _window(shape: tuple[int, int], mask: np.ndarray | None) -> np.ndarray:
    w = np.outer(np.hanning(shape[0] + 2)[1:-1], np.hanning(shape[1] + 2)[1:-1])
    return w if mask is None else w * np.asarray(mask, dtype=np.float64)


def _periodogram(block: np.ndarray, w: np.ndarray, pad: int):
    """|FFT|^2 of the windowed, mean-removed block, zero-padded ``pad`` times; the transform's (M, N)."""
    a = np.asarray(block, dtype=np.float64)
    mean = np.sum(w * a) / np.sum(w)
    rows, cols = a.shape
    shape = (pad * rows, pad * cols)
    spec = fft.rfft2(w * (a - mean), s=shape, workers=-1)
    power = spec.real**2 + spec.imag**2
    return power, shape, mean


@lru_cache(maxsize=8)
def _geometry(shape: tuple[int, int], bins: int, band: tuple[float, float]):
    """What depends only on the transform's size, computed once per size: frequencies, band, votes, rings.

    The periodogram of a region's central part has the same size on every image, so this is shared.
    """
    fx = np.broadcast_to(fft.rfftfreq(shape[1])[None, :], (shape[0], shape[1] // 2 + 1))
    fy = np.broadcast_to(-fft.fftfreq(shape[0])[:, None], fx.shape)  # rows grow downward
    f = np.hypot(fx, fy)
    sel = (f >= band[0]) & (f <= band[1])
    # the rfft half-plane holds each direction once; its x = 0 column holds both signs of fy
    lay = np.mod(np.degrees(np.arctan2(fy[sel], fx[sel])) + 90.0, 180.0)
    weight = np.where(fx[sel] > 0, 2.0, 1.0)  # the mirrored half-plane, not stored by rfft
    pos = lay / (180.0 / bins) - 0.5
    lo = np.floor(pos).astype(np.intp)
    frac = pos - lo
    votes = (sel, weight, lo % bins, (lo + 1) % bins, 1.0 - frac, frac)
    out = dict(fx=fx, fy=fy, band=sel, votes=votes, rings=_rings(f, 1.0 / 64.0))
    for v in [fx, fy, sel, weight, *votes[2:], *out["rings"]]:
        v.flags.writeable = False
    return out


def angular_power_spectrum(
    block: np.ndarray,
    mask: np.ndarray | None = None,
    *,
    bins: int = 180,
    noise_sigma: float = 0.0,
    band: tuple[float, float] = (F_MIN, 0.5),
    pad: int = 2,
) -> AngularSpectrum:
    """Angular power spectrum of a region: windowed periodogram power summed per lay direction.

    Parameters
    ----------
    block : (M, N) ndarray
        Grey values of the region's bounding box.
    mask : (M, N) bool ndarray, optional
        Region pixels (the window is zero elsewhere).
    bins : int
        Direction bins over [0, 180); votes are split linearly between the two nearest.
    noise_sigma : float
        Standard deviation of the image's white noise; its expected power per frequency bin,
        ``sigma^2 sum(w^2)``, is subtracted before the votes (negative results count as 0).
    band : (f_min, f_max)
        Radial band in cycles per pixel.
    pad : int
        Zero-padding factor of the transform.

    Returns
    -------
    AngularSpectrum

    References
    ----------
    .. [1] ISO 25178-2:2012, Geometrical product specifications (GPS) - Surface texture: Areal -
       Part 2: Terms, definitions and surface texture parameters, 4.3.3 (texture direction Std).
    .. [2] Welch, P. (1967). The use of fast Fourier transform for the estimation of power spectra.
       IEEE Trans. Audio and Electroacoustics 15(2), 70-73. :doi:`10.1109/TAU.1967.1161901`
    """
    w = _window(block.shape, mask)
    power, shape, _ = _periodogram(block, w, pad)
    geometry = _geometry(shape, bins, tuple(band))
    return _angular(power, geometry, noise_sigma**2 * float(np.sum(w * w)), bins, band)


def _angular(power, geometry: dict, noise: float, bins: int, band: tuple[float, float]) -> AngularSpectrum:
    sel, weight, lower, upper, to_lower, to_upper = geometry["votes"]
    p = np.maximum(power[sel] - noise, 0.0)
    hist = np.bincount(lower, weight * p * to_lower, bins) + np.bincount(upper, weight * p * to_upper, bins)
    return AngularSpectrum((np.arange(bins) + 0.5) * 180.0 / bins, hist, noise, band)


def spectral_peaks(
    spectrum: AngularSpectrum, count: int = 1, *, min_separation_deg: float = 10.0
) -> list[SpectralPeak]:
    """The ``count`` strongest peaks of an angular spectrum, each refined within its own lobe.

    A peak's lobe runs from its maximum down to the first bin on either side below half its
    height (at least one bin each side); the refined direction is the doubled-angle centroid of
    the lobe's power, and its share is the lobe's power over the whole spectrum's. Later peaks must
    lie ``min_separation_deg`` from earlier ones.
    """
    p = np.asarray(spectrum.power, dtype=np.float64)
    n = p.size
    total = float(p.sum())
    taken = np.zeros(n, bool)
    out: list[SpectralPeak] = []
    width = spectrum.bin_width_deg
    for _ in range(count):
        free = np.where(taken, -np.inf, p)
        k = int(np.argmax(free))
        if not np.isfinite(free[k]) or free[k] <= 0:
            break
        half = 0.5 * p[k]
        left = right = 1
        while left < n // 2 and p[(k - left) % n] >= half:
            left += 1
        while right < n // 2 and p[(k + right) % n] >= half:
            right += 1
        idx = np.arange(k - left, k + right + 1) % n
        t = np.radians(2.0 * spectrum.angles_deg[idx])
        c, s = np.sum(p[idx] * np.cos(t)), np.sum(p[idx] * np.sin(t))
        lay = float(np.mod(0.5 * math.degrees(math.atan2(s, c)), 180.0))
        out.append(SpectralPeak(lay, float(p[idx].sum() / total) if total > 0 else 0.0, (left + right - 1) * width))
        near = np.abs(((spectrum.angles_deg - lay + 90.0) % 180.0) - 90.0) < max(min_separation_deg, width)
        taken |= near
        taken[idx] = True
    return out


def _dtft_power(fxy: np.ndarray, wa: np.ndarray, xs: np.ndarray, ys_up: np.ndarray) -> float:
    """|sum w a exp(-2 pi i (fx x + fy y))|^2 at one frequency (separable evaluation)."""
    px, py = 2.0 * math.pi * fxy[0] * xs, 2.0 * math.pi * fxy[1] * ys_up
    cy, sy = np.cos(py) @ wa, np.sin(py) @ wa  # real matrix-vector products (BLAS)
    cx, sx = np.cos(px), np.sin(px)
    re = cy @ cx - sy @ sx
    im = cy @ sx + sy @ cx
    return float(re * re + im * im)


def spectral_lay(
    block: np.ndarray, mask: np.ndarray | None = None, *, noise_sigma: float = 0.0, pad: int = 2
) -> SpectralLay:
    """The lay of a region from its power spectrum; see :func:`_spectral_lay`."""
    from dataclasses import replace

    est = _spectral_lay(block, mask, noise_sigma=noise_sigma, pad=pad)
    return replace(est, spectrum_pixels=int(block.size if mask is None else np.count_nonzero(mask)))


def _spectral_lay(block: np.ndarray, mask: np.ndarray | None, *, noise_sigma: float, pad: int) -> SpectralLay:
    """The lay of a region from its power spectrum.

    1. The angular power spectrum (:func:`angular_power_spectrum`) and its strongest lobe.
    2. When one frequency line holds at least :data:`LINE_SHARE` of the band's power above the
       noise (a grating, a regular machining mark), its position is refined to the maximum of
       the windowed Fourier transform (Nelder-Mead on the exact transform, from the padded
       periodogram's maximum): the lay is across that frequency vector. Its standard error is the
       Cramer-Rao bound of a sinusoid's orientation at the measured amplitude and noise, times
       :data:`HANN_VARIANCE_FACTOR`.
    3. Otherwise the lay is the lobe's doubled-angle centroid (no standard error).

    References
    ----------
    .. [1] Rife, D. C., Boorstyn, R. R. (1974). Single-tone parameter estimation from
       discrete-time observations. IEEE Trans. Information Theory 20(5), 591-598.
       :doi:`10.1109/TIT.1974.1055282`
    """
    a = np.asarray(block, dtype=np.float64)
    w = _window(a.shape, mask)
    power, shape, mean = _periodogram(a, w, pad)
    geometry = _geometry(shape, 180, (F_MIN, 0.5))
    fx, fy, band = geometry["fx"], geometry["fy"], geometry["band"]
    spectrum = _angular(power, geometry, noise_sigma**2 * float(np.sum(w * w)), 180, (F_MIN, 0.5))
    signal = np.maximum(power - spectrum.noise_power, 0.0) * band
    peaks = spectral_peaks(spectrum, 1)

    def finest() -> float:
        return _finest(power, *geometry["rings"], spectrum.noise_power, 1.0 / 64.0)

    if not peaks:
        return SpectralLay(float("nan"), "lobe", 0.0, None, spectrum, finest())
    k = np.unravel_index(int(np.argmax(signal)), signal.shape)
    f0 = np.array([fx[k], fy[k]])
    lobe = line_lobe_power(signal, k, pad * a.shape[1])
    count = half_plane_count(signal.shape[1], pad * a.shape[1])
    rest = float(np.sum(count * signal)) - float(np.sum(count * band)) * spectrum.noise_power / math.e
    if lobe < LINE_SHARE * max(rest, lobe, 1e-300):
        return SpectralLay(peaks[0].lay_deg, "lobe", float(np.hypot(*f0)), None, spectrum, finest())
    lay, freq, se = refine_line(a, w, mean, f0, float(np.max(power)), noise_sigma, mask)
    return SpectralLay(lay, "line", freq, se, spectrum, finest())


def half_plane_count(columns: int, transform_cols: int) -> np.ndarray:
    """How many bins of the full plane each rfft column stands for: 2, but 1 at 0 (and at Nyquist)."""
    count = np.full(columns, 2.0)
    count[0] = 1.0
    if transform_cols % 2 == 0:
        count[-1] = 1.0
    return count


def line_lobe_power(signal: np.ndarray, k: tuple[int, int], transform_cols: int) -> float:
    """Power of a line's main lobe: the 3 x 3 padded bins about ``k``, at +f and -f.

    The rfft stores half the plane: a lobe reaching past column 0 continues in the mirrored bins
    (-row, -column); the lobe at -f is the same, so it counts twice.
    """
    cells = {
        ((k[0] + dr) % signal.shape[0], k[1] + dc)
        if k[1] + dc >= 0
        else ((-(k[0] + dr)) % signal.shape[0], -(k[1] + dc))
        for dr in (-1, 0, 1)
        for dc in (-1, 0, 1)
        if k[1] + dc < signal.shape[1]
    }
    return 2.0 * sum(float(signal[r, c]) for r, c in cells)


def refine_line(a, w, mean, f0, peak_power: float, noise_sigma: float, mask):
    """A line's lay refined to the maximum of the exact windowed Fourier transform, near ``f0``.

    Nelder-Mead from the padded periodogram's maximum ``f0`` (cycles/px, x and y up). Returns the
    lay (degrees, image axes), the line's frequency and its standard error: the Cramer-Rao bound
    of a sinusoid's orientation at the measured amplitude and noise, times
    :data:`HANN_VARIANCE_FACTOR` (None without a noise level).
    """
    from scipy import optimize  # here, not at import: only crossed gratings are refined this way

    rows, cols = a.shape
    wa = w * (a - mean)
    xs = np.arange(cols, dtype=np.float64)
    ys_up = -np.arange(rows, dtype=np.float64)
    res = optimize.minimize(
        lambda q: -_dtft_power(q, wa, xs, ys_up),
        np.asarray(f0, dtype=np.float64),
        method="Nelder-Mead",
        options={"xatol": 2e-7, "fatol": 1e-9 * peak_power},
    )
    fxo, fyo = res.x
    lay = float(np.mod(math.degrees(math.atan2(fyo, fxo)) + 90.0, 180.0))
    se = None
    if noise_sigma > 0:
        amplitude = 2.0 * math.sqrt(-res.fun) / float(np.sum(w))  # |X(f0)| = A/2 sum(w) for a sinusoid
        k_rad = 2.0 * math.pi * math.hypot(fxo, fyo)
        se = math.degrees(
            _orientation_crb(mask if mask is not None else np.ones(a.shape, bool), lay, amplitude / noise_sigma, k_rad)
        )
        se *= math.sqrt(HANN_VARIANCE_FACTOR)
    return lay, float(math.hypot(fxo, fyo)), se


def _orientation_crb(mask: np.ndarray, lay_deg: float, snr: float, k_rad: float) -> float:
    """Cramer-Rao bound (standard deviation, radians) of a sinusoid's orientation over ``mask``.

    ``I = (A^2 k^2 / (2 sigma^2)) sum u^2`` with u the pixel coordinate along the lines, from the
    pixels' centroid (for a centred window the phase, frequency and orientation decouple).
    """
    rows, cols = np.nonzero(mask)
    t = math.radians(lay_deg)
    u = (cols - cols.mean()) * math.cos(t) - (rows - rows.mean()) * math.sin(t)
    info = 0.5 * snr**2 * k_rad**2 * float(np.sum(u * u))
    return 1.0 / math.sqrt(info) if info > 0 else float("inf")


def tensor_angle_standard_error(block: np.ndarray, mask: np.ndarray | None = None, *, sigma: float = 1.0) -> float:
    """Standard error (degrees) of the region-summed structure tensor's angle, from the region's spectrum.

    The summed tensor is a linear function of the periodogram, ``T_ab = (1/N) sum_k D_a D_b* |X_k|^2``
    (Parseval, ``D`` the derivative filters' frequency responses), and the angle
    ``0.5 atan2(2 T_xy, T_xx - T_yy)`` is a smooth function of it. For a stationary texture the
    periodogram ordinates at distinct Fourier frequencies are nearly independent with variance
    equal to their squared mean, so (delta method) ``var(angle) = sum_k (d angle / d P_k)^2 P_k^2``,
    with the measured ordinates in place of their means. Unlike the scatter of cells, this holds
    however long the marks are correlated along the lay.

    References
    ----------
    .. [1] Brillinger, D. R. (1981). Time Series: Data Analysis and Theory, SIAM, ch. 5
       (asymptotic independence of periodogram ordinates). :doi:`10.1137/1.9780898719246`
    """
    from .derivatives import gaussian_derivative_kernels

    a = np.asarray(block, dtype=np.float64)
    m = np.ones(a.shape) if mask is None else np.asarray(mask, dtype=np.float64)
    n = float(m.sum())
    if n < 16:
        return float("inf")
    x = m * (a - np.sum(m * a) / n)
    spec = fft.rfft2(x, workers=-1)
    power = spec.real**2 + spec.imag**2
    smooth, deriv = gaussian_derivative_kernels(sigma)
    r = len(smooth) // 2
    taps = np.arange(-r, r + 1)

    def response(kernel, freqs):  # correlation kernel k(x): sum k(x) exp(+2 pi i f x)
        return np.exp(2j * np.pi * np.outer(freqs, taps)) @ kernel.astype(np.float64)

    fc, fr = fft.rfftfreq(a.shape[1]), fft.fftfreq(a.shape[0])
    dxc, sxc = response(deriv, fc)[None, :], response(smooth, fc)[None, :]
    dyr, syr = response(deriv, fr)[:, None], response(smooth, fr)[:, None]
    gx, gy = dxc * syr, sxc * dyr  # column and row derivative responses
    w_a = np.abs(gx) ** 2 - np.abs(gy) ** 2
    w_b = -2.0 * np.real(gx * np.conj(gy))  # y up: g_y = -d/drow
    count = np.full(power.shape[1], 2.0)
    count[0] = 1.0
    if a.shape[1] % 2 == 0:
        count[-1] = 1.0
    big_a = float(np.sum(count * w_a * power))
    big_b = float(np.sum(count * w_b * power))
    norm = big_a**2 + big_b**2
    if norm <= 0:
        return float("inf")
    dtheta = 0.5 * (big_a * w_b - big_b * w_a) / norm  # per unit of one ordinate
    var = float(np.sum(count * (dtheta * power) ** 2))
    return math.degrees(math.sqrt(var))
