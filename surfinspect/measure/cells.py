"""Per-cell sums of a region: structure tensor, area and orientation histograms, in strips."""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

from .conditions import SATURATION_CODE_MARGIN, grown_by
from .derivatives import gaussian_derivative_kernels

__all__ = ["STRIP_ROWS", "SLIVER_SHARE", "CellSums", "cell_sums", "merge_edge_slivers", "merge_outline_slivers"]

#: Rows per strip: a multiple of the cell size near this many rows is used. Small enough that a
#: strip's arrays stay in a core's cache (on 12 MP, 128 rows took half the time of 512).
STRIP_ROWS = 128


@dataclass(frozen=True)
class CellSums:
    """Per-cell sums over a region's pixels on a grid of square cells.

    All arrays have shape ``(rows, cols)`` except ``hist`` (rows, cols, bins).
    Cell (i, j) covers image columns ``x0 + j*cell_px`` to ``x0 + (j+1)*cell_px``
    (clipped to the region's bounding box) and the rows likewise.

    Attributes
    ----------
    jxx, jxy, jyy : structure tensor sums (part frame, y up), float64
    area : number of measured pixels in the cell (region pixels that are neither masked nor
        within a kernel radius of the image border)
    region_area : number of region pixels in the cell, measured or not
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
    region_area: np.ndarray | None = None  # region pixels per cell, measured or not (None: same as area)
    #: where a sliver's pixels went (:func:`merge_outline_slivers`): the flat index of the cell now
    #: holding them, -1 for a cell that holds its own; None when nothing was merged
    merged_into: np.ndarray | None = None
    #: region pixels left out as clipped (``saturation_level``): at or above the level, or within a
    #: kernel radius of such a pixel
    clipped_px: int = 0

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
        xs[-1], ys[-1] = w, h  # the last cell reaches the box's edge (it may hold a merged sliver)
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
    keep: np.ndarray | None = None,
    background_sigma: float = 0.0,
    interior_only: bool = True,
    saturation_level: float | None = None,
) -> CellSums:
    """Structure tensor and orientation histogram summed per cell of a region.

    Steps, in strips of rows so that memory stays a few strip-sized buffers:

    1. Gaussian-derivative gradients of the strip (with a halo of image rows
       above and below, so strips join seamlessly), after subtracting the
       smooth illumination background when ``background_sigma`` > 0. With a
       ``saturation_level``, the strip's clipped pixels, grown by the kernel's
       radius (:func:`.conditions.saturated_pixels`), are left out here.
    2. Products ``gx^2, gx gy, gy^2`` weighted by the measured pixels (region
       mask, ``keep``, and the image interior), summed per cell (rows of a cell
       first, by ``einsum``, then the columns; no product is stored).
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
        so a step of 2 keeps the histogram's shape (tests/measure/test_orientation.py
        measures the difference) at a quarter of the vote counting, which
        dominates the run time.
    threads : int
        Strips processed at once (OpenCV and NumPy release the GIL).
    keep : (h, w) bool ndarray, optional
        Region pixels that may be measured (False: masked, e.g. saturated).
    background_sigma : float
        Scale (px) of the illumination background removed before the
        derivatives (:func:`.conditions.illumination_background`); 0 keeps the image as it is.
    interior_only : bool
        Measure only pixels whose derivative kernel lies wholly inside the
        image, so that no mirrored pixel beyond the border enters a sum.
    saturation_level : float, optional
        Leave out pixels at or above this level (clipped highlights) and those within a kernel
        radius of one, as ``keep = ~saturated_pixels(...)`` of the box grown by that radius
        would, found strip by strip (the strip is in cache then, and few clipped pixels cost a
        few index writes, not a mask multiplied over the image). ``CellSums.clipped_px``
        counts the region pixels so left out.

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
    n_rows, n_cols = -(-h // cell_px), -(-w // cell_px)
    full = np.count_nonzero(mask) == mask.size
    strips = _Strips(image, mask, keep, (x0, y0, w, h), cell_px, sigma, interior_only, background_sigma, full)
    strips.votes = _Votes(bins, float(angle_offset_deg) % 180.0, vote_step, cell_px, n_cols, w)
    if saturation_level is not None:
        strips.clip_threshold = np.float32(min(saturation_level, 1.0) - SATURATION_CODE_MARGIN)
    jxx, jxy, jyy, area = (np.zeros((n_rows, n_cols)) for _ in range(4))
    hist = np.zeros((n_rows, n_cols, bins))
    clipped_px = 0
    from concurrent.futures import ThreadPoolExecutor

    # the vote counting (np.bincount) holds the GIL; the filters of the next strip run meanwhile
    with ThreadPoolExecutor(max_workers=max(1, threads)) as pool:
        for cell_row0, n_strip, sums, strip_hist, n_clipped in pool.map(strips, range(0, n_rows, strips.strip_cells)):
            sl = slice(cell_row0, cell_row0 + n_strip)
            jxx[sl], jxy[sl], jyy[sl], area[sl] = sums
            hist[sl] = strip_hist.reshape(n_strip, n_cols, bins)
            clipped_px += n_clipped
    if full:  # whole cells, clipped at the box's edge
        region_area = np.outer(_span_counts(0, h, cell_px, n_rows), _span_counts(0, w, cell_px, n_cols))
    else:
        region_area = _block_sum(mask.view(np.uint8), cell_px, n_cols, dtype=np.int32)
    return CellSums(
        origin_px=(x0, y0),
        cell_px=cell_px,
        shape_px=(h, w),
        jxx=jxx,
        jxy=jxy,
        jyy=jyy,
        area=area,
        hist=hist,
        region_area=region_area,
        clipped_px=clipped_px,
    )


class _Strips:
    """One strip of cell rows at a time: gradients, masked products, block sums and votes."""

    def __init__(
        self,
        image,
        mask,
        keep,
        box,
        cell_px: int,
        sigma: float,
        interior_only: bool,
        background_sigma: float,
        full: bool,
    ):
        x0, y0, w, h = box
        rows_img, cols_img = image.shape
        self.image, self.box, self.cell_px, self.mask = image, box, cell_px, mask
        self.smooth, self.deriv = gaussian_derivative_kernels(sigma)
        self.halo = halo = len(self.smooth) // 2
        self.weights, self.inner = _measured_pixels(mask, keep, box, image.shape, halo if interior_only else 0, full)
        self.strip_cells = max(1, STRIP_ROWS // cell_px)
        self.cx0, self.cx1 = max(0, x0 - halo), min(cols_img, x0 + w + halo)
        self.n_cols = -(-w // cell_px)
        # measured pixels per cell column of a full box (the interior's columns)
        self.col_counts = _span_counts(self.inner[2], self.inner[3], cell_px, self.n_cols)
        self.background = None
        self.votes: _Votes | None = None
        self.clip_threshold: np.float32 | None = None
        self.full = full
        if background_sigma > 0:
            from .conditions import illumination_background

            by0, by1 = max(0, y0 - halo), min(rows_img, y0 + h + halo)
            self.background = illumination_background(
                image[by0:by1, self.cx0 : self.cx1], background_sigma, origin=(self.cx0, by0)
            )

    def gradients(self, r0: int, r1: int):
        """gx, gy (y up) of box rows r0:r1 and the box's columns (views of the filters' outputs),
        and the clipped pixels of those rows grown by the kernel's radius (None: none)."""
        x0, y0, w, _ = self.box
        ry0, ry1 = max(0, y0 + r0 - self.halo), min(self.image.shape[0], y0 + r1 + self.halo)
        view = self.image[ry0:ry1, self.cx0 : self.cx1]
        if self.background is None:
            block = view if view.dtype == np.float32 else view.astype(np.float32)
        else:  # a new array: a full-width view is the caller's image, and neighbouring strips share rows
            block = self.background.sample(ry0, ry1, self.cx0, self.cx1)
            np.subtract(view, block, out=block, dtype=np.float32)
        top, left = y0 + r0 - ry0, x0 - self.cx0
        inner = (slice(top, top + (r1 - r0)), slice(left, left + w))
        border = cv2.BORDER_REFLECT_101
        gx = cv2.sepFilter2D(block, cv2.CV_32F, self.deriv, self.smooth, borderType=border)[inner]
        gy = cv2.sepFilter2D(block, cv2.CV_32F, self.smooth, self.deriv, borderType=border)[inner]
        np.negative(gy, out=gy)  # rows grow downward; the part frame's y grows upward
        return gx, gy, self._clipped(view, inner)

    def _clipped(self, view: np.ndarray, inner) -> np.ndarray | None:
        """Clipped pixels of the strip's ``inner`` part, grown by the halo (bool), or None.

        What :func:`.conditions.saturated_pixels` gives (a test holds them equal), with the steps
        it would repeat here left out. The view holds every pixel within the halo of the inner part
        (or the image ends there), so growing its clipped pixels is growing those of the whole box.
        """
        if self.clip_threshold is None or view.size == 0 or cv2.minMaxLoc(view)[1] < self.clip_threshold:
            return None
        return grown_by(view >= self.clip_threshold, self.halo)[inner]

    def __call__(self, cell_row0: int):
        cell_px, h = self.cell_px, self.box[3]
        r0 = cell_row0 * cell_px  # strip rows relative to the box
        r1 = min(h, r0 + self.strip_cells * cell_px)
        n_strip_cells = -(-(r1 - r0) // cell_px)
        gx, gy, clipped = self.gradients(r0, r1)
        n_clipped, weights, sparse = 0, None, None
        if self.weights is not None:
            weights = self.weights[r0:r1]
        if clipped is not None:
            n_clipped = int(np.count_nonzero(clipped if self.full else clipped & self.mask[r0:r1]))
            if weights is None and 16 * n_clipped < clipped.size:
                points = cv2.findNonZero(clipped.view(np.uint8)).reshape(-1, 2)  # (x, y); far faster than np.nonzero
                sparse = points[:, 1], points[:, 0]  # a few index writes where the clipped pixels are
            else:
                weights = ~clipped if weights is None else weights & ~clipped
        # rows and columns of this strip whose kernel lies inside the image (box coordinates - r0)
        in_r0, in_r1, in_c0, in_c1 = self.inner
        a0, a1 = max(0, in_r0 - r0), max(0, min(r1, in_r1) - r0)
        if weights is None:  # every pixel of the strip measured: only the border band (if any) is left out, by slicing
            for g in (gx, gy):
                g[:a0] = 0.0
                g[a1:] = 0.0
                g[:, :in_c0] = 0.0
                g[:, in_c1:] = 0.0
            area = np.outer(_span_counts(a0, a1, cell_px, n_strip_cells), self.col_counts)
            if sparse is not None:
                ys, xs = sparse
                inside = (ys >= a0) & (ys < a1) & (xs >= in_c0) & (xs < in_c1)
                ys, xs = ys[inside], xs[inside]
                gx[ys, xs] = 0.0  # exact zeros, as the mask's multiplication gives
                gy[ys, xs] = 0.0
                cells = (ys // cell_px) * self.n_cols + xs // cell_px
                area -= np.bincount(cells, minlength=area.size).reshape(area.shape)
        else:
            m = np.zeros(gx.shape, np.float32)
            m[a0:a1, in_c0:in_c1] = weights[a0:a1, in_c0:in_c1]
            gx *= m  # masked gradients: products and magnitudes vanish outside the measured pixels
            gy *= m
            area = _block_sum(m, cell_px, self.n_cols)
            del m
        n = self.n_cols
        sums = tuple(_block_sum(p, cell_px, n, times=q) for p, q in ((gx, gx), (gx, gy), (gy, gy))) + (area,)
        return cell_row0, n_strip_cells, sums, self.votes.count(gx, gy, n_strip_cells), n_clipped


def merge_edge_slivers(sums: CellSums) -> CellSums:
    """Merge a last row or column of cells narrower than half a cell into its neighbour.

    Cells are aligned to the region box's top-left corner, so its right and bottom edges may
    leave a strip too narrow for a local lay of its own; merged, every pixel of the region belongs
    to a cell that is checked (the merged cell is up to 1.5 cells long).
    """
    h, w = sums.shape_px
    arrays = {k: getattr(sums, k) for k in ("jxx", "jxy", "jyy", "area", "hist", "region_area")}
    for axis, extent in ((0, h), (1, w)):
        n = arrays["area"].shape[axis]
        if n < 2 or extent - (n - 1) * sums.cell_px >= sums.cell_px / 2:
            continue
        for k, a in arrays.items():
            if a is None:
                continue
            a = np.moveaxis(a, axis, 0)
            merged = a[:-1].copy()
            merged[-1] += a[-1]
            arrays[k] = np.moveaxis(merged, 0, axis)
    return CellSums(
        origin_px=sums.origin_px, cell_px=sums.cell_px, shape_px=sums.shape_px, clipped_px=sums.clipped_px, **arrays
    )


#: A cell holding fewer region pixels than this share of a full cell is merged into a neighbour.
SLIVER_SHARE = 0.5

_SIDES = ((-1, 0), (1, 0), (0, -1), (0, 1))
_CORNERS = ((-1, -1), (-1, 1), (1, -1), (1, 1))


def merge_outline_slivers(sums: CellSums) -> CellSums:
    """Merge every cell holding less than half a cell of region pixels into a neighbouring cell.

    A circle, an annulus, a polygon or a turned rectangle cuts the square grid at its outline and
    leaves slivers too small for a local lay of their own. Smallest first, each sliver goes to the
    neighbour sharing a side with it that holds the most region pixels (a corner neighbour when no
    side neighbour holds any), sums and histogram included; a sliver that received others passes
    them on. So every region pixel belongs to a checked cell of at least half a cell (but in a
    region smaller than that altogether). ``merged_into`` records where each sliver went; the
    sliver itself is left empty.
    """
    if sums.region_area is None:
        return sums
    arrays = {k: getattr(sums, k).copy() for k in ("jxx", "jxy", "jyy", "area", "hist", "region_area")}
    pixels = arrays["region_area"]
    rows, cols = pixels.shape
    half = SLIVER_SHARE * sums.cell_px**2
    flat = {k: a.reshape(rows * cols, -1) for k, a in arrays.items()}
    held = pixels.ravel()  # a view: follows the merges
    parent = np.full(rows * cols, -1, dtype=np.intp)
    for i in sorted(np.flatnonzero((pixels > 0) & (pixels < half)), key=lambda k: (held[k], k)):
        if not 0 < held[i] < half:  # grew by merges meanwhile
            continue
        r, c = divmod(int(i), cols)
        best = -1
        for sides in (_SIDES, _CORNERS):
            for dr, dc in sides:
                if 0 <= r + dr < rows and 0 <= c + dc < cols:
                    j = (r + dr) * cols + c + dc
                    if held[j] > 0 and (best < 0 or held[j] > held[best]):
                        best = j
            if best >= 0:
                break
        if best < 0:
            continue
        for a in flat.values():
            a[best] += a[i]
            a[i] = 0
        parent[i] = best
    if not (parent >= 0).any():
        return sums
    merged_into = parent.copy()
    for i in np.flatnonzero(parent >= 0):  # follow each chain to the cell that holds the pixels now
        j = parent[i]
        while parent[j] >= 0:
            j = parent[j]
        merged_into[i] = j
    return CellSums(
        origin_px=sums.origin_px,
        cell_px=sums.cell_px,
        shape_px=sums.shape_px,
        merged_into=merged_into.reshape(rows, cols),
        clipped_px=sums.clipped_px,
        **arrays,
    )


def _measured_pixels(mask, keep, bbox, image_shape, border: int, full: bool):
    """Measured pixels of the box: (None or a bool array of region pixels not masked, interior rectangle).

    The rectangle ``(r0, r1, c0, c1)`` (box coordinates) holds the pixels whose kernel lies inside
    the image; the array is None when every pixel of the box belongs to the region (``full``) and
    none is masked.
    """
    x0, y0, w, h = bbox
    rows_img, cols_img = image_shape
    inner = (
        max(0, border - y0),
        min(h, rows_img - border - y0),
        max(0, border - x0),
        min(w, cols_img - border - x0),
    )
    if keep is None or np.count_nonzero(keep) == keep.size:
        return (None if full else mask), inner
    return (keep if full else mask & keep), inner


def _span_counts(lo: int, hi: int, cell: int, n_cells: int) -> np.ndarray:
    """How many of the positions ``lo <= i < hi`` fall in each cell ``[k cell, (k + 1) cell)`` (float64)."""
    edges = np.arange(n_cells + 1) * cell
    return np.clip(np.minimum(hi, edges[1:]) - np.maximum(lo, edges[:-1]), 0, None).astype(np.float64)


class _Votes:
    """Magnitude-weighted lay votes of a strip, split linearly between the two nearest bins of a cell."""

    def __init__(self, bins: int, offset: float, step: int, cell_px: int, n_cols: int, width: int):
        self.bins, self.offset, self.step, self.cell_px, self.n_cols = bins, offset, step, cell_px, n_cols
        self.stride = 4 * bins + 2  # vote slots per cell, see count()
        self.col_slot = (np.arange(width, dtype=np.intp) // cell_px * self.stride)[::step]
        self._first_slots: dict[int, np.ndarray] = {}

    def _slots(self, rows: int) -> np.ndarray:
        """(rows, columns) index of each voting pixel's cell's first slot; the same for every full strip."""
        out = self._first_slots.get(rows)
        if out is None:
            row_slot = (
                np.arange(0, self.step * rows, self.step, dtype=np.intp) // self.cell_px * (self.n_cols * self.stride)
            )
            out = self._first_slots[rows] = row_slot[:, None] + self.col_slot[None, :]
        return out

    def count(self, gx: np.ndarray, gy: np.ndarray, n_strip_cells: int) -> np.ndarray:
        """Histograms of the strip's cells, (cells, bins)."""
        bins, stride, step = self.bins, self.stride, self.step
        gx = np.ascontiguousarray(gx[::step, ::step])
        gy = np.ascontiguousarray(gy[::step, ::step])
        # not cv2.magnitude: its vector and scalar paths round the last bit apart, so the votes would
        # depend on where the allocator put the strip (tests/measure/test_cells.py finds that out)
        magnitude = np.square(gx)
        magnitude += np.square(gy)
        np.sqrt(magnitude, out=magnitude)
        angle = cv2.phase(gx, gy, angleInDegrees=True)  # gradient direction in [0, 360), error ~0.01 deg
        # lay = gradient + 90 - offset (mod 180). Rather than a costly per-pixel modulo, bin the
        # unreduced angle: position t = (angle + 90 - offset) * bins / 180 + bins + 0.5 lies in
        # [0.5, 3.5 bins + 0.5) for an offset in [0, 180); k = floor(t) indexes `stride` slots per
        # cell, which are folded back modulo `bins` on the small histogram afterwards.
        angle += np.float32(90.0 - self.offset)
        angle *= np.float32(bins / 180.0)
        angle += np.float32(bins + 0.5)
        whole = np.floor(angle)
        upper = whole.astype(np.intp)
        angle -= whole  # share of the vote that goes to the upper bin (exact: t < 256 in float32)
        upper += self._slots(gx.shape[0])
        to_upper = magnitude * angle
        magnitude -= to_upper
        size = n_strip_cells * self.n_cols * stride
        up = np.bincount(upper.ravel(), weights=to_upper.ravel(), minlength=size)
        lo = np.bincount(upper.ravel(), weights=magnitude.ravel(), minlength=size)
        return _fold_votes(up, lo, bins, stride)


def _block_sum(a: np.ndarray, cell: int, n_cols: int, dtype=np.float32, times: np.ndarray | None = None) -> np.ndarray:
    """Sums over ``cell`` x ``cell`` blocks of ``a`` (or of ``a * times``), any strides; float64 out.

    The last row and column of blocks are clipped at the array's edge. Rows are summed first
    (contiguous rows: the fast order; a product is summed without storing it, by ``einsum``), then
    the row sums, zero-padded to ``n_cols`` whole blocks, along the columns.
    """
    r, w = a.shape
    n_r, whole = r // cell, (r // cell) * cell
    rows = np.zeros((-(-r // cell), n_cols * cell), dtype)
    if times is None:
        if n_r:
            rows[:n_r, :w] = a[:whole].reshape(n_r, cell, w).sum(axis=1, dtype=dtype)
        if whole < r:
            rows[n_r, :w] = a[whole:].sum(axis=0, dtype=dtype)
    else:
        if n_r:
            rows[:n_r, :w] = np.einsum(
                "ijk,ijk->ik", a[:whole].reshape(n_r, cell, w), times[:whole].reshape(n_r, cell, w)
            )
        if whole < r:
            rows[n_r, :w] = np.einsum("jk,jk->k", a[whole:], times[whole:])
    return rows.reshape(rows.shape[0], n_cols, cell).sum(axis=2, dtype=dtype).astype(np.float64)


def _fold_votes(upper: np.ndarray, lower: np.ndarray, bins: int, stride: int) -> np.ndarray:
    """Fold per-cell vote slots k (upper bin k, lower bin k - 1) into ``bins`` bins mod 180 deg.

    Whole turns of ``bins`` slots are added in order: every bin adds its upper slots, then its
    lower ones, by increasing k.
    """
    up = upper.reshape(-1, stride)
    lo = lower.reshape(-1, stride)
    hist = up[:, :bins].copy()
    for k in range(bins, stride, bins):  # upper slot k goes to bin k mod bins
        n = min(bins, stride - k)
        hist[:, :n] += up[:, k : k + n]
    hist[:, bins - 1] += lo[:, 0]  # lower slot k goes to bin (k - 1) mod bins
    for k in range(1, stride, bins):
        n = min(bins, stride - k)
        hist[:, :n] += lo[:, k : k + n]
    return hist
