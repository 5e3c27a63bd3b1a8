"""Judging: measured cell sums + a recipe region -> a region verdict with reasons.

Pure functions. The rules (all thresholds come from the recipe region):

* **Review first**: when clipped pixels (glare) cover more than ``max_masked_fraction`` of the
  region, or more than ``max_unmeasured_fraction`` of the local check's area is unmeasured,
  the region goes to ``review`` with the reason in words; it is never failed on what could not
  be seen.
* **No texture**: the region's gradient energy is less than :data:`TEXTURE_RATIO_MIN` times
  what the image's own noise gives. Such a region gets no angle at all.
* **Directional** lay passes when ``|deviation| <= tolerance_deg`` (the lay is the robust
  combination of the cells, :mod:`.robust`), coherence ``>= min_coherence`` and the
  deviating-patch share ``<= max_deviating_fraction``.
* **Crossed**, **multidirectional / particulate**, **circular / radial**: :mod:`.patterns`.
* **Any**: texture must be present; its direction is not judged.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

from ..recipe import LayPattern, Region
from ..results import CellGrid, Histogram, Patch, RegionResult, RegionVerdict
from .axial import axial_mean, wrap_deviation
from .cells import CellSums
from .conditions import BlockGrid
from .crossed import SpectralFamilies
from .derivatives import tensor_lay
from .noise import noise_gradient_energy
from .patterns import fit_centre, judge_centred, judge_crossed, judge_nondirectional
from .robust import robust_lay
from .spectrum import SpectralLay
from .uncertainty import COVERAGE_K, STEP_GRADIENT_ENERGY, Budget, cell_uncertainty, combine
from .verdict import Cells, Verdict, fmt_angle, fmt_signed

__all__ = [
    "TEXTURE_RATIO_MIN",
    "TEXTURE_ALPHA",
    "CELL_MIN_COVER",
    "RegionMeasurement",
    "direction_test",
    "judge_region",
]

#: Texture is present when gradient energy exceeds this multiple of the noise's
#: own (signal energy at least three times the noise energy). Common practice
#: for a detection threshold on an energy ratio, no source.
TEXTURE_RATIO_MIN = 4.0

#: Gradient energy of uniform quantisation noise of a 16-bit image (step 1/65535, variance
#: step^2 / 12) through the default sigma = 1 px derivative: the least noise any image has.
NOISE_ENERGY_FLOOR = noise_gradient_energy(1.0 / 65535.0 / math.sqrt(12.0), 1.0)

#: False-alarm rate of the test for a direction in noise (per region): a region of pure noise, white
#: or not, is called textured this often (measured in tests/measure/test_texture.py).
TEXTURE_ALPHA = 1e-3

#: ... and the direction found must carry at least this share of the gradient energy (coherence):
#: a significant but negligible direction (JPEG quantisation tables are not symmetric: blank panels
#: at q 95 show coherence 0.02 at p ~ 1e-4) is no lay. Chosen on synthetic cases, no source.
TEXTURE_MIN_COHERENCE = 0.05

#: A cell takes part in the local check when at least this share of a full cell is measured
#: (a sliver of less than half a cell is merged into a neighbour first: ``cells.merge_edge_slivers`` at the box's
#: edges, ``cells.merge_outline_slivers`` at an outline).
CELL_MIN_COVER = 0.25


@dataclass(frozen=True)
class RegionMeasurement:
    """What the engine measured for one region, in the part frame.

    ``cells`` tensor sums are in image axes; ``rotation_deg`` (the part
    frame's counter-clockwise skew) is subtracted from every angle derived
    from them. ``cells.hist`` is already in the part frame.
    """

    cells: CellSums
    region_mask_area: float
    noise_energy: float  # expected gx^2 + gy^2 per pixel from camera noise
    rotation_deg: float
    centre_px: tuple[float, float] | None  # image px, for circular / radial
    outline_px: tuple
    exclude_px: tuple
    pixel_size_mm: float | None = None
    masked_fraction: float = 0.0  # share of the region's pixels left out as clipped (glare)
    block_grid: BlockGrid | None = None
    test_cells: CellSums | None = None  # finer cells for the direction test of a small region
    spectral: SpectralLay | None = None  # the second, independent estimate (image axes)
    tensor_standard_error_deg: float | None = None  # of the summed tensor's angle, from the spectrum
    families: SpectralFamilies | None = None  # crossed lay: the families of marks in the spectrum (image axes)
    family_cells: np.ndarray | None = None  # (rows, cols, 2 or 3) their spectral energy per cell; share off both


def _cell_lays(m: RegionMeasurement) -> tuple[np.ndarray, np.ndarray]:
    lay, coh = tensor_lay(m.cells.jxx, m.cells.jxy, m.cells.jyy)
    return np.mod(lay - m.rotation_deg, 180.0), coh


def _expected_per_cell(region: Region, m: RegionMeasurement, centre_px) -> np.ndarray:
    shape = m.cells.area.shape
    if region.lay is LayPattern.DIRECTIONAL:
        return np.full(shape, region.lay_deg[0])
    if region.lay in (LayPattern.CIRCULAR, LayPattern.RADIAL) and centre_px is not None:
        c = m.cells.cell_centres()
        dx = c[..., 0] - centre_px[0]
        dy_up = -(c[..., 1] - centre_px[1])
        radial = np.degrees(np.arctan2(dy_up, dx)) - m.rotation_deg
        along = radial if region.lay is LayPattern.RADIAL else radial + 90.0
        return np.mod(along, 180.0)
    return np.full(shape, np.nan)


def _patches(deviating: np.ndarray, m: RegionMeasurement, expected: np.ndarray, grain=None) -> tuple[Patch, ...]:
    """Connected groups (8-neighbour) of deviating cells, largest first, with their length along their lay.

    ``grain`` is the mean tensor ``(jxx, jxy, jyy)`` per measured pixel of the cells that follow the
    region's lay (directional lay). It is taken off each patch's sum first, so that a thin scratch
    in cells of grain gets the scratch's own direction, not a mixture.
    """
    merged = _merged(m.cells)
    n, labels = cv2.connectedComponents(_spread(deviating, m.cells).astype(np.uint8), connectivity=8)
    boxes = m.cells.cell_boxes()
    area_of = m.cells.region_area if m.cells.region_area is not None else m.cells.area
    out = []
    for k in range(1, n):
        sel = labels == k
        b = boxes[sel]
        x0, y0 = int(b[:, 0].min()), int(b[:, 1].min())
        x1, y1 = int((b[:, 0] + b[:, 2]).max()), int((b[:, 1] + b[:, 3]).max())
        area = float(area_of[sel].sum())
        t = np.array([m.cells.jxx[sel].sum(), m.cells.jxy[sel].sum(), m.cells.jyy[sel].sum()])
        if grain is not None:
            t = t - float(m.cells.area[sel].sum()) * np.asarray(grain)
        lay_img, _ = tensor_lay(*t)
        patch_lay = (lay_img - m.rotation_deg) % 180.0
        exp_mean, _ = axial_mean(expected[sel & ~merged])
        mm = m.pixel_size_mm
        length = _extent_along(b, math.radians(lay_img))
        out.append(
            Patch(
                bbox_px=(x0, y0, x1 - x0, y1 - y0),
                area_fraction=area / m.region_mask_area,
                lay_deg=patch_lay,
                deviation_deg=wrap_deviation(patch_lay, exp_mean),
                area_px=int(round(area)),
                bbox_mm=None if mm is None else ((x1 - x0) * mm, (y1 - y0) * mm),
                area_mm2=None if mm is None else area * mm * mm,
                length_px=length,
                cells=int((sel & ~merged).sum()),
            )
        )
    out.sort(key=lambda p: -p.area_fraction)
    return tuple(out)


def _merged(cells: CellSums) -> np.ndarray:
    """Cells whose pixels were merged into a neighbour (slivers at an outline)."""
    return np.zeros(cells.area.shape, bool) if cells.merged_into is None else cells.merged_into >= 0


def _spread(values: np.ndarray, cells: CellSums) -> np.ndarray:
    """``values`` per cell, each merged sliver given the value of the cell that holds its pixels."""
    if cells.merged_into is None:
        return values
    out = values.copy()
    where = cells.merged_into >= 0
    out[where] = values.reshape(-1)[cells.merged_into[where]]
    return out


def _extent_along(boxes: np.ndarray, angle_rad: float) -> float:
    """Length of a set of cell boxes (x, y, w, h) measured along a direction (image angle, y up)."""
    ux, uy = math.cos(angle_rad), -math.sin(angle_rad)  # the direction in image px (rows down)
    xs = np.concatenate([boxes[:, 0], boxes[:, 0] + boxes[:, 2]]).astype(float)
    ys = np.concatenate([boxes[:, 1], boxes[:, 1] + boxes[:, 3]]).astype(float)
    proj = np.add.outer(xs * ux, ys * uy)
    return float(proj.max() - proj.min())


def _histogram(cells: CellSums) -> Histogram:
    h = cells.hist.reshape(-1, cells.bins).sum(axis=0)
    total = h.sum()
    weights = h / total if total > 0 else h
    return Histogram(tuple(float(v) for v in cells.bin_edges_deg()), tuple(float(v) for v in weights))


def _cells_of(region: Region, m: RegionMeasurement, noise_energy: float) -> Cells:
    cells = m.cells
    lay, coh = _cell_lays(m)
    region_area = cells.region_area if cells.region_area is not None else cells.area
    # against the nominal cell area: a sliver of a cell holds too few pixels for a trustworthy local lay
    covered = cells.area >= CELL_MIN_COVER * cells.cell_px**2
    energy = cells.jxx + cells.jyy
    textured = covered & (energy / np.maximum(cells.area, 1.0) >= TEXTURE_RATIO_MIN * noise_energy)
    clear = textured & (coh >= region.min_coherence)
    return Cells(lay, coh, energy, covered, textured, clear, (region_area > 0) & ~textured)


def _judge_directional(region: Region, m: RegionMeasurement, c: Cells, coherence: float, v: Verdict) -> None:
    expected = region.lay_deg[0]
    use = c.textured & (c.energy > 0)
    weights = c.energy * c.coherence  # the anisotropic energy l1 - l2 of each cell
    robust_w = weights
    if use.sum() >= 1:
        rl = robust_lay(c.lay[use], weights[use])
        v.extra.update(
            lay_plain_deg=round(v.lay, 4), outlier_cells=int(rl.outliers.sum()), cell_scatter_deg=round(rl.scale_deg, 3)
        )
        v.lay = rl.lay_deg
        robust_w = np.zeros(c.lay.shape)
        robust_w[use] = rl.weights
        v.deviating |= _content_across(region, m, c, use, robust_w > 0)
    # the scatter of the cells that follow the region's lay; deviating patches and outliers are reported apart
    keep = c.clear & ~v.deviating & (robust_w > 0)
    keep = keep if keep.sum() >= 3 else c.clear
    u_cells = cell_uncertainty(c.lay, np.where(robust_w > 0, robust_w, weights), keep)
    se = None if u_cells is None else u_cells / COVERAGE_K
    if m.spectral is not None and m.spectral.method == "lobe" and m.tensor_standard_error_deg is not None:
        # a broad spectrum (brushed, ground): marks correlated over many cells make the cells' scatter
        # understate the error; the spectral variance of the tensor angle does not (spectrum.py)
        se = m.tensor_standard_error_deg if se is None else max(se, m.tensor_standard_error_deg)
        v.extra["tensor_standard_uncertainty_deg"] = round(m.tensor_standard_error_deg, 5)
    _estimate(region, m, c, v, keep, weights, se)
    v.deviation = wrap_deviation(v.lay, expected)
    if abs(v.deviation) > region.tolerance_deg:
        v.fail(
            f"lay {fmt_angle(v.lay)} is {abs(v.deviation):.1f}° off {fmt_angle(expected)} (tolerance {region.tolerance_deg:g}°)"
        )
    if coherence < region.min_coherence:
        v.fail(f"no clear lay: coherence {coherence:.2f} is below {region.min_coherence:g}")


def _estimate(region: Region, m: RegionMeasurement, c: Cells, v: Verdict, keep, weights, se_tensor) -> None:
    """Combine the tensor lay with the spectral one; the uncertainty budget; review on disagreement or blur."""
    budget = Budget(statistical=se_tensor if se_tensor is not None else math.nan)
    if keep.sum() >= 1:  # robust against plain weighting of the cells that follow the lay
        plain_kept, _ = axial_mean(c.lay[keep], weights[keep])
        budget.weighting = abs(wrap_deviation(v.lay, plain_kept)) / math.sqrt(3.0)
    grid = m.block_grid
    if grid is not None:  # any 8 x 8 step pattern, even one too weak to count as a grid for the texture test
        s = m.cells
        aniso = math.hypot(s.jxx.sum() - s.jyy.sum(), 2.0 * s.jxy.sum()) / max(s.area.sum(), 1.0)
        pull = STEP_GRADIENT_ENERGY * abs(grid.step_col - grid.step_row) / max(aniso, 1e-300)
        budget.compression = math.degrees(0.5 * math.asin(min(pull, 1.0))) / math.sqrt(3.0)
    sp = m.spectral
    if sp is not None and np.isfinite(sp.lay_deg):
        lay_s = (sp.lay_deg - m.rotation_deg) % 180.0
        d = wrap_deviation(lay_s, v.lay)
        v.extra.update(
            spectral_lay_deg=round(lay_s, 4), spectral_method=sp.method, finest_period_px=round(sp.finest_period_px, 2)
        )
        if sp.method == "line" and sp.standard_error_deg:
            v.extra["spectral_standard_uncertainty_deg"] = round(sp.standard_error_deg, 5)
            if se_tensor is None:
                v.lay, budget.statistical = lay_s, sp.standard_error_deg
            else:
                v.lay, budget.statistical, budget.disagreement_ratio = combine(
                    v.lay, se_tensor, lay_s, sp.standard_error_deg
                )
            if budget.disagreement_ratio > COVERAGE_K:
                v.review.append(
                    f"the tensor and spectral estimates disagree by {abs(d):.2f}° ({budget.disagreement_ratio:.1f} times "
                    f"their combined standard uncertainty)"
                )
        else:
            # a lobe (broad spectrum) has no model standard error, and the spectrum also holds the cells
            # the robust lay leaves out (patches, scratches): the difference is reported, not judged
            v.extra["spectral_difference_deg"] = round(d, 4)
        # a single line (a grating) has no fine detail by nature: sharpness is judged on broad spectra
        if sp.method == "lobe" and 0 < region.sharpness_period_px < sp.finest_period_px:
            v.review.append(
                f"image not sharp enough: the finest detail above the noise has a period of "
                f"{sp.finest_period_px:.1f} px (needs {region.sharpness_period_px:g} px or finer); motion or focus blur"
            )
    v.extra["uncertainty_budget"] = budget.as_dict()
    v.uncertainty = None if not np.isfinite(budget.statistical) else budget.expanded()


#: A cell deviates when what it holds beyond the grain, off the expected lay, is at least this share
#: of its energy (chosen on synthetic scratches through brushed grain, no source).
RESIDUAL_SHARE = 0.3


def _content_across(region: Region, m: RegionMeasurement, c: Cells, cells: np.ndarray, inliers: np.ndarray):
    """Cells whose content beyond the grain runs off the expected lay (a scratch through grain).

    A cell crossed by a thin scratch holds grain and scratch; when the two balance, its own lay
    is unclear or still the grain's, yet what it holds beyond the grain (its tensor less the
    inlier cells' mean tensor per pixel) is the scratch. The residual's largest eigenvalue is
    that content: a cell of plain grain with less energy than the mean has a residual with no
    positive eigenvalue at all.
    """
    if not cells.any() or not inliers.any():
        return np.zeros(cells.shape, bool)
    s = m.cells
    per_px = [a[inliers].sum() / s.area[inliers].sum() for a in (s.jxx, s.jxy, s.jyy)]
    rxx, rxy, ryy = (a - s.area * g for a, g in zip((s.jxx, s.jxy, s.jyy), per_px))
    lay_img, _ = tensor_lay(rxx, rxy, ryy)
    largest = 0.5 * (rxx + ryy + np.sqrt((rxx - ryy) ** 2 + 4.0 * rxy**2))
    off = np.abs(wrap_deviation(np.mod(lay_img - m.rotation_deg, 180.0), region.lay_deg[0])) > region.tolerance_deg
    return cells & off & (largest >= RESIDUAL_SHARE * np.maximum(c.energy, 1e-300))


def direction_test(cells: CellSums, use: np.ndarray) -> tuple[float, int]:
    """p-value of "no preferred direction" from the cells' doubled-angle tensor vectors.

    Each cell gives ``v = (jxx - jyy, 2 jxy) / area``; without a preferred direction (noise of any
    spectrum that is the same in every direction) their mean is zero. Hotelling's T^2 tests that
    with the cells' own covariance, so no noise model is needed: ``(n - 2) / (2 (n - 1)) T^2``
    follows F(2, n - 2) (cells are independent when they are larger than the noise's correlation
    length, as for white noise, 1/f noise, whose gradients are white, and the sigma = 1 derivative).

    Returns
    -------
    p_value, n_cells : float, int
        p is 1.0 with fewer than 3 cells (no test possible).

    References
    ----------
    .. [1] Hotelling, H. (1931). The generalization of Student's ratio. Annals of Mathematical
       Statistics 2(3), 360-378. :doi:`10.1214/aoms/1177732979`
    """
    from scipy.special import fdtrc  # the F distribution's survival, what scipy.stats.f.sf calls (stats: 0.4 s)

    n = int(use.sum())
    if n < 3:
        return 1.0, n
    area = cells.area[use]
    v = np.stack([(cells.jxx[use] - cells.jyy[use]) / area, 2.0 * cells.jxy[use] / area], axis=1)
    mean = v.mean(axis=0)
    cov = np.cov(v, rowvar=False) + np.eye(2) * 1e-30
    try:
        t2 = n * float(mean @ np.linalg.solve(cov, mean))
    except np.linalg.LinAlgError:
        return (0.0 if np.any(mean != 0) else 1.0), n
    if not np.isfinite(t2):
        return 0.0, n
    return float(fdtrc(2, n - 2, (n - 2) / (2.0 * (n - 1)) * t2)), n


def _texture(region: Region, m: RegionMeasurement, c: Cells, ratio: float, coherence: float, extra: dict):
    """Why the region has no measurable texture, or None when it has."""
    grid = m.block_grid
    if grid is not None and grid.present:
        # a JPEG block grid: its steps are not grain. Gradient energy must stand out of what the
        # compression's own steps give (as white noise of half their variance), and no direction test
        # is trusted on the grid's horizontal and vertical steps alone
        floor = noise_gradient_energy(math.sqrt(grid.step_variance / 2.0), region.sigma_px)
        grid_ratio = ratio * m.noise_energy / max(floor, m.noise_energy, NOISE_ENERGY_FLOOR)
        extra.update(block_grid_contrast=round(grid.contrast, 2), texture_to_compression=round(grid_ratio, 2))
        if grid_ratio < TEXTURE_RATIO_MIN:
            return (
                f"no measurable texture: gradient energy is {grid_ratio:.1f}x what the JPEG compression's 8x8 blocks "
                f"give (needs at least {TEXTURE_RATIO_MIN:g}x); the block grid is not grain"
            )
    if region.lay is LayPattern.DIRECTIONAL:
        t = m.test_cells if m.test_cells is not None else m.cells
        p, n = direction_test(t, t.area >= CELL_MIN_COVER * t.cell_px**2)
        extra.update(direction_p=float(f"{p:.3g}"), direction_cells=n)
        if n >= 3:
            if p < TEXTURE_ALPHA and coherence >= TEXTURE_MIN_COHERENCE:
                return None
            return (
                f"no measurable texture: no lay stands out of the noise over {n} cells "
                f"(p = {p:.2g}, needs < {TEXTURE_ALPHA:g}; coherence {coherence:.2f}, needs "
                f"{TEXTURE_MIN_COHERENCE:g}); polished, blurred or blank surface"
            )
    if ratio < TEXTURE_RATIO_MIN:
        return (
            f"no measurable texture: gradient energy is {ratio:.1f}x the camera noise's "
            f"(needs at least {TEXTURE_RATIO_MIN:g}x); polished, blurred or blank surface"
        )
    return None


def _no_texture(region: Region, m: RegionMeasurement, base: dict, extra: dict, why: str, c: Cells):
    nan = np.full(m.cells.area.shape, np.nan)
    return RegionResult(
        **base,
        lay_deg=None,
        deviation_deg=None,
        uncertainty_deg=None,
        deviating_area_fraction=0.0,
        patches=(),
        verdict=RegionVerdict.NO_TEXTURE,
        reasons=(why,),
        cells=CellGrid(
            m.cells.origin_px, m.cells.cell_px, nan, _spread(c.coherence, m.cells), nan, np.zeros(nan.shape, bool)
        ),
        extra=extra,
    )


def _review_reasons(region: Region, m: RegionMeasurement, c: Cells, v: Verdict) -> None:
    """Conditions under which the measurement cannot be defended: a person must look."""
    if m.masked_fraction > region.max_masked_fraction:
        v.review.append(
            f"glare covers {100 * m.masked_fraction:.0f}% of the region (clipped pixels left out; "
            f"allowed {100 * region.max_masked_fraction:g}%)"
        )
    if region.lay in (LayPattern.DIRECTIONAL, LayPattern.CIRCULAR, LayPattern.RADIAL):
        region_area = m.cells.region_area if m.cells.region_area is not None else m.cells.area
        share = float(region_area[c.unmeasured].sum() / max(region_area.sum(), 1.0))
        v.extra["unmeasured_fraction"] = round(share, 4)
        if share > region.max_unmeasured_fraction:
            v.review.append(
                f"{100 * share:.0f}% of the region's cells could not be measured (no texture above the noise, "
                f"masked or too small; allowed {100 * region.max_unmeasured_fraction:g}%)"
            )


def judge_region(region: Region, m: RegionMeasurement) -> RegionResult:
    """Judge one region from its measurement.

    Parameters
    ----------
    region : Region
        The recipe's region: pattern, expected lay and thresholds.
    m : RegionMeasurement
        Cell sums and context from the engine.

    Returns
    -------
    RegionResult
    """
    sums = m.cells
    lay_img, coherence = tensor_lay(sums.jxx.sum(), sums.jxy.sum(), sums.jyy.sum())
    lay = (lay_img - m.rotation_deg) % 180.0
    # an image with no noise at all (synthetic, or clipped flat) still has quantisation noise:
    # floor the noise at that of a 16-bit image, so a flat surface is never called textured
    noise_energy = max(m.noise_energy, NOISE_ENERGY_FLOOR)
    ratio = (sums.jxx.sum() + sums.jyy.sum()) / max(sums.area.sum(), 1.0) / noise_energy
    histogram = _histogram(sums)
    c = _cells_of(region, m, noise_energy)
    base = dict(
        name=region.name,
        expected_lay_deg=region.expected_lay_deg,
        tolerance_deg=region.tolerance_deg,
        histogram=histogram,
        lay_pattern=region.lay.value,
        lay_symbol=region.lay_symbol,
        outline_px=m.outline_px,
        exclude_px=m.exclude_px,
        coherence=float(coherence),
    )
    extra: dict = {"texture_to_noise": round(float(ratio), 2), "masked_fraction": round(m.masked_fraction, 4)}
    why = _texture(region, m, c, ratio, coherence, extra)
    if why is not None:
        return _no_texture(region, m, base, extra, why, c)

    centre_px = m.centre_px
    if region.lay in (LayPattern.CIRCULAR, LayPattern.RADIAL) and centre_px is None:
        centre_px = fit_centre(m, c.clear, radial=region.lay is LayPattern.RADIAL)
        extra["centre_fitted"] = True
    expected = _expected_per_cell(region, m, centre_px)
    deviation_cells = wrap_deviation(c.lay, expected)
    v = Verdict(lay=lay, extra=extra, deviating=np.zeros(sums.area.shape, dtype=bool))
    patch_expected = None
    if region.lay in (LayPattern.DIRECTIONAL, LayPattern.CIRCULAR, LayPattern.RADIAL):
        # local check: cells with clear texture whose lay deviates beyond tolerance
        v.deviating = c.clear & (np.abs(deviation_cells) > region.tolerance_deg)
    if region.lay is LayPattern.DIRECTIONAL:
        _judge_directional(region, m, c, coherence, v)
    elif region.lay in (LayPattern.CIRCULAR, LayPattern.RADIAL):
        judge_centred(region, c, centre_px, deviation_cells, v)
    elif region.lay is LayPattern.CROSSED:
        patch_expected = judge_crossed(region, histogram, m, c, v)
    elif region.lay in (LayPattern.MULTIDIRECTIONAL, LayPattern.PARTICULATE):
        judge_nondirectional(region, c, sums, coherence, v)
    # LayPattern.ANY: texture is present, nothing more is judged
    _review_reasons(region, m, c, v)
    return _result(region, m, base, c, v, expected, patch_expected)


def _result(
    region: Region, m: RegionMeasurement, base: dict, c: Cells, v: Verdict, expected, patch_expected=None
) -> RegionResult:
    sums = m.cells
    grain = None
    follow = c.clear & ~v.deviating
    if region.lay is LayPattern.DIRECTIONAL and follow.any():
        grain = [float(a[follow].sum() / sums.area[follow].sum()) for a in (sums.jxx, sums.jxy, sums.jyy)]
    at = expected if patch_expected is None else patch_expected
    patches = _patches(v.deviating, m, at, grain) if v.deviating.any() else ()
    deviating = float(sum(p.area_fraction for p in patches))
    if deviating > region.max_deviating_fraction:
        biggest = patches[0]
        v.fail(
            f"{100 * deviating:.1f}% of the area deviates (allowed {100 * region.max_deviating_fraction:g}%): "
            f"{len(patches)} patch{'es' if len(patches) > 1 else ''}, largest {100 * biggest.area_fraction:.1f}% "
            f"with lay {fmt_angle(biggest.lay_deg)}, {biggest.length_px:.0f} px long"
        )
    if v.review:
        verdict = RegionVerdict.REVIEW
        reasons = v.review + [f"measured on the rest: {r}" for r in v.reasons]
    else:
        verdict = RegionVerdict.FAIL if v.failed else RegionVerdict.PASS
        reasons = list(v.reasons)
    if not v.failed and not v.review:
        if region.lay is LayPattern.DIRECTIONAL:
            reasons.append(
                f"lay {fmt_angle(v.lay)} within {region.tolerance_deg:g}° of {fmt_angle(region.lay_deg[0])} "
                f"({fmt_signed(v.deviation)})"
            )
        elif region.lay is LayPattern.ANY:
            reasons.append("texture present (direction not judged)")
        else:
            reasons.append(f"{region.lay.value} lay as required")
    return RegionResult(
        **base,
        lay_deg=v.lay,
        deviation_deg=v.deviation,
        uncertainty_deg=v.uncertainty,
        deviating_area_fraction=deviating,
        patches=patches,
        verdict=verdict,
        reasons=tuple(reasons),
        cells=CellGrid(  # a merged sliver shows the cell that holds its pixels
            origin_px=sums.origin_px,
            cell_px=sums.cell_px,
            lay_deg=_spread(np.where(c.textured, c.lay, np.nan), sums),
            coherence=_spread(np.where(c.covered, c.coherence, np.nan), sums),
            expected_deg=_spread(np.where(c.covered, expected, np.nan), sums),
            deviating=_spread(v.deviating, sums),
        ),
        extra=v.extra,
    )
