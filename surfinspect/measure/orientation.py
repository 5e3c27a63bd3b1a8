"""The numeric core: derivatives, structure tensor, orientation histograms, cell maps.

Pure functions on arrays: no file I/O, no recipes, no printing.

Conventions
-----------
Arrays are indexed (row, column), rows growing downward. Every angle this
module returns is in the part frame's convention: degrees counter-clockwise
from +X with +Y pointing *up* on screen. The one conversion happens in
:func:`structure_tensor_sums` and :func:`_lay_angles` (``y_up = -row``).
Lay is the direction the brushing lines run: gradient orientation + 90°.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

__all__ = [
    "gaussian_derivative_kernels",
    "gradients",
    "structure_tensor_sums",
    "tensor_lay",
    "wrap_deviation",
    "axial_mean",
    "rayleigh_test",
    "noise_sigma",
    "noise_gradient_energy",
    "CellSums",
    "cell_sums",
    "hog_cell_histograms",
]

#: Rows per strip: a multiple of the cell size near this many rows is used.
STRIP_ROWS = 512


def gaussian_derivative_kernels(sigma: float = 1.0) -> tuple[np.ndarray, np.ndarray]:
    """Sampled Gaussian and first-derivative-of-Gaussian kernels for correlation.

    Parameters
    ----------
    sigma : float
        Scale in pixels. The kernels have radius ``ceil(4 * sigma)``.

    Returns
    -------
    smooth, deriv : (2r+1,) float32 ndarray
        ``smooth`` sums to 1; ``deriv`` is normalised so that correlating it
        with the ramp f(x) = x gives exactly 1, i.e. it measures d/dx with
        unit gain. Used with ``cv2.sepFilter2D`` (a correlation).

    Notes
    -----
    A sampled Gaussian derivative has no directional bias to speak of: on sine
    gratings its region-summed structure tensor is within 0.01° of the truth
    for periods of 4 px and more, where central differences err by up to 7°
    and Sobel by 3° (see tests/test_orientation.py).

    References
    ----------
    .. [1] Lindeberg, T. (1994). Scale-space theory: a basic tool for analysing
       structures at different scales. J. Applied Statistics 21(2), 224-270.
       :doi:`10.1080/757582976`
    """
    if not sigma > 0:
        raise ValueError(f"sigma must be > 0 (got {sigma})")
    radius = int(math.ceil(4.0 * sigma))
    x = np.arange(-radius, radius + 1, dtype=np.float64)
    g = np.exp(-0.5 * (x / sigma) ** 2)
    smooth = g / g.sum()
    deriv = x * g
    deriv /= np.sum(x * deriv)  # unit gain on a ramp (correlation: sum k(x) f(x))
    return smooth.astype(np.float32), deriv.astype(np.float32)


def gradients(image: np.ndarray, sigma: float = 1.0) -> tuple[np.ndarray, np.ndarray]:
    """Gaussian-derivative gradients along columns (x) and rows (y downward).

    Parameters
    ----------
    image : (M, N) ndarray
        Grey image; converted to float32.
    sigma : float
        Derivative scale in pixels.

    Returns
    -------
    grad_col, grad_row : (M, N) float32 ndarray
        d/dcolumn and d/drow, borders reflected (``BORDER_REFLECT_101``).
    """
    img = np.ascontiguousarray(image, dtype=np.float32)
    smooth, deriv = gaussian_derivative_kernels(sigma)
    gc = cv2.sepFilter2D(img, cv2.CV_32F, deriv, smooth, borderType=cv2.BORDER_REFLECT_101)
    gr = cv2.sepFilter2D(img, cv2.CV_32F, smooth, deriv, borderType=cv2.BORDER_REFLECT_101)
    return gc, gr


def structure_tensor_sums(
    grad_col: np.ndarray, grad_row: np.ndarray, mask: np.ndarray | None = None
) -> tuple[float, float, float]:
    """Structure tensor summed over the pixels of a region.

    Parameters
    ----------
    grad_col, grad_row : (M, N) ndarray
        Derivatives along columns and rows (rows downward), from any filter.
    mask : (M, N) bool or float ndarray, optional
        Pixel weights; the whole array when omitted.

    Returns
    -------
    jxx, jxy, jyy : float
        Components in the part frame (x right, y *up*): ``jxx = sum gx^2``,
        ``jyy = sum gy^2``, ``jxy = sum gx gy`` with ``gy = -grad_row``.

    References
    ----------
    .. [1] Bigun, J., Granlund, G. H. (1987). Optimal orientation detection of
       linear symmetry. Proc. 1st ICCV, 433-438.
    .. [2] Kass, M., Witkin, A. (1987). Analyzing oriented patterns. Computer
       Vision, Graphics, and Image Processing 37(3), 362-385.
       :doi:`10.1016/0734-189X(87)90043-0`
    """
    gx = np.asarray(grad_col, dtype=np.float64)
    gy = -np.asarray(grad_row, dtype=np.float64)
    w = np.ones_like(gx) if mask is None else np.asarray(mask, dtype=np.float64)
    return float(np.sum(w * gx * gx)), float(np.sum(w * gx * gy)), float(np.sum(w * gy * gy))


def tensor_lay(jxx, jxy, jyy):
    """Lay direction and coherence from summed structure tensor components.

    Parameters
    ----------
    jxx, jxy, jyy : float or ndarray
        Tensor components in the part frame (y up), as from
        :func:`structure_tensor_sums` or :class:`CellSums`.

    Returns
    -------
    lay_deg : float or ndarray
        ``0.5 * atan2(2 jxy, jxx - jyy) + 90`` in [0, 180): the dominant
        gradient orientation turned by 90° to the direction of the lines.
    coherence : float or ndarray
        ``(l1 - l2) / (l1 + l2)`` in [0, 1] from the tensor eigenvalues; 0 where
        the tensor is zero.
    """
    jxx = np.asarray(jxx, dtype=np.float64)
    jxy = np.asarray(jxy, dtype=np.float64)
    jyy = np.asarray(jyy, dtype=np.float64)
    grad_deg = 0.5 * np.degrees(np.arctan2(2.0 * jxy, jxx - jyy))
    lay = np.mod(grad_deg + 90.0, 180.0)
    trace = jxx + jyy
    diff = np.sqrt((jxx - jyy) ** 2 + 4.0 * jxy**2)
    with np.errstate(invalid="ignore", divide="ignore"):
        coh = np.where(trace > 0, diff / np.where(trace > 0, trace, 1.0), 0.0)
    if lay.ndim == 0:
        return float(lay), float(coh)
    return lay, coh


def wrap_deviation(measured_deg, expected_deg):
    """Axial deviation ``measured - expected`` wrapped to (-90, 90].

    Expected 179°, measured 0.6° gives +1.6° (the grain is turned 1.6°
    counter-clockwise), not -178.4°.
    """
    d = np.mod(np.asarray(measured_deg, dtype=np.float64) - expected_deg, 180.0)
    d = np.where(d > 90.0, d - 180.0, d)
    return float(d) if np.ndim(d) == 0 else d


def axial_mean(angles_deg, weights=None) -> tuple[float, float]:
    """Mean direction and mean resultant length of axial data (period 180°).

    Angles are doubled, averaged as unit vectors, and the mean direction
    halved back.

    Returns
    -------
    mean_deg : float in [0, 180)
    resultant_length : float in [0, 1]

    References
    ----------
    .. [1] Mardia, K. V., Jupp, P. E. (2000). Directional Statistics, Wiley,
       section 9.3.2 (axial data). :doi:`10.1002/9780470316979`
    """
    a = np.radians(2.0 * np.asarray(angles_deg, dtype=np.float64))
    w = np.ones_like(a) if weights is None else np.asarray(weights, dtype=np.float64)
    c, s = np.sum(w * np.cos(a)), np.sum(w * np.sin(a))
    total = np.sum(w)
    mean = np.mod(0.5 * np.degrees(np.arctan2(s, c)), 180.0)
    return float(mean), float(math.hypot(c, s) / total) if total > 0 else 0.0


@dataclass(frozen=True)
class RayleighTest:
    n: int
    mean_deg: float
    resultant_length: float
    statistic: float  # 2 n R^2, asymptotically chi-square with 2 degrees of freedom
    p_value: float


def rayleigh_test(angles_deg, *, axial: bool = False) -> RayleighTest:
    """Rayleigh test of uniformity for circular (or axial) directions.

    Parameters
    ----------
    angles_deg : (n,) array_like
        Directions in degrees.
    axial : bool
        Treat directions as axes (period 180°): angles are doubled first and
        the mean direction is halved back.

    Returns
    -------
    RayleighTest
        ``statistic = 2 n R^2`` and its p-value with the second-order
        correction ``exp(-Z) (1 + (2Z - Z^2)/(4n) - (24Z - 132Z^2 + 76Z^3 - 9Z^4)/(288 n^2))``,
        ``Z = n R^2``.

    References
    ----------
    .. [1] Mardia, K. V., Jupp, P. E. (2000). Directional Statistics, Wiley,
       section 6.3.1 (the Rayleigh test), eq. 6.3.6 for the p-value correction.
       :doi:`10.1002/9780470316979`
    """
    a = np.asarray(angles_deg, dtype=np.float64).ravel()
    n = a.size
    if n == 0:
        raise ValueError("rayleigh_test needs at least one direction (got none)")
    k = 2.0 if axial else 1.0
    t = np.radians(k * a)
    c, s = np.mean(np.cos(t)), np.mean(np.sin(t))
    r = math.hypot(c, s)
    mean = math.degrees(math.atan2(s, c)) % 360.0 / k
    z = n * r * r
    p = math.exp(-z) * (1 + (2 * z - z * z) / (4 * n) - (24 * z - 132 * z**2 + 76 * z**3 - 9 * z**4) / (288 * n * n))
    return RayleighTest(n=n, mean_deg=mean, resultant_length=r, statistic=2 * z, p_value=float(min(max(p, 0.0), 1.0)))


_IMMERKAER = np.array([[1, -2, 1], [-2, 4, -2], [1, -2, 1]], dtype=np.float32)


def noise_sigma(image: np.ndarray, mask: np.ndarray | None = None) -> float:
    """Fast estimate of the standard deviation of additive white noise.

    Parameters
    ----------
    image : (M, N) ndarray
    mask : (M, N) bool ndarray, optional
        Restrict the estimate to these pixels.

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
    img = np.asarray(image, dtype=np.float32)
    rows, cols = img.shape
    if rows < 3 or cols < 3:
        raise ValueError(f"noise_sigma needs an image of at least 3x3 (got {img.shape})")
    total, count = 0.0, 0
    for r0 in range(1, rows - 1, STRIP_ROWS):
        r1 = min(r0 + STRIP_ROWS, rows - 1)
        block = np.ascontiguousarray(img[r0 - 1 : r1 + 1])
        resp = np.abs(cv2.filter2D(block, cv2.CV_32F, _IMMERKAER)[1:-1, 1:-1])
        if mask is not None:
            m = np.asarray(mask[r0:r1, 1:-1], dtype=bool)
            total += float(resp[m].sum(dtype=np.float64))
            count += int(m.sum())
        else:
            total += float(resp.sum(dtype=np.float64))
            count += resp.size
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


@dataclass(frozen=True)
class CellSums:
    """Per-cell sums over a region's pixels on a grid of square cells.

    All arrays have shape ``(rows, cols)`` except ``hist`` (rows, cols, bins).
    Cell (i, j) covers image columns ``x0 + j*cell_px`` to ``x0 + (j+1)*cell_px``
    (clipped to the region's bounding box) and the rows likewise.

    Attributes
    ----------
    jxx, jxy, jyy : structure tensor sums (part frame, y up), float64
    area : number of region pixels in the cell (mask weight sum)
    hist : magnitude-weighted lay histogram, bins of ``180/bins`` degrees
        centred at ``(k + 0.5) * 180 / bins``, votes split linearly
    """

    origin_px: tuple[int, int]
    cell_px: int
    shape_px: tuple[int, int]  # (height, width) of the measured box
    jxx: np.ndarray
    jxy: np.ndarray
    jyy: np.ndarray
    area: np.ndarray
    hist: np.ndarray

    @property
    def bins(self) -> int:
        return self.hist.shape[-1]

    def bin_edges_deg(self) -> np.ndarray:
        return np.linspace(0.0, 180.0, self.bins + 1)

    def cell_boxes(self) -> np.ndarray:
        """(rows, cols, 4) array of ``x, y, w, h`` of each cell in image pixels."""
        rows, cols = self.area.shape
        x0, y0 = self.origin_px
        h, w = self.shape_px
        xs = np.minimum(np.arange(cols + 1) * self.cell_px, w)
        ys = np.minimum(np.arange(rows + 1) * self.cell_px, h)
        out = np.zeros((rows, cols, 4), dtype=np.int64)
        out[..., 0] = x0 + xs[None, :-1]
        out[..., 1] = y0 + ys[:-1, None]
        out[..., 2] = np.diff(xs)[None, :]
        out[..., 3] = np.diff(ys)[:, None]
        return out

    def cell_centres(self) -> np.ndarray:
        """(rows, cols, 2) array of cell centres ``x, y`` in image pixels."""
        b = self.cell_boxes().astype(np.float64)
        return np.stack([b[..., 0] + b[..., 2] / 2.0, b[..., 1] + b[..., 3] / 2.0], axis=-1)


def _lay_angles(gx: np.ndarray, gy_up: np.ndarray) -> np.ndarray:
    """Lay orientation in [0, 180) degrees per pixel from gradients (y up)."""
    grad = np.arctan2(gy_up, gx) * np.float32(180.0 / math.pi)
    lay = grad + np.float32(90.0)
    lay %= np.float32(180.0)
    return lay


def cell_sums(
    image: np.ndarray,
    mask: np.ndarray,
    bbox: tuple[int, int, int, int],
    *,
    cell_px: int = 32,
    sigma: float = 1.0,
    bins: int = 36,
    angle_offset_deg: float = 0.0,
    vote_step: int = 1,
    threads: int = 1,
) -> CellSums:
    """Structure tensor and orientation histogram summed per cell of a region.

    Steps, in strips of rows so that memory stays a few strip-sized buffers:

    1. Gaussian-derivative gradients of the strip (with a halo of image rows
       above and below, so strips join seamlessly).
    2. Products ``gx^2, gx gy, gy^2`` weighted by the region mask, summed per
       cell (block sums of a zero-padded strip).
    3. The lay angle of every pixel votes its gradient magnitude into the two
       nearest histogram bins of its cell, split linearly.

    Parameters
    ----------
    image : (M, N) float32 ndarray
        The whole image (the halo comes from it).
    mask : (h, w) bool ndarray
        Region pixels inside ``bbox``.
    bbox : (x, y, w, h)
        The region's bounding box in image pixels; cells are aligned to its
        top-left corner.
    cell_px : int
        Cell side in pixels.
    sigma : float
        Derivative scale in pixels.
    bins : int
        Histogram bins over [0, 180).
    angle_offset_deg : float
        Subtracted from every lay angle before binning, so that histograms
        are in a rotated part frame. The tensor sums stay in image axes (rotate
        the resulting angle instead).
    vote_step : int
        Histogram votes come from every ``vote_step``-th pixel along rows and
        columns (1: every pixel). The tensor sums always use every pixel.
        Gradients at ``sigma`` >= 1 px vary smoothly over neighbouring pixels,
        so a step of 2 keeps the histogram's shape (tests/test_orientation.py
        measures the difference) at a quarter of the vote counting, which
        dominates the run time.
    threads : int
        Strips processed at once (OpenCV and NumPy release the GIL).

    Returns
    -------
    CellSums

    References
    ----------
    .. [1] Dalal, N., Triggs, B. (2005). Histograms of oriented gradients for
       human detection. Proc. CVPR, 886-893. :doi:`10.1109/CVPR.2005.177`
    """
    x0, y0, w, h = (int(v) for v in bbox)
    rows_img, cols_img = image.shape
    if mask.shape != (h, w):
        raise ValueError(f"mask shape {mask.shape} does not match bbox size {(h, w)}")
    if x0 < 0 or y0 < 0 or x0 + w > cols_img or y0 + h > rows_img:
        raise ValueError(f"bbox {bbox} lies outside the image of {cols_img}x{rows_img}")
    n_rows = -(-h // cell_px)
    n_cols = -(-w // cell_px)
    full_mask = bool(mask.all())
    smooth, deriv = gaussian_derivative_kernels(sigma)
    halo = len(smooth) // 2
    strip_cells = max(1, STRIP_ROWS // cell_px)
    cx0, cx1 = max(0, x0 - halo), min(cols_img, x0 + w + halo)
    w_pad = n_cols * cell_px
    offset = float(angle_offset_deg) % 180.0
    stride = 4 * bins + 2  # vote slots per cell, see below
    col_cell = np.arange(w_pad, dtype=np.intp) // cell_px

    def strip(cell_row0: int):
        r0 = cell_row0 * cell_px  # strip rows relative to bbox
        r1 = min(h, r0 + strip_cells * cell_px)
        n_strip_cells = -(-(r1 - r0) // cell_px)
        h_pad = n_strip_cells * cell_px
        ry0, ry1 = max(0, y0 + r0 - halo), min(rows_img, y0 + r1 + halo)
        block = np.ascontiguousarray(image[ry0:ry1, cx0:cx1], dtype=np.float32)
        top, left = y0 + r0 - ry0, x0 - cx0
        # gradients into zero-padded buffers whose size is a whole number of cells
        gx = np.zeros((h_pad, w_pad), np.float32)
        gy = np.zeros((h_pad, w_pad), np.float32)
        gx[: r1 - r0, :w] = cv2.sepFilter2D(block, cv2.CV_32F, deriv, smooth, borderType=cv2.BORDER_REFLECT_101)[
            top : top + (r1 - r0), left : left + w
        ]
        gy[: r1 - r0, :w] = cv2.sepFilter2D(block, cv2.CV_32F, smooth, deriv, borderType=cv2.BORDER_REFLECT_101)[
            top : top + (r1 - r0), left : left + w
        ]
        del block
        np.negative(gy, out=gy)  # rows grow downward; the part frame's y grows upward
        if full_mask:
            valid = np.zeros((h_pad, w_pad), np.float32)
            valid[: r1 - r0, :w] = 1.0
            area = _block_sum(valid, cell_px)
            del valid
        else:
            m = np.zeros((h_pad, w_pad), np.float32)
            m[: r1 - r0, :w] = mask[r0:r1]
            gx *= m  # masked gradients: products and magnitudes vanish outside the region
            gy *= m
            area = _block_sum(m, cell_px)
            del m
        sums = (
            _block_sum(gx * gx, cell_px),
            _block_sum(gx * gy, cell_px),
            _block_sum(gy * gy, cell_px),
            area,
        )
        if vote_step > 1:
            gx = np.ascontiguousarray(gx[::vote_step, ::vote_step])
            gy = np.ascontiguousarray(gy[::vote_step, ::vote_step])
        magnitude = cv2.magnitude(gx, gy)
        angle = cv2.phase(gx, gy, angleInDegrees=True)  # gradient direction in [0, 360), error ~0.01 deg
        del gx, gy
        # lay = gradient + 90 - offset (mod 180). Rather than a costly per-pixel modulo, bin the
        # unreduced angle: position t = (angle + 90 - offset) * bins / 180 + bins + 0.5 lies in
        # [0.5, 3.5 bins + 0.5) for an offset in [0, 180); k = floor(t) indexes `stride` slots per
        # cell, which are folded back modulo `bins` on the small histogram afterwards.
        angle += np.float32(90.0 - offset)
        angle *= np.float32(bins / 180.0)
        angle += np.float32(bins + 0.5)
        upper = angle.astype(np.intp)  # floor, the values are positive
        angle -= upper  # share of the vote that goes to the upper bin
        upper += (np.arange(0, h_pad, vote_step, dtype=np.intp) // cell_px * (n_cols * stride))[:, None]
        upper += (col_cell[::vote_step] * stride)[None, :]
        to_upper = magnitude * angle
        magnitude -= to_upper
        up = np.bincount(upper.ravel(), weights=to_upper.ravel(), minlength=n_strip_cells * n_cols * stride)
        lo = np.bincount(upper.ravel(), weights=magnitude.ravel(), minlength=n_strip_cells * n_cols * stride)
        return cell_row0, n_strip_cells, sums, _fold_votes(up, lo, bins, stride)

    jxx = np.zeros((n_rows, n_cols))
    jxy = np.zeros((n_rows, n_cols))
    jyy = np.zeros((n_rows, n_cols))
    area = np.zeros((n_rows, n_cols))
    hist = np.zeros((n_rows, n_cols, bins))
    from concurrent.futures import ThreadPoolExecutor

    # the vote counting (np.bincount) holds the GIL; the filters of the next strip run meanwhile
    with ThreadPoolExecutor(max_workers=max(1, threads)) as pool:
        for cell_row0, n_strip, sums, strip_hist in pool.map(strip, range(0, n_rows, strip_cells)):
            sl = slice(cell_row0, cell_row0 + n_strip)
            jxx[sl], jxy[sl], jyy[sl], area[sl] = sums
            hist[sl] = strip_hist.reshape(n_strip, n_cols, bins)
    return CellSums(
        origin_px=(x0, y0),
        cell_px=cell_px,
        shape_px=(h, w),
        jxx=jxx,
        jxy=jxy,
        jyy=jyy,
        area=area,
        hist=hist.reshape(n_rows, n_cols, bins),
    )


def _block_sum(a: np.ndarray, cell: int) -> np.ndarray:
    """Sums over non-overlapping ``cell`` x ``cell`` blocks of a padded array (float64 out)."""
    r, c = a.shape
    rows = a.reshape(r // cell, cell, c).sum(axis=1)  # contiguous rows first: the fast order
    return rows.reshape(r // cell, c // cell, cell).sum(axis=2).astype(np.float64)


def _fold_votes(upper: np.ndarray, lower: np.ndarray, bins: int, stride: int) -> np.ndarray:
    """Fold per-cell vote slots k (upper bin k, lower bin k - 1) into ``bins`` bins mod 180 deg."""
    up = upper.reshape(-1, stride)
    lo = lower.reshape(-1, stride)
    k = np.arange(stride)
    hist = np.zeros((up.shape[0], bins))
    for slots, shift in ((up, 0), (lo, -1)):
        np.add.at(hist.T, (k + shift) % bins, slots.T)
    return hist


def hog_cell_histograms(
    image: np.ndarray, orientations: int = 9, pixels_per_cell: tuple[int, int] = (8, 8)
) -> np.ndarray:
    """Per-cell gradient histograms computed exactly as scikit-image's ``hog``.

    A compatibility function, so that the histogram idea is tested against a
    reference library: central differences (no division by 2, zero at the
    border), gradient orientation ``atan2(g_row, g_col) % 180`` (rows down,
    so clockwise on screen), hard bins ``[k*180/n, (k+1)*180/n)``, magnitude
    summed per cell and divided by the cell area. Unlike :func:`cell_sums`
    this measures *gradient* orientation in image axes, as ``hog`` does.

    Parameters
    ----------
    image : (M, N) ndarray
    orientations : int
    pixels_per_cell : (int, int)
        Cell size (rows, columns).

    Returns
    -------
    hist : (M // rows, N // columns, orientations) float64 ndarray
    """
    img = np.asarray(image)
    img = img.astype(np.float32 if img.dtype in (np.float32, np.uint8, np.uint16) else np.float64, copy=False)
    g_row = np.zeros_like(img)
    g_col = np.zeros_like(img)
    g_row[1:-1, :] = img[2:, :] - img[:-2, :]
    g_col[:, 1:-1] = img[:, 2:] - img[:, :-2]
    g_row = g_row.astype(np.float64)
    g_col = g_col.astype(np.float64)
    magnitude = np.hypot(g_col, g_row)
    orientation = np.rad2deg(np.arctan2(g_row, g_col)) % 180
    c_row, c_col = pixels_per_cell
    n_r, n_c = img.shape[0] // c_row, img.shape[1] // c_col
    width = 180.0 / orientations
    # a value of exactly 180 (from rounding in %) falls in no bin, as in the reference
    bin_index = np.floor(orientation / width).astype(np.int64)
    valid = bin_index < orientations
    mag = magnitude[: n_r * c_row, : n_c * c_col]
    idx = bin_index[: n_r * c_row, : n_c * c_col]
    ok = valid[: n_r * c_row, : n_c * c_col]
    cell_r = np.arange(n_r * c_row) // c_row
    cell_c = np.arange(n_c * c_col) // c_col
    cell = cell_r[:, None] * n_c + cell_c[None, :]
    flat = (cell * orientations + np.where(ok, idx, 0))[ok]
    hist = np.bincount(flat, weights=mag[ok], minlength=n_r * n_c * orientations)
    return hist.reshape(n_r, n_c, orientations) / (c_row * c_col)
