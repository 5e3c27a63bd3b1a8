"""The part frame: the part's own edges found in the image.

A panel on a station fixture lies a few degrees skewed, and the drawing gives
the lay relative to the part's edge, not to the camera. This module finds the
part on a contrasting background, fits its outline as a rectangle with
sub-pixel straight edges and returns the part frame as a :class:`PartFrame`.
It is a pure numeric module: arrays in, a frozen dataclass out, no file I/O.

Frame convention (the datum ``part-edge``)
-------------------------------------------
* **+X** runs along the part's longer side (or, with
  ``x_axis="horizontal-side"``, along the side nearest to the image rows).
* **Origin** is the corner that is top-left once the part is viewed with +X
  pointing to the right and the skew removed.
* **Positions** (region placement) are ``(x, y)`` in pixels from the origin:
  ``x`` along +X, ``y`` measured *downward* from the top edge, across the
  part. A point inside the part therefore has ``0 <= x <= length`` and
  ``0 <= y <= width``, exactly as a drawing dimensioned from its top-left
  corner reads, and exactly as region pixels from the image's top-left
  corner read for the datum ``image`` (which is this frame with no skew).
* **Angles** (lay, deviation) keep the project's fixed convention:
  counter-clockwise from +X with +Y pointing *up* as seen on screen. A lay
  measured in the image converts with ``lay_part = lay_image - rotation_deg``
  (mod 180), see :meth:`PartFrame.angle_to_part_deg`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import cv2
import numpy as np

from surfinspect.errors import InputError

__all__ = ["DatumError", "FitQuality", "PartFrame", "find_part_frame"]

XAxisChoice = Literal["longer-side", "horizontal-side"]

# Otsu's separability eta = between-class / total variance. A single Gaussian
# population split at its mean gives 2/pi = 0.64 and a uniform one 0.75, so a
# value below 0.8 means the grey levels are not two populations.
_MIN_SEPARABILITY = 0.8
# The part must cover at least this share of the image to count as found.
_MIN_AREA_SHARE = 0.01
# Share of each side left out at either end, so rounded or chipped corners
# and the other side's edge do not enter the line fit.
_END_TRIM = 0.12
# Pre-smoothing of the grey image before thresholding and edge location, px.
_SMOOTH_SIGMA = 1.0
# The part is first found on a copy reduced to at most this many pixels a
# side, so that a large image is not copied at full size; the edges are then
# located on the full image.
_MASK_MAX_SIDE_PX = 1600
# Half-width of the edge search on either side of the guide line, per pass, px;
# the first pass widens with the reduction factor of the mask.
_SEARCH_HALF_WIDTHS_PX = (6, 6, 3)
# Robust rejection of edge points: a point further than this many robust
# standard deviations (1.4826 MAD) from the line is an outlier, but never
# closer than the floor (clean synthetic edges have a tiny MAD).
_OUTLIER_SIGMAS = 3.5
_OUTLIER_FLOOR_PX = 0.15
# Floor of the per-side edge point variance when weighting the sides, px^2.
_MIN_EDGE_VARIANCE_PX2 = 0.02**2


class DatumError(InputError):
    """The part frame cannot be found in the image; the message says why in words."""


@dataclass(frozen=True)
class FitQuality:
    """How well the part's outline fits a rectangle.

    Attributes
    ----------
    edge_rms_px : float
        Root-mean-square distance, in pixels, of the sub-pixel edge points
        (outliers excluded) to their fitted straight lines, over all four sides.
    filled_share : float
        Area of the found part region divided by the area of the fitted
        rectangle (1.0 for a clean rectangle; a disc gives about 0.79).
    corner_error_deg : float
        Largest departure of the four corner angles of the fitted
        quadrilateral from 90 degrees.
    outlier_share : float
        Share of the sampled edge points left out of the line fits.
    edge_points : int
        Number of edge points used in the four line fits.
    """

    edge_rms_px: float
    filled_share: float
    corner_error_deg: float
    outlier_share: float
    edge_points: int


@dataclass(frozen=True)
class PartFrame:
    """The part frame in image pixels.

    See the module docstring for the convention. Image pixel coordinates are
    ``(column, row)`` with pixel centres at integers, rows growing downward.

    Attributes
    ----------
    rotation_deg : float
        Angle of the part's +X axis against the image's +X axis,
        counter-clockwise positive as seen on screen. Equal to ``skew_deg``
        when +X runs along the near-horizontal side; ``skew_deg + 90`` when
        +X runs along a near-vertical longer side (a portrait part).
    skew_deg : float
        The fixture skew: the rotation in ``[-45, 45)`` that squares the part's
        sides with the image axes, counter-clockwise positive.
    origin_px : tuple of float
        The frame origin ``(x, y)`` in image pixels.
    size_px : tuple of float
        The part's length along +X and its width along Y, in pixels.
    fit_quality : FitQuality or None
        How well the outline fits a rectangle; None for a frame not fitted
        from an image (for example the image axes themselves).
    """

    rotation_deg: float
    skew_deg: float
    origin_px: tuple[float, float]
    size_px: tuple[float, float]
    fit_quality: FitQuality | None = None

    def _axes(self) -> np.ndarray:
        """Rows: unit vectors of +X and of y-downward, in image ``(col, row)``."""
        theta = np.deg2rad(self.rotation_deg)
        cos, sin = np.cos(theta), np.sin(theta)
        # +Y up on screen means an angle turns toward decreasing rows.
        return np.array([[cos, -sin], [sin, cos]])

    def part_to_image(self, xy) -> np.ndarray:
        """Map part-frame positions to image pixels.

        Parameters
        ----------
        xy : (K, 2) or (2,) array_like
            Positions ``(x, y)`` in the part frame, pixels, ``y`` downward from
            the top edge.

        Returns
        -------
        (K, 2) or (2,) ndarray of float64
            Image pixel coordinates ``(column, row)``.
        """
        points = np.asarray(xy, dtype=np.float64)
        return points @ self._axes() + np.asarray(self.origin_px, dtype=np.float64)

    def image_to_part(self, xy) -> np.ndarray:
        """Map image pixels to part-frame positions; the inverse of :meth:`part_to_image`.

        Parameters
        ----------
        xy : (K, 2) or (2,) array_like
            Image pixel coordinates ``(column, row)``.

        Returns
        -------
        (K, 2) or (2,) ndarray of float64
            Positions ``(x, y)`` in the part frame, ``y`` downward from the top edge.
        """
        points = np.asarray(xy, dtype=np.float64)
        return (points - np.asarray(self.origin_px, dtype=np.float64)) @ self._axes().T

    def angle_to_part_deg(self, angle_image_deg):
        """Turn axial angles measured against the image axes into the part frame.

        Both angles are counter-clockwise with +Y up on screen; the result is in
        ``[0, 180)``.
        """
        return np.mod(np.asarray(angle_image_deg, dtype=np.float64) - self.rotation_deg, 180.0)

    def angle_to_image_deg(self, angle_part_deg):
        """Turn axial angles in the part frame into angles against the image axes, in ``[0, 180)``."""
        return np.mod(np.asarray(angle_part_deg, dtype=np.float64) + self.rotation_deg, 180.0)

    def outline_px(self) -> np.ndarray:
        """The frame rectangle's corners in image pixels, (4, 2), from the origin along +X first."""
        length, width = self.size_px
        return self.part_to_image([[0.0, 0.0], [length, 0.0], [length, width], [0.0, width]])


def find_part_frame(
    image,
    *,
    max_skew_deg: float = 45.0,
    x_axis: XAxisChoice = "longer-side",
    min_filled_share: float = 0.97,
    max_edge_rms_px: float = 1.0,
    max_corner_error_deg: float = 2.0,
) -> PartFrame:
    """Find a rectangular part on a contrasting background and return its frame.

    The algorithm:

    1. Smooth lightly and split the grey levels with Otsu's threshold [1]_
       (on an area-averaged copy when the image is large); the side of the
       threshold that holds most of the image border is the background, so a
       bright part on a dark ground and a dark part on a bright ground both
       work. Otsu's separability (between-class over total variance) must
       reach 0.8, else the image holds no part.
    2. Clean the part mask with a morphological opening and closing, keep the
       largest connected region and fill its holes (outer contour by the
       border following of Suzuki and Abe [2]_).
    3. Fit the minimum-area rotated rectangle to the outline (rotating
       calipers, Freeman and Shapira [3]_) as the first guide.
    4. Where each side of the guide, trimmed of its ends, crosses the pixel
       columns (a near-horizontal side) or rows (a near-vertical side), locate
       the edge along that column or row on the full image: the peak of the
       derivative of the Gaussian-smoothed grey level (Canny [4]_), refined
       to sub-pixel by a Gaussian (log-parabola) fit through the peak and its
       two neighbours [5]_.
    5. Fit a straight line to each side's edge points by orthogonal (total)
       least squares [6]_, dropping outliers by their median absolute
       deviation. Repeat steps 4 and 5 twice with the fitted lines as the
       guide, the search narrowing each time. Corners are the intersections
       of adjacent lines; the skew is the mean direction of the four sides
       (modulo 90 degrees) weighted by the inverse variance of each side's
       slope.

    Parameters
    ----------
    image : (M, N) ndarray of float
        Grey image with values in [0, 1], rows growing downward.
    max_skew_deg : float, optional
        Largest accepted fixture skew, in degrees (at most 45).
    x_axis : {'longer-side', 'horizontal-side'}, optional
        Which side +X runs along: the longer one, or the one nearest to the
        image rows. A nearly square part should use ``'horizontal-side'``:
        with sides of almost equal length the longer one can change from one
        image to the next.
    min_filled_share : float, optional
        Smallest accepted ratio of the part's area to its fitted rectangle's.
    max_edge_rms_px : float, optional
        Largest accepted RMS distance of the edge points to their lines, px.
    max_corner_error_deg : float, optional
        Largest accepted departure of a corner angle from 90 degrees.

    Returns
    -------
    PartFrame
        The frame with its skew, origin, size and fit quality.

    Raises
    ------
    DatumError
        The image is not a 2-D grey image in [0, 1]; no part is found; the part
        touches the image border; its outline is not rectangular or its edges
        are not straight; the skew exceeds ``max_skew_deg``.

    Notes
    -----
    The edge is placed at the steepest grey-level change, which for a
    symmetrically blurred edge is its 50 % level. Edge profiles are taken
    along pixel columns or rows rather than along the side's normal, because
    interpolating a normal profile between pixels adds an error that depends
    on where the edge falls within a pixel; a column profile crosses a
    straight edge at the same place. Radiused or chamfered corners are left
    out by trimming 12 % of each side at either end; the origin is then the
    virtual sharp corner where the straight sides meet. The skew is
    ambiguous at exactly 45 degrees (which corner is top-left); keep fixtures
    well inside that. Brushed grain running parallel to an edge is the main error source: with
    grain of a tenth of the edge contrast the skew stays within about 0.05
    degrees on a 300 x 180 px panel.

    References
    ----------
    .. [1] N. Otsu, "A threshold selection method from gray-level histograms,"
       IEEE Trans. Systems, Man, and Cybernetics 9(1), 62-66, 1979.
       :doi:`10.1109/TSMC.1979.4310076`
    .. [2] S. Suzuki and K. Abe, "Topological structural analysis of digitized
       binary images by border following," Computer Vision, Graphics, and
       Image Processing 30(1), 32-46, 1985.
       :doi:`10.1016/0734-189X(85)90016-7`
    .. [3] H. Freeman and R. Shapira, "Determining the minimum-area encasing
       rectangle for an arbitrary closed curve," Communications of the ACM
       18(7), 409-413, 1975. :doi:`10.1145/360881.360919`
    .. [4] J. Canny, "A computational approach to edge detection," IEEE Trans.
       Pattern Analysis and Machine Intelligence 8(6), 679-698, 1986.
       :doi:`10.1109/TPAMI.1986.4767851`
    .. [5] R. B. Fisher and D. K. Naidu, "A comparison of algorithms for
       subpixel peak detection," in J. L. C. Sanz (ed.), Image Technology,
       Springer, 1996, 385-404.
    .. [6] K. Pearson, "On lines and planes of closest fit to systems of points
       in space," Philosophical Magazine 2(11), 559-572, 1901.
       :doi:`10.1080/14786440109462720`
    """
    if x_axis not in ("longer-side", "horizontal-side"):
        raise DatumError(f"x_axis must be 'longer-side' or 'horizontal-side' (got {x_axis!r})")
    if not 0.0 <= max_skew_deg <= 45.0:
        raise DatumError(f"max_skew_deg must lie in [0, 45] (got {max_skew_deg})")
    grey = _checked_grey(image)
    reduced, scale = _reduced(grey)
    smoothed = cv2.GaussianBlur(reduced, (0, 0), _SMOOTH_SIGMA, borderType=cv2.BORDER_REPLICATE)
    mask, part_is_bright, contrast = _part_mask(smoothed)
    _check_border(mask)
    box = cv2.boxPoints(cv2.minAreaRect(_outer_contour(mask))).astype(np.float64)
    # Pixel centres: full = (reduced + 0.5) * scale - 0.5.
    corners = (box + 0.5) * scale - 0.5
    area = float(np.count_nonzero(mask)) * float(np.prod(scale))
    _check_filled_share(area / cv2.contourArea(corners.astype(np.float32)), min_filled_share)

    polarity = 1.0 if part_is_bright else -1.0
    half_widths = list(_SEARCH_HALF_WIDTHS_PX)
    half_widths[0] = max(half_widths[0], int(np.ceil(3 * scale.max())))
    for half_width in half_widths:
        lines, residuals, sampled = _fit_sides(grey, corners, polarity, contrast, half_width)
        corners = _intersect_adjacent(lines)

    inliers = np.concatenate(residuals)
    quality = FitQuality(
        edge_rms_px=float(np.sqrt(np.mean(inliers**2))),
        filled_share=area / cv2.contourArea(corners.astype(np.float32)),
        corner_error_deg=_corner_error_deg(lines),
        outlier_share=1.0 - inliers.size / sampled,
        edge_points=int(inliers.size),
    )
    _check_filled_share(quality.filled_share, min_filled_share)
    if quality.edge_rms_px > max_edge_rms_px:
        raise DatumError(
            "part edges are not straight: RMS distance of edge points to the fitted lines "
            f"{quality.edge_rms_px:.2f} px > {max_edge_rms_px:.2f} px"
        )
    if quality.corner_error_deg > max_corner_error_deg:
        raise DatumError(
            "outline is not rectangular: a corner angle differs from 90 deg by "
            f"{quality.corner_error_deg:.2f} deg > {max_corner_error_deg:.2f} deg"
        )

    skew_deg = _skew_deg(lines, residuals)
    if abs(skew_deg) > max_skew_deg:
        raise DatumError(f"part is rotated {skew_deg:.2f} deg, more than max_skew_deg {max_skew_deg:.2f} deg")
    return _frame_from_corners(corners, skew_deg, x_axis, quality)


# ---------------------------------------------------------------- steps


def _checked_grey(image) -> np.ndarray:
    array = np.asarray(image)
    if array.ndim != 2:
        raise DatumError(f"image must be a 2-D grey array (got shape {array.shape})")
    if not np.issubdtype(array.dtype, np.floating):
        raise DatumError(f"image must be floating point with values in [0, 1] (got dtype {array.dtype})")
    if min(array.shape) < 16:
        raise DatumError(f"image is too small to hold a part: {array.shape[1]} x {array.shape[0]} px")
    if not np.all(np.isfinite(array)):
        raise DatumError("image holds values that are not finite (NaN or infinity)")
    low, high = float(array.min()), float(array.max())
    if low < -1e-6 or high > 1.0 + 1e-6:
        raise DatumError(f"image values must lie in [0, 1] (got {low:.4g} to {high:.4g})")
    return np.ascontiguousarray(array, dtype=np.float32)


def _reduced(grey: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Area-averaged copy no larger than the mask limit, and full pixels per reduced pixel (x, y)."""
    rows, cols = grey.shape
    factor = max(rows, cols) / _MASK_MAX_SIDE_PX
    if factor <= 1.0:
        return grey, np.ones(2)
    size = (max(16, round(cols / factor)), max(16, round(rows / factor)))
    reduced = cv2.resize(grey, size, interpolation=cv2.INTER_AREA)
    return reduced, np.array([cols / size[0], rows / size[1]])


def _part_mask(smoothed: np.ndarray) -> tuple[np.ndarray, bool, float]:
    """Return the filled part mask (uint8 0/1), whether the part is bright, and the grey contrast."""
    low, high = float(smoothed.min()), float(smoothed.max())
    if high - low < 1e-3:
        raise DatumError(f"no part found: the image is uniform (grey level {low:.3f})")
    from skimage.filters import threshold_otsu  # here, not at import: scikit-image costs a second to load

    threshold = float(threshold_otsu(smoothed))
    bright = smoothed > threshold
    share_bright = float(bright.mean())
    mean_bright = float(smoothed[bright].mean())
    mean_dark = float(smoothed[~bright].mean())
    between = share_bright * (1.0 - share_bright) * (mean_bright - mean_dark) ** 2
    separability = between / float(smoothed.var())
    if separability < _MIN_SEPARABILITY:
        raise DatumError(
            "no part found: the grey levels do not split into part and background "
            f"(Otsu separability {separability:.2f} < {_MIN_SEPARABILITY:.2f})"
        )

    border = np.concatenate([bright[0, :], bright[-1, :], bright[1:-1, 0], bright[1:-1, -1]])
    part_is_bright = float(border.mean()) < 0.5
    mask = (bright if part_is_bright else ~bright).astype(np.uint8)

    kernel = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (5, 5))
    mask = cv2.morphologyEx(mask, cv2.MORPH_OPEN, kernel)
    mask = cv2.morphologyEx(mask, cv2.MORPH_CLOSE, kernel)
    count, labels, stats, _ = cv2.connectedComponentsWithStats(mask, connectivity=8)
    if count < 2:
        raise DatumError("no part found: nothing stands out from the background after cleaning")
    largest = 1 + int(np.argmax(stats[1:, cv2.CC_STAT_AREA]))
    area_share = stats[largest, cv2.CC_STAT_AREA] / mask.size
    if area_share < _MIN_AREA_SHARE:
        raise DatumError(
            f"no part found: the largest region covers {100 * area_share:.2f} % of the image "
            f"(at least {100 * _MIN_AREA_SHARE:.0f} % needed)"
        )
    region = (labels == largest).astype(np.uint8)
    contours, _ = cv2.findContours(region, cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_NONE)
    filled = np.zeros_like(region)
    cv2.drawContours(filled, contours, -1, 1, thickness=cv2.FILLED)
    return filled, part_is_bright, mean_bright - mean_dark


def _check_border(mask: np.ndarray) -> None:
    touched = [
        name
        for name, line in (("left", mask[:, 0]), ("right", mask[:, -1]), ("top", mask[0, :]), ("bottom", mask[-1, :]))
        if line.any()
    ]
    if touched:
        edges = " and ".join(touched)
        raise DatumError(f"part touches the image border at the {edges} edge{'s' if len(touched) > 1 else ''}")


def _outer_contour(mask: np.ndarray) -> np.ndarray:
    contours, _ = cv2.findContours(mask, cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_NONE)
    return max(contours, key=cv2.contourArea)


def _check_filled_share(share: float, minimum: float) -> None:
    if share < minimum:
        raise DatumError(f"outline is not rectangular: filled share {share:.2f} < {minimum:.2f}")


@dataclass(frozen=True)
class _Line:
    """A fitted side: a point on it, its unit direction and the along-line coordinates of its points."""

    point: np.ndarray
    direction: np.ndarray
    along: np.ndarray


def _fit_sides(grey, guide, polarity, contrast, half_width):
    """Locate sub-pixel edge points along the four sides of ``guide`` and fit a line to each."""
    centre = guide.mean(axis=0)
    lines, residuals, sampled = [], [], 0
    for index in range(4):
        start, end = guide[index], guide[(index + 1) % 4]
        points = _edge_points(grey, start, end, centre, polarity, contrast, half_width)
        sampled += len(points)
        if len(points) < 10:
            raise DatumError(
                f"outline is not rectangular: a side has too few edge points ({len(points)}) for a straight line"
            )
        line, inlier_residuals = _robust_line(points)
        lines.append(line)
        residuals.append(inlier_residuals)
    return lines, residuals, sampled


def _edge_points(grey, start, end, centre, polarity, contrast, half_width):
    """Sub-pixel edge points where the side from ``start`` to ``end`` crosses pixel columns or rows.

    A near-horizontal side is searched along image columns and a near-vertical
    one along rows, on the pixels themselves: interpolating between pixels
    would add an error that depends on where the edge falls within a pixel.
    Only a band around the side is smoothed.
    """
    side = end - start
    # Work in (along, across) pixel axes: along is the image axis the side follows most.
    along_axis = 0 if abs(side[0]) >= abs(side[1]) else 1
    across_axis = 1 - along_axis
    along_limit = grey.shape[1 - along_axis] - 1
    across_limit = grey.shape[1 - across_axis] - 1
    outward = np.sign(((start + end) / 2 - centre)[across_axis])
    first, last = start + _END_TRIM * side, start + (1 - _END_TRIM) * side
    low, high = sorted((first[along_axis], last[along_axis]))
    along = np.arange(max(np.ceil(low), 0), min(np.floor(high), along_limit) + 1)
    if along.size == 0 or side[along_axis] == 0:
        return np.empty((0, 2))
    guide_across = start[across_axis] + (along - start[along_axis]) * (side[across_axis] / side[along_axis])
    offsets = np.arange(-half_width, half_width + 1)
    across = np.clip(np.rint(guide_across).astype(np.intp)[:, None] + offsets[None, :], 0, across_limit)
    along_index = np.broadcast_to(along.astype(np.intp)[:, None], across.shape)
    if along_axis == 0:
        profiles = _smoothed_at(grey, rows=across, cols=along_index)
    else:
        profiles = _smoothed_at(grey, rows=along_index, cols=across)
    # Positive where the grey level steps from part to background going outward.
    slope = -polarity * outward * (profiles[:, 2:] - profiles[:, :-2]) / 2.0
    peak = np.argmax(slope[:, 1:-1], axis=1) + 1
    index = np.arange(len(peak))
    left, middle, right = slope[index, peak - 1], slope[index, peak], slope[index, peak + 1]
    # A step of contrast C blurred by sigma ~1 px has a slope peak near 0.4 C.
    strong = middle > 0.1 * contrast
    offset = _peak_offset(left, middle, right)
    # slope[:, k] is centred on across[:, k + 1].
    points = np.empty((len(along), 2))
    points[:, along_axis] = along
    points[:, across_axis] = across[index, peak + 1] + offset
    return points[strong & np.isfinite(offset)]


def _smoothed_at(grey, *, rows, cols):
    """Values of the Gaussian-smoothed image at integer pixels, smoothing only their bounding box.

    The box is widened by the filter's reach, so the values equal those of
    smoothing the whole image.
    """
    reach = int(np.ceil(4 * _SMOOTH_SIGMA)) + 1
    top, left = max(int(rows.min()) - reach, 0), max(int(cols.min()) - reach, 0)
    bottom = min(int(rows.max()) + reach + 1, grey.shape[0])
    right = min(int(cols.max()) + reach + 1, grey.shape[1])
    window = cv2.GaussianBlur(grey[top:bottom, left:right], (0, 0), _SMOOTH_SIGMA, borderType=cv2.BORDER_REPLICATE)
    return window[rows - top, cols - left]


def _peak_offset(left, centre, right):
    """Sub-sample peak offset in (-0.5, 0.5): Gaussian fit when all three are positive, else parabola."""
    with np.errstate(divide="ignore", invalid="ignore"):
        positive = (left > 0) & (centre > 0) & (right > 0)
        ln_l = np.log(np.where(positive, left, 1.0))
        ln_c = np.log(np.where(positive, centre, 1.0))
        ln_r = np.log(np.where(positive, right, 1.0))
        gaussian = (ln_l - ln_r) / (2.0 * (ln_l - 2.0 * ln_c + ln_r))
        parabola = (left - right) / (2.0 * (left - 2.0 * centre + right))
        offset = np.where(positive, gaussian, parabola)
    return np.clip(offset, -0.5, 0.5)


def _robust_line(points: np.ndarray) -> tuple[_Line, np.ndarray]:
    """Orthogonal least-squares line through ``points``, refitted without outliers."""
    keep = np.ones(len(points), dtype=bool)
    for _ in range(4):
        centroid = points[keep].mean(axis=0)
        _, _, vt = np.linalg.svd(points[keep] - centroid, full_matrices=False)
        direction = vt[0]
        normal = np.array([-direction[1], direction[0]])
        distance = (points - centroid) @ normal
        spread = 1.4826 * np.median(np.abs(distance[keep] - np.median(distance[keep])))
        limit = max(_OUTLIER_SIGMAS * spread, _OUTLIER_FLOOR_PX)
        new_keep = np.abs(distance) <= limit
        if new_keep.sum() < 10 or np.array_equal(new_keep, keep):
            break
        keep = new_keep
    along = (points[keep] - centroid) @ direction
    return _Line(centroid, direction, along), distance[keep]


def _intersect_adjacent(lines: list[_Line]) -> np.ndarray:
    """Corner ``i`` joins side ``i - 1`` and side ``i`` (sides run corner ``i`` to ``i + 1``)."""
    corners = []
    for index in range(4):
        first, second = lines[index - 1], lines[index]
        matrix = np.column_stack([first.direction, -second.direction])
        if abs(np.linalg.det(matrix)) < 1e-6:
            raise DatumError("outline is not rectangular: two adjacent sides are parallel")
        steps = np.linalg.solve(matrix, second.point - first.point)
        corners.append(first.point + steps[0] * first.direction)
    return np.array(corners)


def _screen_angle_deg(direction: np.ndarray) -> float:
    """Angle of an image-space direction, counter-clockwise with +Y up on screen."""
    return float(np.degrees(np.arctan2(-direction[1], direction[0])))


def _wrap_quarter(angle_deg):
    """Wrap an angle to [-45, 45) modulo 90 degrees."""
    return np.mod(np.asarray(angle_deg) + 45.0, 90.0) - 45.0


def _skew_deg(lines: list[_Line], residuals: list[np.ndarray]) -> float:
    """Mean direction of the four sides modulo 90 degrees, in [-45, 45), by inverse variance."""
    angles = np.array([_screen_angle_deg(line.direction) for line in lines])
    # The slope variance of a least-squares line is sigma^2 / sum((t - mean t)^2);
    # the floor keeps a near-perfect side from taking all the weight.
    spread = np.array([np.sum((line.along - line.along.mean()) ** 2) for line in lines])
    variance = np.array([max(np.mean(r**2), _MIN_EDGE_VARIANCE_PX2) for r in residuals])
    weights = spread / variance
    reference = angles[int(np.argmax(weights))]
    residual = _wrap_quarter(angles - reference)
    return float(_wrap_quarter(reference + np.average(residual, weights=weights)))


def _corner_error_deg(lines: list[_Line]) -> float:
    errors = []
    for index in range(4):
        cosine = abs(float(np.dot(lines[index - 1].direction, lines[index].direction)))
        errors.append(np.degrees(np.arcsin(min(cosine, 1.0))))
    return float(max(errors))


def _frame_from_corners(corners, skew_deg, x_axis, quality) -> PartFrame:
    """Choose +X, the origin corner and the size from the fitted corners."""
    theta = np.deg2rad(skew_deg)
    horizontal = np.array([np.cos(theta), -np.sin(theta)])
    sides = np.roll(corners, -1, axis=0) - corners
    lengths = np.hypot(sides[:, 0], sides[:, 1])
    along_horizontal = np.abs(sides @ horizontal) > np.abs(sides @ np.array([-horizontal[1], horizontal[0]]))
    horizontal_length = lengths[along_horizontal].mean()
    vertical_length = lengths[~along_horizontal].mean()
    rotation_deg = skew_deg
    if x_axis == "longer-side" and vertical_length > horizontal_length:
        rotation_deg = skew_deg + 90.0

    probe = PartFrame(rotation_deg, skew_deg, (0.0, 0.0), (0.0, 0.0))
    relative = probe.image_to_part(corners - corners.mean(axis=0))
    origin_index = int(np.argmin(relative[:, 0] + relative[:, 1]))
    ordered = np.roll(corners, -origin_index, axis=0)
    ordered_relative = np.roll(relative, -origin_index, axis=0)
    # Corners run around the outline; make the one after the origin lie along +X.
    if abs(ordered_relative[1, 1] - ordered_relative[0, 1]) > abs(ordered_relative[1, 0] - ordered_relative[0, 0]):
        ordered = np.vstack([ordered[:1], ordered[:0:-1]])
    size_x = 0.5 * (np.hypot(*(ordered[1] - ordered[0])) + np.hypot(*(ordered[2] - ordered[3])))
    size_y = 0.5 * (np.hypot(*(ordered[3] - ordered[0])) + np.hypot(*(ordered[2] - ordered[1])))
    origin = ordered[0]
    return PartFrame(
        rotation_deg=float(rotation_deg),
        skew_deg=float(skew_deg),
        origin_px=(float(origin[0]), float(origin[1])),
        size_px=(float(size_x), float(size_y)),
        fit_quality=quality,
    )
