"""The image's own noise level and what it gives through the derivative filters."""

from __future__ import annotations

import math

import cv2
import numpy as np

from .cells import STRIP_ROWS
from .derivatives import gaussian_derivative_kernels

__all__ = ["noise_sigma", "noise_gradient_energy"]


#: Immerkaer's mask is the outer product of two second differences, applied separably.
_SECOND_DIFFERENCE = np.array([1, -2, 1], dtype=np.float32)

#: An image larger than this is sampled in evenly spaced strips of rows holding about this many
#: pixels: the estimate's relative standard error on white noise is ``sqrt(pi/2 - 1) / sqrt(n)``
#: (the spread of a mean of |Gaussian| values), 0.04 % at 4 MP, far below what any use of it needs.
NOISE_SAMPLE_PX = 4_000_000


def noise_sigma(
    image: np.ndarray, mask: np.ndarray | None = None, *, threads: int = 1, max_pixels: int | None = NOISE_SAMPLE_PX
) -> float:
    """Fast estimate of the standard deviation of additive white noise.

    Parameters
    ----------
    image : (M, N) ndarray
    mask : (M, N) bool ndarray, optional
        Restrict the estimate to these pixels.
    threads : int
        Strips filtered at once (OpenCV releases the GIL).
    max_pixels : int or None
        Above this many pixels, only every k-th strip of :data:`.cells.STRIP_ROWS` rows is read,
        k the smallest that brings the sample to at most this size (None: every pixel).

    Returns
    -------
    sigma : float
        ``sqrt(pi/2) / 6 * mean(|I * N|)`` with N the 3x3 difference-of-
        Laplacians mask, over the interior pixels.

    Notes
    -----
    Computed in strips so that no full-size float copy is made. Fine texture
    raises the estimate a little, which errs towards calling a faint texture
    "no texture" rather than inventing an angle.

    References
    ----------
    .. [1] Immerkaer, J. (1996). Fast noise variance estimation. Computer Vision
       and Image Understanding 64(2), 300-302. :doi:`10.1006/cviu.1996.0060`
    """
    img = np.asarray(image)
    rows, cols = img.shape
    if rows < 3 or cols < 3:
        raise ValueError(f"noise_sigma needs an image of at least 3x3 (got {img.shape})")

    def strip(r0: int) -> tuple[float, int]:
        r1 = min(r0 + STRIP_ROWS, rows - 1)
        block = np.ascontiguousarray(img[r0 - 1 : r1 + 1], dtype=np.float32)
        k = _SECOND_DIFFERENCE
        resp = cv2.sepFilter2D(block, cv2.CV_32F, k, k)[1:-1, 1:-1]
        if mask is None:
            return cv2.norm(resp, cv2.NORM_L1), resp.size  # sum of |resp|, accumulated in double
        m = np.asarray(mask[r0:r1, 1:-1], dtype=bool)
        return float(np.abs(resp[m]).sum(dtype=np.float64)), int(np.count_nonzero(m))

    from concurrent.futures import ThreadPoolExecutor

    with ThreadPoolExecutor(max_workers=max(1, threads)) as pool:
        every = 1 if max_pixels is None else max(1, -(-rows * cols // max(int(max_pixels), 1)))
        parts = list(pool.map(strip, range(1, rows - 1, STRIP_ROWS * every)))
    total, count = sum(p[0] for p in parts), sum(p[1] for p in parts)
    if count == 0:
        return 0.0
    return math.sqrt(math.pi / 2.0) / 6.0 * total / count


def noise_gradient_energy(noise_sigma_value: float, sigma: float = 1.0) -> float:
    """Expected ``gx^2 + gy^2`` per pixel that white noise of this sigma produces.

    The Gaussian-derivative filters of :func:`gradients` are linear, so white
    noise of variance s^2 gives each component variance s^2 times the sum of
    the squared 2-D kernel (exact for the sampled kernels used).
    """
    smooth, deriv = gaussian_derivative_kernels(sigma)
    per_component = float(np.sum(deriv.astype(np.float64) ** 2) * np.sum(smooth.astype(np.float64) ** 2))
    return 2.0 * per_component * noise_sigma_value**2
