"""The uncertainty of a region's lay from the scatter of its cells (batch means)."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .axial import axial_mean

__all__ = [
    "COVERAGE_K",
    "MIN_UNCERTAINTY_BLOCKS",
    "DERIVATIVE_BIAS_DEG",
    "STEP_GRADIENT_ENERGY",
    "standard_error",
    "cell_uncertainty",
    "Budget",
    "combine",
]

#: Worst lay error of the sigma = 1 px Gaussian derivative on noise-free gratings of period 4-30 px at
#: every 2.5 deg, anywhere in the image (tests/measure/test_orientation.py, test_cells.py): a bound.
DERIVATIVE_BIAS_DEG = 0.0024

#: Gradient energy per pixel that a grey step of unit squared height on every 8th column adds
#: through the sigma = 1 px derivative: the derivative of a step is the Gaussian itself, and
#: ``sum g^2 = 1 / (2 sqrt(pi) sigma) = 0.282`` per step, one step in 8 columns.
STEP_GRADIENT_ENERGY = 1.0 / (2.0 * math.sqrt(math.pi)) / 8.0

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
    also computed from blocks of 2x2, 4x4 and 8x8 cells (each block's lay the
    weighted axial mean of its cells) wherever at least
    :data:`MIN_UNCERTAINTY_BLOCKS` blocks remain, and the largest is taken
    (the method of batch means). Each level's coverage factor is Student's t
    (97.5 %) for its effective number of samples less one, at least 2.

    Parameters
    ----------
    lays, weights : (rows, cols) ndarray
        Cell angles (degrees, axial) and weights.
    keep : (rows, cols) bool ndarray
        Cells that take part.

    Returns
    -------
    float or None
        The largest expanded standard error, None with fewer than three cells.

    References
    ----------
    .. [1] Flegal, J. M., Jones, G. L. (2010). Batch means and spectral variance
       estimators in Markov chain Monte Carlo. Annals of Statistics 38(2),
       1034-1070. :doi:`10.1214/09-AOS735`
    """
    if keep.sum() < 3:
        return None
    from scipy.special import stdtrit  # Student's t quantile, what scipy.stats.t.ppf calls (stats costs 0.4 s)

    def expanded(lays_, weights_):
        # Student's t for the effective number of samples (Kish) instead of k = 2 for few blocks
        n_eff = weights_.sum() ** 2 / max(float(np.sum(weights_**2)), 1e-300)
        k = max(COVERAGE_K, float(stdtrit(max(n_eff - 1.0, 1.0), 0.975)))
        return k * standard_error(lays_, weights_)

    errors = [expanded(lays[keep], weights[keep])]
    doubled = np.radians(2.0 * np.where(keep, lays, 0.0))
    w = np.where(keep, weights, 0.0)
    rows, cols = lays.shape
    for block in (2, 4, 8):
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
        errors.append(expanded(block_lays, bw[used]))
    return max(errors)


@dataclass
class Budget:
    """The parts of a region lay's uncertainty (standard uncertainties, degrees) and how they combine."""

    statistical: float  # scatter of the cells, or the combined tensor-and-spectrum estimate
    weighting: float = 0.0  # robust against plain mean of the cells that follow the lay
    derivative: float = DERIVATIVE_BIAS_DEG / math.sqrt(3.0)  # the derivative's own bias, a bound
    compression: float = 0.0  # the JPEG block grid's pull towards 0 and 90 degrees, a bound
    disagreement_ratio: float = 1.0  # Birge ratio of the two estimates (1 when they agree)

    def expanded(self) -> float:
        """``COVERAGE_K`` times the root sum of squares (GUM, JCGM 100:2008, 5.1.2 and 6.2.1)."""
        parts = (
            self.statistical * max(self.disagreement_ratio, 1.0),
            self.weighting,
            self.derivative,
            self.compression,
        )
        return COVERAGE_K * math.sqrt(sum(p * p for p in parts))

    def as_dict(self) -> dict:
        return {
            "statistical_deg": round(self.statistical, 5),
            "weighting_deg": round(self.weighting, 5),
            "derivative_deg": round(self.derivative, 5),
            "compression_deg": round(self.compression, 5),
            "disagreement_ratio": round(self.disagreement_ratio, 3),
        }


def combine(lay_a: float, se_a: float, lay_b: float, se_b: float) -> tuple[float, float, float]:
    """Inverse-variance weighted mean of two axial estimates, its standard error and the Birge ratio.

    The Birge ratio ``|a - b| / sqrt(se_a^2 + se_b^2)`` says how far the two disagree beyond
    their own scatter; above 1 the combined standard error is enlarged by it.

    References
    ----------
    .. [1] Birge, R. T. (1932). The calculation of errors by the method of least squares.
       Physical Review 40(2), 207-227. :doi:`10.1103/PhysRev.40.207`
    """
    from .axial import wrap_deviation

    d = wrap_deviation(lay_b, lay_a)
    se_a, se_b = max(se_a, 1e-9), max(se_b, 1e-9)  # a noise-free image: no scatter at all
    wa, wb = 1.0 / se_a**2, 1.0 / se_b**2
    lay = (lay_a + d * wb / (wa + wb)) % 180.0
    return lay, 1.0 / math.sqrt(wa + wb), abs(d) / math.sqrt(se_a**2 + se_b**2)
