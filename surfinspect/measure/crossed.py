"""Crossed lay from the angular power spectrum: the families of marks, their directions and shares.

Cross-ground, cross-brushed and honed surfaces carry two families of marks. Where the families
add, the local gradient points between them, and a histogram of gradient directions has no
clean peaks; the power spectrum of the same region holds one ridge per family whatever their
relative strength or phase (power adds for independent families). The direction analysis behind
the texture direction ``Std`` of ISO 25178-2 reads the directions off the angular power spectrum;
here:

1. the Hann-windowed, zero-padded periodogram of the region, white-noise power subtracted, and
   its angular power spectrum (:func:`.spectrum.angular_power_spectrum`, 1° bins);
2. its peaks, ranked by topographic prominence, at least the region's angular resolution apart;
3. each peak refined between bins: a line (a grating, a regular machining mark) at the maximum
   of the exact windowed Fourier transform, a broad lobe (brushed, ground) as the doubled-angle
   centroid of the periodogram ordinates within the lobe, re-centred on its own estimate;
4. a standard error for each: the Cramer-Rao bound at the measured SNR for a line, the delta
   method on the periodogram ordinates for a lobe (:func:`lobe_standard_error`);
5. each family's share of the spectral energy (ordinates assigned to the nearer direction).

:func:`family_energy_per_cell` gives the same families' energy cell by cell, for the local check.
Pure functions on arrays; directions in image axes (the caller turns them into the part frame).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import fft

from .axial import wrap_deviation
from .spectrum import (
    F_MIN,
    LINE_SHARE,
    AngularSpectrum,
    _angular,
    _geometry,
    _periodogram,
    _window,
    half_plane_count,
    line_lobe_power,
    refine_line,
)

__all__ = [
    "FAMILY_MIN_SHARE",
    "FAMILY_MIN_CONTRAST",
    "Family",
    "SpectralFamilies",
    "spectral_families",
    "angular_resolution_deg",
    "lobe_standard_error",
    "family_energy_per_cell",
]

#: A peak of the angular spectrum counts as a family of marks when its lobe holds at least this share
#: of the band's power ... (a second pass at a tenth of the first's amplitude holds about 1 %).
#: Chosen on synthetic crossed textures, no source.
FAMILY_MIN_SHARE = 0.005

#: ... and its height stands at least this many times above the spectrum's floor (the median bin).
#: Single brushed textures: the next peak stands 1-10 x; a second family at a tenth of the
#: amplitude 100 x and more. Chosen on synthetic textures, no source.
FAMILY_MIN_CONTRAST = 20.0

#: Bins of the angular spectrum over [0, 180).
BINS = 180

#: Re-centring steps of a lobe's centroid window.
CENTROID_STEPS = 4


@dataclass(frozen=True)
class Family:
    """One family of marks found in the spectrum (directions in image axes, lay convention)."""

    lay_deg: float
    standard_error_deg: float | None  # statistical, from the spectrum (None when it cannot be given)
    share: float  # of the families' spectral energy (ordinates assigned to the nearer direction)
    lobe_share: float  # the lobe's share of the band's power above the noise (the presence test)
    contrast: float  # the lobe's peak height over the angular spectrum's floor (median bin)
    method: str  # "line" (refined Fourier peak) or "lobe" (centroid of the ordinates)
    frequency: float  # power-weighted mean frequency of the lobe, cycles per pixel
    half_width_deg: float  # half-width of the window the direction was refined in

    @property
    def present(self) -> bool:
        return self.lobe_share >= FAMILY_MIN_SHARE and self.contrast >= FAMILY_MIN_CONTRAST


@dataclass(frozen=True)
class SpectralFamilies:
    """The strongest families of a region's spectrum, strongest first (present or not)."""

    families: tuple[Family, ...]
    spectrum: AngularSpectrum
    resolution_deg: float  # the closest two families can be and still be told apart here
    pixels: int

    @property
    def present(self) -> tuple[Family, ...]:
        return tuple(f for f in self.families if f.present)


def angular_resolution_deg(side_px: float, frequency: float) -> float:
    """Angular resolution (degrees) of a Hann-windowed spectrum of ``side_px`` at ``frequency`` (cycles/px).

    The Hann window's main lobe reaches 2 bins (``2 / side`` cycles per pixel) from a line; at
    radius ``f`` that is ``2 / (side f)`` radians of direction. Two lines closer than this merge
    into one lobe (the Rayleigh-like criterion for a Hann window), and no refinement separates
    them. Floored at two bins of the angular spectrum.

    References
    ----------
    .. [1] Harris, F. J. (1978). On the use of windows for harmonic analysis with the discrete
       Fourier transform. Proc. IEEE 66(1), 51-83. :doi:`10.1109/PROC.1978.10837`
    """
    if side_px <= 0 or frequency <= 0:
        return 90.0
    return float(min(90.0, max(2.0 * 180.0 / BINS, math.degrees(2.0 / (side_px * frequency)))))


def _correlation_factor(w: np.ndarray, pad: int) -> float:
    """Sum of squared correlations between one periodogram ordinate and its neighbours on the padded grid.

    ``pad^2 M N sum(w^4) / (sum w^2)^2`` (Parseval on the padded transform of ``w^2``): about 15 for
    a full Hann window padded twice, 1 for an unpadded rectangular one.
    """
    w2 = w * w
    return float(pad * pad * w.size * np.sum(w2 * w2) / max(float(np.sum(w2)) ** 2, 1e-300))


def lobe_standard_error(phi_deg, raw, noise: float, weight, correlation: float) -> float:
    """Standard error (degrees) of a lobe's doubled-angle centroid, by the delta method.

    The centroid ``0.5 atan2(S, C)`` with ``C, S = sum q_k (cos, sin) 2 phi_k`` and
    ``q_k = weight_k max(P_k - N, 0)`` is a smooth function of the periodogram ordinates ``P_k``;
    for a stationary texture the ordinates are nearly independent with variance equal to their
    squared mean (exponentially distributed), so ``var = c sum_k (d theta / d P_k)^2 P_k^2``, where
    ``c`` (:func:`_correlation_factor`) accounts for the window and the zero-padding, which make
    neighbouring ordinates correlated.

    References
    ----------
    .. [1] Brillinger, D. R. (1981). Time Series: Data Analysis and Theory, SIAM, ch. 5
       (asymptotic independence of periodogram ordinates). :doi:`10.1137/1.9780898719246`
    """
    t = np.radians(2.0 * np.asarray(phi_deg))
    q = weight * np.maximum(raw - noise, 0.0)
    c, s = float(np.sum(q * np.cos(t))), float(np.sum(q * np.sin(t)))
    norm = c * c + s * s
    if norm <= 0:
        return float("inf")
    d = np.where(raw > noise, weight * 0.5 * (c * np.sin(t) - s * np.cos(t)) / norm, 0.0)
    return math.degrees(math.sqrt(correlation * float(np.sum((d * raw) ** 2))))


def _centroid(phi, q, start: float, half: float) -> tuple[float, np.ndarray]:
    """Doubled-angle centroid of the ordinates within ``half`` degrees, re-centred on its own estimate."""
    lay = start
    sel = np.abs(wrap_deviation(phi, lay)) <= half
    for _ in range(CENTROID_STEPS):
        t = np.radians(2.0 * phi[sel])
        c, s = np.sum(q[sel] * np.cos(t)), np.sum(q[sel] * np.sin(t))
        if c == 0 and s == 0:
            break
        lay = float(np.mod(0.5 * math.degrees(math.atan2(s, c)), 180.0))
        sel = np.abs(wrap_deviation(phi, lay)) <= half
    return lay, sel


def _peaks(power: np.ndarray, resolution: float, count: int) -> list[int]:
    """Bins of the ``count`` most prominent peaks of a circular spectrum, ``resolution`` degrees apart.

    A peak counts when the spectrum falls to below half its height on the way to any higher
    peak (prominence at least half the height): a shoulder or ripple on another peak's flank is
    not a family of its own.
    """
    from scipy import signal  # here, not at import: scipy.signal costs about a second to load

    n = power.size
    tripled = np.concatenate([power, power, power])
    where, props = signal.find_peaks(tripled, prominence=0.0, plateau_size=(1, None))
    mid = (where >= n) & (where < 2 * n)
    bins, prominence = where[mid] - n, props["prominences"][mid]
    standalone = prominence >= 0.5 * power[bins]
    bins, prominence = bins[standalone], prominence[standalone]
    chosen: list[int] = []
    width = 180.0 / n
    for k in bins[np.argsort(-prominence, kind="stable")]:
        angle = (k + 0.5) * width
        if all(abs(wrap_deviation(angle, (j + 0.5) * width)) >= resolution for j in chosen):
            chosen.append(int(k))
        if len(chosen) == count:
            break
    return chosen


def _half_height(power: np.ndarray, k: int) -> int:
    """Bins from peak ``k`` to where the spectrum first falls below half its height (the wider side)."""
    n = power.size
    half = 0.5 * power[k]
    left = right = 1
    while left < n // 4 and power[(k - left) % n] >= half:
        left += 1
    while right < n // 4 and power[(k + right) % n] >= half:
        right += 1
    return max(left, right)


def spectral_families(
    block: np.ndarray, mask: np.ndarray | None = None, *, noise_sigma: float = 0.0, count: int = 2, pad: int = 2
) -> SpectralFamilies:
    """The ``count`` strongest families of marks in a region's power spectrum (see the module's notes).

    Parameters
    ----------
    block : (M, N) ndarray
        Grey values of the region's bounding box.
    mask : (M, N) bool ndarray, optional
        Region pixels (the window is zero elsewhere).
    noise_sigma : float
        Standard deviation of the image's white noise (its power is subtracted).
    count : int
        Families to look for.
    pad : int
        Zero-padding factor of the transform.

    Returns
    -------
    SpectralFamilies
        Strongest first; a family whose lobe does not stand out (:attr:`Family.present` False)
        is still listed, so that a judge can say what it found where the second should be.

    References
    ----------
    .. [1] ISO 25178-2:2012, Geometrical product specifications (GPS) - Surface texture: Areal -
       Part 2: Terms, definitions and surface texture parameters, 4.3.3 (texture direction Std).
    .. [2] Rife, D. C., Boorstyn, R. R. (1974). Single-tone parameter estimation from
       discrete-time observations. IEEE Trans. Information Theory 20(5), 591-598.
       :doi:`10.1109/TIT.1974.1055282`
    """
    a = np.asarray(block, dtype=np.float64)
    w = _window(a.shape, mask)
    power, shape, mean = _periodogram(a, w, pad)
    noise = noise_sigma**2 * float(np.sum(w * w))
    geometry = _geometry(shape, BINS, (F_MIN, 0.5))  # frequencies and votes, once per transform size
    fx, fy, band = geometry["fx"], geometry["fy"], geometry["band"]
    spectrum = _angular(power, geometry, noise, BINS, (F_MIN, 0.5))
    f = np.hypot(fx, fy)
    count_col = np.broadcast_to(half_plane_count(power.shape[1], pad * a.shape[1])[None, :], power.shape)
    raw, freq, weight = power[band], f[band], count_col[band]
    phi = np.mod(np.degrees(np.arctan2(fy[band], fx[band])) + 90.0, 180.0)
    q = weight * np.maximum(raw - noise, 0.0)
    total = float(q.sum())
    pixels = int(a.size if mask is None else np.count_nonzero(mask))
    side = math.sqrt(pixels)
    f_c = float(np.sum(q * freq) / total) if total > 0 else 0.0
    resolution = angular_resolution_deg(side, f_c)
    floor = max(float(np.median(spectrum.power)), 1e-300)
    candidates = _peaks(spectrum.power, resolution, count + 3)
    ctx = _Lobes(a, w, mean, fx, fy, power, noise, noise_sigma, mask, pad, phi, q, raw, freq, weight, band)
    found: list[Family] = []
    for k in candidates:
        start = (k + 0.5) * spectrum.bin_width_deg
        others = [(j + 0.5) * spectrum.bin_width_deg for j in candidates if j != k]
        half = (_half_height(spectrum.power, k) + 0.5) * spectrum.bin_width_deg
        if others:
            half = min(half, 0.45 * min(abs(wrap_deviation(start, o)) for o in others))
        half = max(half, resolution / 2.0, 2.0 * spectrum.bin_width_deg)
        contrast = (float(spectrum.power[k]) - floor) / floor
        fam = ctx.refine(start, half, contrast, total)
        # a peak within a stronger family's lobe, or closer to it than its own frequency resolves (a long
        # scratch along the grain: a line at low frequency), is part of that family
        if any(
            abs(wrap_deviation(fam.lay_deg, g.lay_deg))
            < max(angular_resolution_deg(side, fam.frequency), g.half_width_deg)
            for g in found
        ):
            continue
        found.append(fam)
        if len(found) == count:
            break
    found = _with_shares(_clean_lines(a, w, mean, found, float(np.max(power)), noise_sigma, mask), phi, q)
    return SpectralFamilies(tuple(found), spectrum, resolution, pixels)


class _Lobes:
    """One region's periodogram ordinates in the band, and the refinement of one peak among them."""

    def __init__(self, a, w, mean, fx, fy, power, noise, noise_sigma, mask, pad, phi, q, raw, freq, weight, band):
        self.a, self.w, self.mean, self.fx, self.fy, self.power = a, w, mean, fx, fy, power
        self.noise, self.noise_sigma, self.mask, self.pad = noise, noise_sigma, mask, pad
        self.phi, self.q, self.raw, self.freq, self.weight = phi, q, raw, freq, weight
        self.signal = np.maximum(power - noise, 0.0) * band
        self.rows, self.cols = np.nonzero(band)
        self.correlation = _correlation_factor(w, pad)

    def refine(self, start: float, half: float, contrast: float, total: float) -> Family:
        """A lobe's direction: its re-centred centroid, or the refined Fourier peak when it is a line."""
        phi, q = self.phi, self.q
        lay, sel = _centroid(phi, q, start, half)
        lobe_q = float(q[sel].sum())
        f_lobe = float(np.sum(q[sel] * self.freq[sel]) / lobe_q) if lobe_q > 0 else 0.0
        method = "lobe"
        se = lobe_standard_error(phi[sel], self.raw[sel], self.noise, self.weight[sel], self.correlation)
        if lobe_q > 0:
            top = int(np.argmax(np.where(sel, q, -1.0)))
            at = (int(self.rows[top]), int(self.cols[top]))
            if line_lobe_power(self.signal, at, self.pad * self.a.shape[1]) >= LINE_SHARE * lobe_q:
                f0 = np.array([self.fx[at], self.fy[at]])
                lay, f_lobe, se = refine_line(
                    self.a, self.w, self.mean, f0, float(self.power[at]), self.noise_sigma, self.mask
                )
                method = "line"
        se = se if se is None or np.isfinite(se) else None
        share = lobe_q / total if total > 0 else 0.0
        return Family(lay, se, 0.0, share, contrast, method, f_lobe, half)


def _sinusoid(a: np.ndarray, mask, lay_deg: float, frequency: float) -> np.ndarray:
    """Least-squares sinusoid of direction ``lay_deg`` and ``frequency`` fitted to ``a`` (its region pixels)."""
    rows, cols = a.shape
    t = math.radians(lay_deg)
    fx, fy = frequency * math.sin(t), -frequency * math.cos(t)  # across the lines (y up)
    x = np.arange(cols, dtype=np.float64)[None, :]
    y_up = -np.arange(rows, dtype=np.float64)[:, None]
    arg = 2.0 * math.pi * (fx * x + fy * y_up)
    basis = np.stack([np.cos(arg), np.sin(arg)])
    m = np.ones(a.shape) if mask is None else np.asarray(mask, dtype=np.float64)
    gram = np.einsum("ihw,jhw->ij", basis * m, basis)
    coef = np.linalg.lstsq(gram, np.einsum("ihw,hw->i", basis * m, a), rcond=None)[0]
    return np.tensordot(coef, basis, axes=1)


def _clean_lines(a, w, mean, found: list[Family], peak_power: float, noise_sigma: float, mask) -> list[Family]:
    """Refine each line again with the other lines taken out (one CLEAN step).

    A line's refined peak is pulled a little by the window leakage of a nearby line (0.003° at 20°
    apart on 448 px, 0.2° on 128 px); the fitted sinusoids of the others are subtracted and the
    line refined once more. The change enters the line's standard error as a bound (``|d| / sqrt 3``).

    References
    ----------
    .. [1] Hogbom, J. A. (1974). Aperture synthesis with a non-regular distribution of
       interferometer baselines. Astronomy and Astrophysics Supplement 15, 417-426.
    """
    from dataclasses import replace

    lines = [i for i, f in enumerate(found) if f.method == "line"]
    if len(lines) < 2:
        return found
    centred = a - mean
    waves = {i: _sinusoid(centred, mask, found[i].lay_deg, found[i].frequency) for i in lines}
    out = list(found)
    for i in lines:
        rest = centred - sum(waves[j] for j in lines if j != i)
        t = math.radians(found[i].lay_deg)
        f0 = np.array([found[i].frequency * math.sin(t), -found[i].frequency * math.cos(t)])
        lay, freq, se = refine_line(rest, w, 0.0, f0, peak_power, noise_sigma, mask)
        moved = abs(wrap_deviation(lay, found[i].lay_deg))
        se = None if se is None else math.hypot(se, moved / math.sqrt(3.0))
        out[i] = replace(found[i], lay_deg=lay, frequency=freq, standard_error_deg=se)
    return out


def _with_shares(found: list[Family], phi: np.ndarray, q: np.ndarray) -> list[Family]:
    """Each family's share of the energy: every ordinate counts for the nearer of the families present."""
    from dataclasses import replace

    if not found:
        return found
    lays = np.array([f.lay_deg for f in found])
    nearest = np.argmin(np.abs(wrap_deviation(phi[:, None], lays[None, :])), axis=1)
    energy = np.bincount(nearest, q, len(found))
    total = float(energy.sum())
    return [replace(f, share=float(e / total) if total > 0 else 0.0) for f, e in zip(found, energy)]


def family_energy_per_cell(
    image: np.ndarray,
    bbox: tuple[int, int, int, int],
    cell_px: int,
    n_cells: tuple[int, int],
    lays_deg,
    *,
    noise_sigma: float = 0.0,
    half_width_deg: float = 45.0,
    window_cells: float = 2.0,
    with_total: bool = False,
) -> np.ndarray:
    """Spectral energy near each family's direction, cell by cell: ``(rows, cols, k)``.

    Each cell is looked at through a Hann window of twice the cell's side centred on it (moved
    inside the box where it would leave it); the ordinates of its periodogram within
    ``half_width_deg`` of a family's direction (the nearer family when two are that close), above
    the band's lowest frequency at which the window still resolves ``half_width_deg``, count
    for that family, the white noise's power subtracted. With ``with_total`` a last channel holds
    the cell's whole energy in that band.
    """
    x0, y0, w, h = (int(v) for v in bbox)
    rows, cols = n_cells
    side = min(int(round(window_cells * cell_px)), w, h)
    wy, wx = np.hanning(side + 2)[1:-1], np.hanning(side + 2)[1:-1]
    win = np.outer(wy, wx).astype(np.float32)
    fxs = fft.rfftfreq(side)[None, :]
    fys = -fft.fftfreq(side)[:, None]
    f = np.hypot(fxs, fys)
    phi = np.mod(np.degrees(np.arctan2(fys, fxs)) + 90.0, 180.0)
    lays = np.asarray(lays_deg, dtype=np.float64)
    dev = np.abs(wrap_deviation(phi[..., None], lays))
    nearest = np.argmin(dev, axis=-1)
    f_low = max(F_MIN, 2.0 / (side * math.radians(max(half_width_deg, 1.0))))
    inband = (f >= f_low) & (f <= 0.5)
    weight = half_plane_count(f.shape[1], side)[None, :] * inband
    sectors = [(nearest == i) & (dev[..., i] <= half_width_deg) for i in range(lays.size)]
    select = np.stack(sectors + ([np.ones_like(nearest, bool)] if with_total else []), axis=-1)
    select = select * weight[..., None]
    noise = noise_sigma**2 * float(np.sum(win.astype(np.float64) ** 2))
    r_start = np.clip(np.arange(rows) * cell_px + cell_px // 2 - side // 2, 0, h - side) + y0
    c_start = np.clip(np.arange(cols) * cell_px + cell_px // 2 - side // 2, 0, w - side) + x0
    out = np.zeros((rows, cols, select.shape[-1]))
    offsets = np.arange(side)
    for i, r in enumerate(r_start):
        tiles = image[r : r + side][:, c_start[:, None] + offsets[None, :]]  # (side, cols, side)
        tiles = np.ascontiguousarray(np.transpose(tiles, (1, 0, 2)), dtype=np.float32)
        tiles = tiles - tiles.mean(axis=(1, 2), keepdims=True)
        spec = fft.rfft2(tiles * win, axes=(1, 2), workers=-1)
        p = np.maximum(spec.real**2 + spec.imag**2 - noise, 0.0)
        out[i] = np.tensordot(p, select, axes=([1, 2], [0, 1]))
    return out
