"""The inspection engine: an image and a recipe in, a part result out.

``inspect_image`` is a pure function (no file I/O): it places the recipe's
regions in the image through the datum frame, measures each region
(:mod:`surfinspect.orientation`), judges it (:mod:`surfinspect.judge`) and
combines the verdicts.
"""

from __future__ import annotations

import datetime as _dt
import math
from dataclasses import dataclass, replace
from functools import partial
from pathlib import PurePath

import cv2
import numpy as np

from .._version import __version__
from ..errors import InputError
from ..recipe import LayPattern, Recipe, Region, Shape
from ..results import (
    DatumInfo,
    ImageInfo,
    PartResult,
    PartVerdict,
    RecipeInfo,
    RegionResult,
    part_verdict,
)
from .axial import wrap_deviation
from .cells import cell_sums, merge_edge_slivers, merge_outline_slivers
from .conditions import block_grid, illumination_background, saturated_pixels
from .crossed import family_energy_per_cell, spectral_families
from .datum import DatumError, find_part_frame
from .derivatives import gaussian_derivative_kernels
from .imaging import as_grey_float
from .judge import RegionMeasurement, judge_region
from .noise import noise_gradient_energy, noise_sigma
from .spectrum import spectral_lay, tensor_angle_standard_error

__all__ = ["Frame", "inspect_image", "inspect_region", "region_masks", "frame_for"]

#: Histogram votes from every second pixel along rows and columns (see ``cell_sums``).
HISTOGRAM_VOTE_STEP = 2

#: The spectral estimate uses at most this many pixels square from the region's centre.
SPECTRAL_SIDE = 256

#: The directions of a crossed lay come from at most this many pixels square from the region's centre
#: (its angular resolution grows with the side: 2 / (side f) radians, see ``crossed.angular_resolution_deg``).
CROSSED_SIDE = 512

#: The cells of a crossed region are checked for marks off both families when these lie at least this
#: far apart (a quarter of it, 15 deg, is then about what a cell's window of 48 px resolves).
OFF_CHECK_MIN_SEPARATION = 80.0

#: ... and when the region as a whole holds at most this share of its cells' energy off both families
#: (crossed regions: 0.01-0.13; gratings of period 20, too coarse for a 48 px window: about 1).
OFF_CHECK_MAX_REGION_SHARE = 0.2

#: A region with fewer cells than this has its direction test made on cells a third the size.
MIN_TEST_CELLS = 64

#: Strips measured at once within one image (OpenCV and NumPy release the GIL).
THREADS = 2


@dataclass(frozen=True)
class Frame:
    """Maps recipe coordinates (datum frame, y measured downward) to image pixels.

    ``rotation_deg`` is the frame's rotation against the image axes,
    counter-clockwise positive as seen on screen (the sign of the lay);
    ``px_per_unit`` converts recipe units (pixels or mm) to image pixels.
    ``view_px`` (datum ``image`` only) is the image's size: the recipe's
    regions are drawn on that rectangle of the frame, and where the camera's
    rotation turns its corners off the image, a region is cut at the image's
    border instead of refused.
    """

    origin_px: tuple[float, float] = (0.0, 0.0)
    rotation_deg: float = 0.0
    px_per_unit: float = 1.0
    view_px: tuple[float, float] | None = None

    def to_image(self, points) -> np.ndarray:
        """(K, 2) recipe coordinates -> (K, 2) image pixel coordinates (x, y down)."""
        p = np.asarray(points, dtype=np.float64).reshape(-1, 2) * self.px_per_unit
        r = math.radians(self.rotation_deg)
        c, s = math.cos(r), math.sin(r)
        # +X of the frame points (c, -s) in image px (y down); the frame's downward axis (s, c)
        x = self.origin_px[0] + p[:, 0] * c + p[:, 1] * s
        y = self.origin_px[1] - p[:, 0] * s + p[:, 1] * c
        return np.stack([x, y], axis=1)

    def to_frame(self, points) -> np.ndarray:
        """Inverse of :meth:`to_image`."""
        q = np.asarray(points, dtype=np.float64).reshape(-1, 2) - np.asarray(self.origin_px)
        r = math.radians(self.rotation_deg)
        c, s = math.cos(r), math.sin(r)
        u = q[:, 0] * c - q[:, 1] * s
        v = q[:, 0] * s + q[:, 1] * c
        return np.stack([u, v], axis=1) / self.px_per_unit


def frame_for(recipe: Recipe, image: np.ndarray) -> tuple[Frame, DatumInfo]:
    """The datum frame of ``recipe`` on ``image``.

    Raises
    ------
    InputError
        (``datum.DatumError``) when ``datum: part-edge`` cannot find the part.
    """
    ppu = recipe.units_to_px()
    if recipe.datum == "part-edge":
        pf = find_part_frame(image)
        # the datum module puts pixel centres at integers; region masks use pixel edges
        # (pixel i spans [i, i + 1)), so the origin moves by half a pixel
        origin = (float(pf.origin_px[0]) + 0.5, float(pf.origin_px[1]) + 0.5)
        frame = Frame(origin_px=origin, rotation_deg=float(pf.rotation_deg), px_per_unit=ppu)
        q = pf.fit_quality
        info = DatumInfo(
            kind="part-edge",
            rotation_deg=float(pf.rotation_deg),
            origin_px=origin,
            fit_quality=None if q is None else float(q.edge_rms_px),
            size_px=tuple(float(v) for v in pf.size_px),
            pixel_size_mm=recipe.pixel_size_mm,
            fit=None
            if q is None
            else {
                "edge_rms_px": round(float(q.edge_rms_px), 4),
                "filled_share": round(float(q.filled_share), 4),
                "corner_error_deg": round(float(q.corner_error_deg), 4),
                "outlier_share": round(float(q.outlier_share), 4),
                "edge_points": int(q.edge_points),
                "fixture_rotation_deg": round(float(pf.skew_deg), 4),  # in [-45, 45): squares the sides
            },
        )
        return frame, info
    # the camera's rotation pivots about the image centre: the frame's point at the centre of an
    # image-sized rectangle is the image centre, so +a and -a turn a full-frame region alike
    rows, cols = image.shape[:2]
    centre = np.array([cols / 2.0, rows / 2.0])
    turned = Frame(rotation_deg=recipe.camera_rotation_deg, px_per_unit=ppu).to_image([centre / ppu])[0]
    origin = (float(centre[0] - turned[0]), float(centre[1] - turned[1]))
    frame = Frame(origin_px=origin, rotation_deg=recipe.camera_rotation_deg, px_per_unit=ppu, view_px=(cols, rows))
    return frame, DatumInfo(
        kind="image", rotation_deg=recipe.camera_rotation_deg, origin_px=origin, pixel_size_mm=recipe.pixel_size_mm
    )


def _rings(shape: Shape, frame: Frame) -> list[np.ndarray]:
    return [frame.to_image(ring) for ring in shape.outline()]


def region_masks(region: Region, frame: Frame, image_shape: tuple[int, int], recipe_path: str = "<memory>"):
    """Rasterise a region: bounding box, mask inside it, outlines in image px.

    Returns
    -------
    bbox : (x, y, w, h) ints
    mask : (h, w) bool ndarray
    outer, holes : tuples of outlines, each a tuple of (x, y) image px

    Raises
    ------
    InputError
        When the region does not lie wholly inside the image, or is empty.
    """
    rows, cols = image_shape
    rings = _rings(region.shape, frame)
    outer = rings[:1]
    holes = rings[1:] + [r for ex in region.exclude for r in _rings(ex, frame)]
    pts = outer[0]
    xmin, ymin = np.floor(pts.min(axis=0)).astype(int)
    xmax, ymax = np.ceil(pts.max(axis=0)).astype(int)
    where = f"{recipe_path}:{region.line}: regions({region.name})"
    if (xmin < -0.5 or ymin < -0.5 or xmax > cols + 0.5 or ymax > rows + 0.5) and not _in_view(region, frame):
        raise InputError(
            f"{where}: region lies outside the image (spans x {pts[:, 0].min():.0f}..{pts[:, 0].max():.0f}, "
            f"y {pts[:, 1].min():.0f}..{pts[:, 1].max():.0f} px; image is {cols}x{rows} px)"
        )
    xmin, ymin = max(0, xmin), max(0, ymin)
    xmax, ymax = min(cols, xmax), min(rows, ymax)
    w, h = xmax - xmin, ymax - ymin
    mask = np.zeros((h, w), dtype=np.uint8)
    shift = 4  # sub-pixel vertices: 1/16 px
    scale = 1 << shift

    def fixed(ring: np.ndarray) -> np.ndarray:
        # pixel centres sit at integer coordinates; a rect [0, w) covers pixel centres 0..w-1
        local = (ring - [xmin + 0.5, ymin + 0.5]) * scale
        return np.round(local).astype(np.int32).reshape(-1, 1, 2)

    cv2.fillPoly(mask, [fixed(outer[0])], 1, lineType=cv2.LINE_8, shift=shift)
    if holes:
        cv2.fillPoly(mask, [fixed(r) for r in holes], 0, lineType=cv2.LINE_8, shift=shift)
    if not mask.any():
        raise InputError(f"{where}: region covers no pixels (after excluded shapes are removed)")

    def as_tuple(ring: np.ndarray):
        return tuple((float(x), float(y)) for x, y in ring)

    # 0/1 bytes viewed as bool: no copy
    return (xmin, ymin, w, h), mask.view(bool), tuple(as_tuple(r) for r in outer), tuple(as_tuple(r) for r in holes)


def _patches_in_part_frame(result, frame: Frame, pixel_size_mm: float | None):
    """Give each patch its box in the part frame, in mm (x, y from the datum origin, y down), as a drawing would."""
    if not pixel_size_mm or not result.patches:
        return result
    placed = []
    for p in result.patches:
        x, y, w, h = p.bbox_px
        corners = frame.to_frame([[x, y], [x + w, y], [x + w, y + h], [x, y + h]])  # recipe units: mm here
        (x0, y0), (x1, y1) = corners.min(axis=0), corners.max(axis=0)
        placed.append(replace(p, position_mm=(float(x0), float(y0), float(x1 - x0), float(y1 - y0))))
    return replace(result, patches=tuple(placed))


def _in_view(region: Region, frame: Frame) -> bool:
    """True when the region lies on the frame's image-sized rectangle (datum ``image``)."""
    if frame.view_px is None:
        return False
    pts = np.concatenate([np.asarray(ring, dtype=float) for ring in region.shape.outline()]) * frame.px_per_unit
    w, h = frame.view_px
    return bool(pts.min() >= -0.5 and (pts[:, 0] <= w + 0.5).all() and (pts[:, 1] <= h + 0.5).all())


def inspect_image(
    image: np.ndarray,
    recipe: Recipe,
    *,
    name: str | None = None,
    image_info: ImageInfo | None = None,
    inspected_at: str | None = None,
) -> PartResult:
    """Measure and judge the lay of every region of ``recipe`` on ``image``.

    Parameters
    ----------
    image : (M, N) ndarray
        Grey image (uint8, uint16 or float in [0, 1]); colour (M, N, 3) RGB is
        converted to grey.
    recipe : Recipe
    name : str, optional
        Part name for the result (defaults to the image file's stem, or "part").
    image_info : ImageInfo, optional
        File facts (path, SHA-256, bit depth) to carry into the result.
    inspected_at : str, optional
        UTC ISO 8601 time stamp; now when omitted.

    Returns
    -------
    PartResult

    Raises
    ------
    InputError
        When a region lies outside the image.
    """
    pixels = as_grey_float(image)
    rows, cols = pixels.shape
    if image_info is None:
        image_info = ImageInfo(path="", sha256="", width=cols, height=rows, bit_depth=_bit_depth(image))
    if name is None:
        name = PurePath(image_info.path).stem if image_info.path else "part"
    stamp = inspected_at or _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds").replace("+00:00", "Z")
    recipe_info = RecipeInfo(name=recipe.name, revision=recipe.revision, sha256=recipe.sha256)

    try:
        frame, datum = frame_for(recipe, pixels)
    except DatumError as exc:
        return PartResult(
            name=name,
            image=image_info,
            recipe=recipe_info,
            verdict=PartVerdict.REVIEW,
            regions=(),
            inspected_at=stamp,
            engine_version=__version__,
            datum=None,
            reasons=(f"part frame not found: {exc}",),
        )

    placed = [region_masks(r, frame, pixels.shape, recipe.path) for r in recipe.regions]
    sigma_n = noise_sigma(pixels, threads=THREADS)
    results = [
        inspect_region(pixels, recipe, region, frame, sigma_n, placed=where)
        for region, where in zip(recipe.regions, placed)
    ]
    verdict = part_verdict([r.verdict for r in results])
    return PartResult(
        name=name,
        image=image_info,
        recipe=recipe_info,
        verdict=verdict,
        regions=tuple(results),
        inspected_at=stamp,
        engine_version=__version__,
        datum=datum,
    )


def inspect_region(
    pixels: np.ndarray,
    recipe: Recipe,
    region: Region,
    frame: Frame,
    noise_sigma_px: float,
    *,
    placed=None,
) -> RegionResult:
    """Measure and judge one region of ``recipe`` on ``pixels``: what :func:`inspect_image` does per region.

    Only the region's bounding box (and the derivative kernel's halo) is read,
    so a caller that keeps the image, its frame (:func:`frame_for`) and its
    noise level (``noise.noise_sigma`` of the whole image) gets the numbers
    ``inspect_image`` gives for that region, at the cost of that region alone
    (the recipe page's live preview).

    Parameters
    ----------
    pixels : (M, N) float32 ndarray
        The image in the engine's form (``imaging.as_grey_float``).
    recipe : Recipe
        The recipe the region belongs to (units, saturation level, file name in messages).
    region : Region
    frame : Frame
        ``frame_for(recipe, pixels)[0]``.
    noise_sigma_px : float
        ``noise.noise_sigma(pixels)`` of the whole image.
    placed : tuple, optional
        ``region_masks(region, frame, pixels.shape, recipe.path)`` when already computed.

    Returns
    -------
    RegionResult

    Raises
    ------
    InputError
        When the region lies outside the image or covers no pixels.
    """
    if placed is None:
        placed = region_masks(region, frame, pixels.shape, recipe.path)
    result = judge_region(region, _measure_region(pixels, region, placed, frame, recipe, noise_sigma_px))
    return _patches_in_part_frame(result, frame, recipe.pixel_size_mm)


def _measure_region(pixels: np.ndarray, region: Region, where, frame: Frame, recipe: Recipe, sigma_n: float):
    """Mask what the camera could not see, sum the cells and gather what judging needs."""
    bbox, mask, outer, holes = where
    radius = len(gaussian_derivative_kernels(region.sigma_px)[0]) // 2
    # the region's measured pixels in a part of its box (what the central samples read)
    measured = partial(_measured_part, pixels, mask, bbox, recipe.saturation_level, radius)
    from concurrent.futures import ThreadPoolExecutor

    # the central samples read only the image: they run beside the cell sums, whose strips leave
    # a core idle part of the time (the vote counting holds the GIL, the filters do not)
    with ThreadPoolExecutor(max_workers=1) as beside:
        grid = beside.submit(_block_grid_sample, pixels, bbox, mask)
        central = None
        if region.lay is LayPattern.DIRECTIONAL:
            central = beside.submit(_spectral_sample, pixels, region, bbox, measured, sigma_n)
        cells = cell_sums(
            pixels,
            mask,
            bbox,
            cell_px=region.cell_px,
            sigma=region.sigma_px,
            angle_offset_deg=frame.rotation_deg,
            vote_step=HISTOGRAM_VOTE_STEP,
            threads=THREADS,
            background_sigma=region.illumination_px,
            saturation_level=recipe.saturation_level,
        )
        region_px = np.count_nonzero(mask)
        hidden = cells.clipped_px
        masked = float(hidden / max(region_px, 1))
        measured_px = region_px - hidden
        test_cells = None
        if cells.area.size < MIN_TEST_CELLS and region.lay is LayPattern.DIRECTIONAL:
            # too few cells for a strong direction test: test on cells of a third the size (cheap: the region is small)
            test_cells = cell_sums(
                pixels,
                mask,
                bbox,
                cell_px=max(8, region.cell_px // 3),
                sigma=region.sigma_px,
                background_sigma=region.illumination_px,
                saturation_level=recipe.saturation_level,
            )
        cells = merge_outline_slivers(merge_edge_slivers(cells))
        spectral = tensor_se = None
        if central is not None:
            spectral, tensor_se, sample_px = central.result()
            if tensor_se is not None:  # from the sample's pixels to the whole region's measured ones
                tensor_se *= math.sqrt(float(sample_px) / max(float(measured_px), 1.0))
        block_grid_found = grid.result()
    families = family_cells = None
    if region.lay is LayPattern.CROSSED:
        families, family_cells = _crossed_sample(pixels, region, bbox, measured, sigma_n, cells)
    centre_px = None
    if region.centre is not None:
        cx, cy = frame.to_image([region.centre])[0]
        centre_px = (float(cx), float(cy))
    return RegionMeasurement(
        cells=cells,
        region_mask_area=float(region_px),
        noise_energy=noise_gradient_energy(sigma_n, region.sigma_px),
        rotation_deg=frame.rotation_deg,
        centre_px=centre_px,
        outline_px=outer,
        exclude_px=holes,
        pixel_size_mm=recipe.pixel_size_mm,
        masked_fraction=masked,
        block_grid=block_grid_found,
        test_cells=test_cells,
        spectral=spectral,
        tensor_standard_error_deg=tensor_se,
        families=families,
        family_cells=family_cells,
    )


def _measured_part(pixels: np.ndarray, mask: np.ndarray, bbox, level: float, radius: int, r0, r1, c0, c1):
    """Region pixels of box rows ``r0:r1`` and columns ``c0:c1`` that are measured: not clipped at ``level``.

    The clipped pixels are grown from the image around that part (``radius`` px beyond it, or to the
    image's edge), which is what growing those of the whole box gives there.
    """
    part = mask[r0:r1, c0:c1]
    x0, y0, _, _ = bbox
    rows, cols = pixels.shape
    gy0, gx0 = max(0, y0 + r0 - radius), max(0, x0 + c0 - radius)
    grown = saturated_pixels(
        pixels[gy0 : min(rows, y0 + r1 + radius), gx0 : min(cols, x0 + c1 + radius)], level, radius
    )
    if grown is None:
        return part
    top, left = y0 + r0 - gy0, x0 + c0 - gx0
    return part & ~grown[top : top + (r1 - r0), left : left + (c1 - c0)]


def _spectral_sample(pixels: np.ndarray, region: Region, bbox, measured, sigma_n: float):
    """The spectral lay, the tensor angle's spectral standard error and the measured pixels they had.

    From the region's central part, at most :data:`SPECTRAL_SIDE` px square, so the cost stays
    bounded; the caller scales the standard error to the whole region's measured pixels (variance
    inversely proportional to the measured area).
    """
    x0, y0, _, _ = bbox
    r0, r1, c0, c1 = _central(bbox, SPECTRAL_SIDE)
    crop = measured(r0, r1, c0, c1)
    crop_px = np.count_nonzero(crop)
    if crop_px < 64:
        return None, None, crop_px
    block = pixels[y0 + r0 : y0 + r1, x0 + c0 : x0 + c1]
    spectral = spectral_lay(block, crop, noise_sigma=sigma_n)
    if region.illumination_px > 0:
        block = block - illumination_background(block, region.illumination_px).sample(0, r1 - r0, 0, c1 - c0)
    return spectral, tensor_angle_standard_error(block, crop, sigma=region.sigma_px), crop_px


def _central(bbox, side: int):
    """Box rows and columns ``(r0, r1, c0, c1)`` of the central ``side`` x ``side`` px of a region box."""
    _, _, w, h = bbox
    r0, c0 = max(0, (h - side) // 2), max(0, (w - side) // 2)
    return r0, min(h, r0 + side), c0, min(w, c0 + side)


def _crossed_sample(pixels: np.ndarray, region: Region, bbox, measured, sigma_n: float, cells):
    """The families of marks of a crossed region (its central part) and their energy cell by cell."""
    x0, y0, _, _ = bbox
    r0, r1, c0, c1 = _central(bbox, CROSSED_SIDE)
    crop = measured(r0, r1, c0, c1)
    if crop.sum() < 1024:  # under 32 x 32 px: no direction can be resolved
        return None, None
    block = pixels[y0 + r0 : y0 + r1, x0 + c0 : x0 + c1]
    if region.illumination_px > 0:
        block = block - illumination_background(block, region.illumination_px).sample(0, r1 - r0, 0, c1 - c0)
    families = spectral_families(block, crop, noise_sigma=sigma_n)
    present = families.present
    if len(present) < 2 or min(cells.shape_px) < 16:
        return families, None
    lays = [f.lay_deg for f in present[:2]]
    separation = abs(wrap_deviation(lays[0], lays[1]))
    box = (x0, y0, cells.shape_px[1], cells.shape_px[0])
    per_cell = partial(family_energy_per_cell, pixels, box, cells.cell_px, cells.area.shape, lays, noise_sigma=sigma_n)
    energy = per_cell(half_width_deg=min(45.0, separation / 2))
    if separation >= OFF_CHECK_MIN_SEPARATION:  # the energy off both families: within a quarter of the separation
        near = per_cell(half_width_deg=separation / 4, with_total=True)
        off = 1.0 - near[..., :2].sum(axis=-1) / np.maximum(near[..., 2], 1e-300)
        region_off = 1.0 - float(near[..., :2].sum()) / max(float(near[..., 2].sum()), 1e-300)
        if region_off <= OFF_CHECK_MAX_REGION_SHARE:  # else the marks lie below what a cell's window resolves
            energy = np.concatenate([energy, np.where(near[..., 2] > 0, off, 0.0)[..., None]], axis=-1)
    return families, energy


def _block_grid_sample(pixels: np.ndarray, bbox, mask: np.ndarray, side: int = 1024):
    """The block grid of a region, from its central ``side`` x ``side`` px at most (it repeats everywhere)."""
    x0, y0, _, _ = bbox
    r0, r1, c0, c1 = _central(bbox, side)
    crop = mask[r0:r1, c0:c1]
    if np.count_nonzero(crop) == crop.size:
        crop = None  # the same sums, without weighting every step by one
    return block_grid(pixels[y0 + r0 : y0 + r1, x0 + c0 : x0 + c1], crop, origin=(x0 + c0, y0 + r0))


def _bit_depth(image: np.ndarray) -> int:
    dt = np.asarray(image).dtype
    return 16 if dt == np.uint16 else 8 if dt == np.uint8 else 32
