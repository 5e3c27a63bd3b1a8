"""The uncertainty of a region's lay from the scatter of its cells (batch means)."""

from __future__ import annotations

import math

import numpy as np

from .axial import axial_mean

__all__ = ["COVERAGE_K", "MIN_UNCERTAINTY_BLOCKS", "standard_error", "cell_uncertainty"]

#: Blocks needed before a coarser block size enters the uncertainty estimate.
MIN_UNCERTAINTY_BLOCKS = 6

#: Coverage factor of the reported uncertainty (k = 2, about 95 %), as in the GUM.
COVERAGE_K = 2.0


def standard_error(lays: np.ndarray, weights: np.ndarray) -> float:
    """Standard error (degrees) of the weighted axial mean of ``lays``.

    The circular standard deviation of the doubled angles, halved, over the
    square root of Kish's effective number of samples.
    """
    _, r = axial_mean(lays, weights)
    r = min(max(r, 1e-12), 1.0)
    s_deg = 0.5 * math.degrees(math.sqrt(-2.0 * math.log(r)))
    n_eff = weights.sum() ** 2 / np.sum(weights**2)
    return s_deg / math.sqrt(n_eff)


def cell_uncertainty(lays: np.ndarray, weights: np.ndarray, keep: np.ndarray) -> float | None:
    """Expanded uncertainty (k = 2) of a region's axial mean from its cell grid.

    Neighbouring cells are not independent when the grain is correlated over
    more than a cell (long brushing marks), and then the scatter of single
    cells understates the error of their mean. The standard error is therefore
    also computed from blocks of 2x2 and 4x4 cells (each block's lay the
    weighted axial mean of its cells) wherever at least
    :data:`MIN_UNCERTAINTY_BLOCKS` blocks remain, and the largest is taken
    (the method of batch means).

    Parameters
    ----------
    lays, weights : (rows, cols) ndarray
        Cell angles (degrees, axial) and weights.
    keep : (rows, cols) bool ndarray
        Cells that take part.

    Returns
    -------
    float or None
        ``COVERAGE_K`` times the largest standard error, None with fewer than
        three cells.

    References
    ----------
    .. [1] Flegal, J. M., Jones, G. L. (2010). Batch means and spectral variance
       estimators in Markov chain Monte Carlo. Annals of Statistics 38(2),
       1034-1070. :doi:`10.1214/09-AOS735`
    """
    if keep.sum() < 3:
        return None
    errors = [standard_error(lays[keep], weights[keep])]
    doubled = np.radians(2.0 * np.where(keep, lays, 0.0))
    w = np.where(keep, weights, 0.0)
    rows, cols = lays.shape
    for block in (2, 4):
        starts_r, starts_c = np.arange(0, rows, block), np.arange(0, cols, block)
        if starts_r.size * starts_c.size < MIN_UNCERTAINTY_BLOCKS:
            break

        def block_sum(a):
            return np.add.reduceat(np.add.reduceat(a, starts_r, axis=0), starts_c, axis=1)

        bw = block_sum(w)
        bc, bs = block_sum(w * np.cos(doubled)), block_sum(w * np.sin(doubled))
        used = bw > 0
        if used.sum() < MIN_UNCERTAINTY_BLOCKS:
            break
        block_lays = np.mod(0.5 * np.degrees(np.arctan2(bs[used], bc[used])), 180.0)
        errors.append(standard_error(block_lays, bw[used]))
    return COVERAGE_K * max(errors)
