"""A region's lay that a minority of cells cannot pull: scratches, fingerprints, weld marks.

Each cell contributes its doubled-angle tensor vector ``(jxx - jyy, 2 jxy)`` (length = the
cell's anisotropic energy ``l1 - l2``). The plain region lay is the direction of their sum;
one high-contrast scratch then outweighs many cells of fine grain. Here instead:

1. **Energy cap**: no cell counts more than :data:`ENERGY_CAP` times the median cell energy.
2. **Start at the mode**: the direction with the most capped weight within
   :data:`START_WINDOW_DEG`, found on a 0.25 degree grid.
3. **Redescending M-estimate**: iteratively reweighted with Tukey's biweight of each cell's
   deviation from the current lay, at ``4.685`` robust scales (1.4826 times the median
   absolute deviation, floored at :data:`MIN_SCALE_DEG`); cells beyond get weight 0.

Breakdown point: the start is the weighted mode and the biweight gives far cells no weight, so
the lay follows the grain as long as the grain holds more capped weight than any one other
direction; with cells of similar energy, up to half of the cells (tested: 45 % of the cells
turned 90 degrees, and a high-contrast scratch, leave the lay where the grain is).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .axial import wrap_deviation

__all__ = ["ENERGY_CAP", "RobustLay", "robust_lay"]

#: A cell counts at most this multiple of the median cell energy (common practice, no source).
ENERGY_CAP = 2.0

#: Half-width of the window in which the starting direction gathers its weight.
START_WINDOW_DEG = 15.0

#: Floor of the robust scale of the cell deviations (finer than any tolerance a recipe may set).
MIN_SCALE_DEG = 0.5

#: Tukey's biweight tuning constant (95 % efficiency at the normal distribution).
TUKEY_C = 4.685


@dataclass(frozen=True)
class RobustLay:
    """The robust lay of a set of cells.

    ``lay_deg`` is in the input's frame ([0, 180)); ``weights`` the final weight of each cell
    (capped energy times biweight; 0 for an outlier); ``outliers`` the cells given no weight;
    ``scale_deg`` the robust scale of the cell deviations; ``plain_deg`` the direction of the
    plain (energy-weighted) sum for comparison.
    """

    lay_deg: float
    weights: np.ndarray
    outliers: np.ndarray
    scale_deg: float
    plain_deg: float
    iterations: int


def _direction(vx: np.ndarray, vy: np.ndarray, w: np.ndarray) -> float:
    return float(np.mod(0.5 * math.degrees(math.atan2(np.sum(w * vy), np.sum(w * vx))), 180.0))


def robust_lay(lay_deg: np.ndarray, energy: np.ndarray, *, max_iter: int = 50) -> RobustLay:
    """Robust axial mean of cell lays weighted by their (capped) anisotropic energy.

    Parameters
    ----------
    lay_deg : (n,) ndarray
        Cell lays in degrees (axial).
    energy : (n,) ndarray
        Cell anisotropic energies ``l1 - l2`` (>= 0).

    Returns
    -------
    RobustLay

    References
    ----------
    .. [1] Huber, P. J., Ronchetti, E. M. (2009). Robust Statistics, 2nd ed., Wiley, ch. 4
       (M-estimates of location, redescending psi functions). :doi:`10.1002/9780470434697`
    .. [2] Beaton, A. E., Tukey, J. W. (1974). The fitting of power series, meaning polynomials,
       illustrated on band-spectroscopic data. Technometrics 16(2), 147-185.
       :doi:`10.1080/00401706.1974.10489171`
    """
    lay = np.asarray(lay_deg, dtype=np.float64).ravel()
    e = np.maximum(np.asarray(energy, dtype=np.float64).ravel(), 0.0)
    if lay.size == 0 or not np.any(e > 0):
        raise ValueError("robust_lay needs at least one cell with energy (got none)")
    doubled = np.radians(2.0 * lay)
    vx, vy = np.cos(doubled), np.sin(doubled)
    plain = _direction(vx, vy, e)
    capped = np.minimum(e, ENERGY_CAP * float(np.median(e[e > 0])))
    # start at the mode: capped weight within the window, on a fine grid of directions
    grid = np.arange(0.0, 180.0, 0.25)
    hist = np.bincount(np.floor(np.mod(lay, 180.0) / 0.25).astype(np.intp) % grid.size, capped, grid.size)
    half = int(START_WINDOW_DEG / 0.25)
    kernel = np.ones(2 * half + 1)
    wrapped = np.concatenate([hist[-half:], hist, hist[:half]])
    start = float(grid[int(np.argmax(np.convolve(wrapped, kernel, mode="valid")))] + 0.125)
    near = np.abs(wrap_deviation(lay, start)) <= START_WINDOW_DEG
    theta = _direction(vx[near], vy[near], capped[near])
    w = capped
    scale = MIN_SCALE_DEG
    it = 0
    for it in range(1, max_iter + 1):
        d = np.abs(wrap_deviation(lay, theta))
        inl = d[capped > 0]
        scale = max(1.4826 * float(np.median(inl)), MIN_SCALE_DEG)
        u = d / (TUKEY_C * scale)
        w = capped * np.where(u < 1.0, (1.0 - u * u) ** 2, 0.0)
        new = _direction(vx, vy, w)
        step = abs(wrap_deviation(new, theta))
        theta = new
        if step < 1e-7:
            break
    return RobustLay(
        lay_deg=theta, weights=w, outliers=(w == 0) & (e > 0), scale_deg=scale, plain_deg=plain, iterations=it
    )
