"""What the camera adds to a surface: clipped highlights, uneven light, JPEG blocks, blur.

Pure functions on arrays. Each finds one photo condition so that the measurement can leave it
out (saturated pixels), remove it (the illumination background), discount it (the JPEG block
grid) or report it (an unsharp image).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

__all__ = [
    "SATURATION_CODE_MARGIN",
    "saturated_pixels",
    "grown_by",
    "IlluminationBackground",
    "illumination_background",
    "BlockGrid",
    "block_grid",
]

#: A pixel counts as clipped at full scale when it is within this of 1.0 (half a 16-bit code).
SATURATION_CODE_MARGIN = 0.5 / 65535.0


def saturated_pixels(block: np.ndarray, level: float = 1.0, radius_px: int = 4) -> np.ndarray | None:
    """Pixels that are clipped, or whose derivative kernel reaches a clipped pixel.

    Parameters
    ----------
    block : (M, N) float ndarray
        Grey values on the [0, 1] scale.
    level : float
        Values at or above this are clipped (1.0: the image's maximum code value).
    radius_px : int
        The derivative kernel's radius: clipped pixels are grown by this (a square of side
        ``2 radius + 1``), so no measured gradient sees a clipped value.

    Returns
    -------
    (M, N) bool ndarray, or None when nothing is clipped.
    """
    threshold = np.float32(min(level, 1.0) - SATURATION_CODE_MARGIN)
    if block.size == 0 or np.max(block) < threshold:  # one fast pass: nothing clipped (NaN goes on)
        return None
    clipped = block >= threshold
    if not clipped.any():
        return None
    return grown_by(clipped, radius_px)


def grown_by(pixels: np.ndarray, radius_px: int) -> np.ndarray:
    """``pixels`` (bool) grown by a square of side ``2 radius + 1``; nothing grows in from beyond the array."""
    side = 2 * int(radius_px) + 1
    grown = cv2.dilate(pixels.view(np.uint8), np.ones((side, side), np.uint8), borderType=cv2.BORDER_CONSTANT)
    return grown.view(bool)


@dataclass(frozen=True)
class IlluminationBackground:
    """A smooth background on a grid four times coarser than the image, and where it lies.

    ``small[i, j]`` is the background at image pixel ``(origin_y + 4 i, origin_x + 4 j)``.
    """

    small: np.ndarray
    origin: tuple[int, int]  # (x, y) image px of small[0, 0]

    def sample(self, row0: int, row1: int, col0: int, col1: int) -> np.ndarray:
        """The background on image rows ``row0:row1`` and columns ``col0:col1`` (bilinear).

        Separable: along the columns on the few coarse rows the block needs (``warpAffine``), then
        between those rows. Image pixels fall on quarters of the coarse grid, so each output row is
        one fixed weighting of two coarse rows (``addWeighted``), as exact as one 2-D bilinear step
        (within an ulp) at under half its cost; beyond the grid the edge value repeats.
        """
        ox, oy = self.origin
        m = self.small.shape[0]
        first, last = (row0 - oy) // 4, (row1 - 1 - oy) // 4
        coarse = self.small[np.clip(np.arange(first, last + 2), 0, m - 1)]
        # destination column x reads the coarse grid at (x + col0 - ox) / 4
        to_small = np.array([[0.25, 0.0, (col0 - ox) / 4.0], [0.0, 1.0, 0.0]])
        along = cv2.warpAffine(
            coarse,
            to_small,
            (col1 - col0, coarse.shape[0]),
            flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP,
            borderMode=cv2.BORDER_REPLICATE,
        )
        n = row1 - row0
        out = np.empty((n, col1 - col0), np.float32)
        for q in range(min(4, n)):  # rows q, q + 4, ... share their place between two coarse rows
            phase, a = (row0 + q - oy) % 4, (row0 + q - oy) // 4 - first
            k = len(range(q, n, 4))
            if phase == 0:
                out[q::4] = along[a : a + k]
            else:
                w = phase / 4.0
                cv2.addWeighted(along[a : a + k], 1.0 - w, along[a + 1 : a + 1 + k], w, 0.0, dst=out[q::4])
        return out


def illumination_background(block: np.ndarray, sigma_px: float, *, origin: tuple[int, int] = (0, 0)):
    """The slowly varying light on a surface: a Gaussian of ``sigma_px`` over the image.

    Two Gaussian pyramid levels (``cv2.pyrDown``, which filters before it decimates, so that
    fine grain does not alias into the background), then a Gaussian of ``sigma_px / 4`` on the
    reduced grid. A linear ramp passes a Gaussian unchanged, so a ramp is removed exactly; a
    vignette (quadratic falloff) up to a constant, which has no gradient. The texture loses only
    its components coarser than about ``2 pi sigma_px`` pixels.

    Parameters
    ----------
    block : (M, N) float32 ndarray
    sigma_px : float
        Scale of the background in image pixels (at least 4).
    origin : (x, y)
        Image position of ``block[0, 0]``, kept for :meth:`IlluminationBackground.sample`.

    Returns
    -------
    IlluminationBackground

    References
    ----------
    .. [1] Burt, P. J., Adelson, E. H. (1983). The Laplacian pyramid as a compact image code.
       IEEE Trans. Communications 31(4), 532-540. :doi:`10.1109/TCOM.1983.1095851`
    """
    small = np.ascontiguousarray(block, dtype=np.float32)
    for _ in range(2):
        small = cv2.pyrDown(small, borderType=cv2.BORDER_REFLECT_101)
    # each pyrDown level is close to a Gaussian of sigma 1 px at its input scale: together ~2.2 px
    rest = math.sqrt(max(sigma_px**2 - 5.0, 1.0)) / 4.0
    small = cv2.GaussianBlur(small, (0, 0), rest, borderType=cv2.BORDER_REFLECT_101)
    return IlluminationBackground(small=small, origin=origin)


@dataclass(frozen=True)
class BlockGrid:
    """How strongly an 8 x 8 block grid (JPEG) shows in an image.

    ``contrast`` is the mean squared step between neighbouring pixels across the block boundary
    divided by the median over the other seven phases (1: no grid), for columns and rows
    together; ``phase_col`` and ``phase_row`` are the boundary positions (``c % 8`` of the
    first column after a boundary); ``step_variance`` the squared step the grid adds
    (boundary minus the median phase), in grey levels squared on the [0, 1] scale.
    """

    contrast: float
    phase_col: int
    phase_row: int
    step_variance: float
    step_col: float = 0.0  # squared step added across the vertical boundaries (between columns)
    step_row: float = 0.0  # ... and across the horizontal ones (between rows)

    @property
    def present(self) -> bool:
        return self.contrast >= BLOCK_GRID_MIN_CONTRAST


#: A block grid is present when the squared step across its boundaries is at least this multiple
#: of the other phases'. Uncompressed textures stay near 1.0-1.1, brushed panels saved at q 50 reach
#: about 1.6, blank panels at q 50-75 several times more; at q 95 the grid no longer shows (1.1).
BLOCK_GRID_MIN_CONTRAST = 1.6


def block_grid(block: np.ndarray, mask: np.ndarray | None = None, *, origin: tuple[int, int] = (0, 0)) -> BlockGrid:
    """Detect the 8 x 8 block grid a JPEG encoder leaves, from steps between neighbouring pixels.

    The squared difference between horizontal (and vertical) neighbours is averaged per phase
    ``column % 8`` (``row % 8``) in image coordinates; a block grid makes one phase stand out.

    References
    ----------
    .. [1] Wang, Z., Bovik, A. C., Evans, B. L. (2000). Blind measurement of blocking artifacts
       in images. Proc. ICIP, vol. 3, 981-984. :doi:`10.1109/ICIP.2000.899622`
    """
    a = np.asarray(block, dtype=np.float32)
    ox, oy = origin
    dc = np.square(np.diff(a, axis=1))
    dr = np.square(np.diff(a, axis=0))
    if mask is not None:
        m = np.asarray(mask, dtype=bool)
        mc, mr = m[:, 1:] & m[:, :-1], m[1:] & m[:-1]
    else:
        mc = mr = None

    def profile(d, m, axis, start):
        # phase p holds the steps between position p-1 and p (image coordinates)
        sums, counts = np.zeros(8), np.zeros(8)
        line_sum = (d if m is None else d * m).sum(axis=1 - axis, dtype=np.float64)
        line_cnt = np.full(d.shape[axis], d.shape[1 - axis], float) if m is None else m.sum(axis=1 - axis)
        phase = (np.arange(d.shape[axis]) + start + 1) % 8
        np.add.at(sums, phase, line_sum)
        np.add.at(counts, phase, line_cnt)
        return sums / np.maximum(counts, 1.0)

    pc = profile(dc, mc, 1, ox)
    pr = profile(dr, mr, 0, oy)
    kc, kr = int(np.argmax(pc)), int(np.argmax(pr))
    base_c, base_r = float(np.median(np.delete(pc, kc))), float(np.median(np.delete(pr, kr)))
    base = base_c + base_r
    contrast = (pc[kc] + pr[kr]) / base if base > 0 else (math.inf if pc[kc] + pr[kr] > 0 else 1.0)
    step_c, step_r = max(pc[kc] - base_c, 0.0), max(pr[kr] - base_r, 0.0)
    return BlockGrid(
        contrast=float(contrast),
        phase_col=kc,
        phase_row=kr,
        step_variance=float((step_c + step_r) / 2.0),
        step_col=float(step_c),
        step_row=float(step_r),
    )
