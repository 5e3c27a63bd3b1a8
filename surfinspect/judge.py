"""Judging: measured cell sums + a recipe region -> a region verdict with reasons.

Pure functions. The rules (all thresholds come from the recipe region):

* **No texture**: the region's mean gradient energy is less than
  :data:`TEXTURE_RATIO_MIN` times what the image's own camera noise would give.
  Such a region gets no angle at all.
* **Directional** lay passes when ``|deviation| <= tolerance_deg``, coherence
  ``>= min_coherence`` and the deviating-patch share ``<= max_defect_fraction``.
* **Crossed** lay: each expected direction must be matched by a peak of the
  orientation histogram within tolerance.
* **Multidirectional / particulate**: coherence ``<= max_coherence`` and a
  Rayleigh test on the cell lays does not find a preferred direction.
* **Circular / radial**: each cell is compared with the direction expected at
  its own position; the mean deviation and the deviating share are judged.
* **Any**: texture must be present; its direction is not judged.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

from .orientation import CellSums, axial_mean, noise_gradient_energy, rayleigh_test, tensor_lay, wrap_deviation
from .recipe import LayPattern, Region
from .results import CellGrid, Histogram, Patch, RegionResult, RegionVerdict

__all__ = ["TEXTURE_RATIO_MIN", "RegionMeasurement", "judge_region"]

#: Texture is present when gradient energy exceeds this multiple of the noise's
#: own (signal energy at least three times the noise energy). Common practice
#: for a detection threshold on an energy ratio, no source.
TEXTURE_RATIO_MIN = 4.0

#: Gradient energy of uniform quantisation noise of a 16-bit image (step 1/65535, variance
#: step^2 / 12) through the default sigma = 1 px derivative: the least noise any image has.
NOISE_ENERGY_FLOOR = noise_gradient_energy(1.0 / 65535.0 / math.sqrt(12.0), 1.0)

#: A cell takes part in the local check when at least this share of it lies in the region.
CELL_MIN_COVER = 0.5

#: Significance level below which a Rayleigh test says the cells share a direction.
RAYLEIGH_ALPHA = 0.01

#: A fitted histogram bump counts for a crossed lay when its height is at least this share of
#: the highest bump's. Chosen on synthetic textures, no source.
CROSSED_MIN_PROMINENCE = 0.25

#: Coverage factor of the reported uncertainty (k = 2, about 95 %), as in the GUM.
COVERAGE_K = 2.0


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
    px_per_unit: float = 1.0  # image px per recipe unit
    pixel_size_mm: float | None = None


def _fmt(v: float) -> str:
    return f"{v:.1f}°"


def _signed(v: float) -> str:
    return f"{v:+.1f}°"


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


def fit_centre(m: RegionMeasurement, valid: np.ndarray, *, radial: bool) -> tuple[float, float] | None:
    """Least-squares centre of circular (or radial) lay from the cell lays.

    For circular lay every cell's gradient points at the centre, so the centre
    is the point nearest (in the least-squares sense) to all the lines through
    the cell centres along their gradient directions; for radial lay, along
    their lay directions. Weighted by cell energy times coherence.
    """
    lay_img, coh = tensor_lay(m.cells.jxx, m.cells.jxy, m.cells.jyy)
    line_deg = lay_img if radial else lay_img + 90.0  # direction of the line through the centre
    t = np.radians(line_deg[valid])
    # unit normals to the lines, in image px (y down)
    nx, ny = -np.sin(t) * 1.0, -np.cos(t)
    p = m.cells.cell_centres()[valid]
    w = ((m.cells.jxx + m.cells.jyy) * coh)[valid]
    if p.shape[0] < 3:
        return None
    a = np.array([[np.sum(w * nx * nx), np.sum(w * nx * ny)], [np.sum(w * nx * ny), np.sum(w * ny * ny)]])
    rhs = np.array([np.sum(w * nx * (nx * p[:, 0] + ny * p[:, 1])), np.sum(w * ny * (nx * p[:, 0] + ny * p[:, 1]))])
    if np.linalg.cond(a) > 1e8:
        return None
    cx, cy = np.linalg.solve(a, rhs)
    return float(cx), float(cy)


def _patches(
    deviating: np.ndarray, m: RegionMeasurement, lay: np.ndarray, expected: np.ndarray
) -> tuple[Patch, ...]:
    n, labels = cv2.connectedComponents(deviating.astype(np.uint8), connectivity=8)
    boxes = m.cells.cell_boxes()
    out = []
    for k in range(1, n):
        sel = labels == k
        b = boxes[sel]
        x0, y0 = int(b[:, 0].min()), int(b[:, 1].min())
        x1, y1 = int((b[:, 0] + b[:, 2]).max()), int((b[:, 1] + b[:, 3]).max())
        area = float(m.cells.area[sel].sum())
        lay_img, _ = tensor_lay(m.cells.jxx[sel].sum(), m.cells.jxy[sel].sum(), m.cells.jyy[sel].sum())
        patch_lay = (lay_img - m.rotation_deg) % 180.0
        exp_mean, _ = axial_mean(expected[sel])
        mm = m.pixel_size_mm
        out.append(
            Patch(
                bbox_px=(x0, y0, x1 - x0, y1 - y0),
                area_fraction=area / m.region_mask_area,
                lay_deg=patch_lay,
                deviation_deg=wrap_deviation(patch_lay, exp_mean),
                area_px=int(round(area)),
                bbox_mm=None if mm is None else ((x1 - x0) * mm, (y1 - y0) * mm),
                area_mm2=None if mm is None else area * mm * mm,
            )
        )
    out.sort(key=lambda p: -p.area_fraction)
    return tuple(out)


def _histogram(cells: CellSums) -> Histogram:
    h = cells.hist.reshape(-1, cells.bins).sum(axis=0)
    total = h.sum()
    weights = h / total if total > 0 else h
    return Histogram(tuple(float(v) for v in cells.bin_edges_deg()), tuple(float(v) for v in weights))


def _uncertainty(lays: np.ndarray, weights: np.ndarray) -> float | None:
    """Expanded uncertainty (k = 2) of the region lay from the scatter of cell lays.

    Standard error of an axial mean: the circular standard deviation of the
    doubled cell angles, halved, over the square root of the effective number
    of cells (Kish's n_eff for weighted means). Cells are treated as
    independent, which holds when the cell is larger than the grain's
    correlation length.
    """
    if lays.size < 3:
        return None
    _, r = axial_mean(lays, weights)
    r = min(max(r, 1e-12), 1.0)
    s_deg = 0.5 * math.degrees(math.sqrt(-2.0 * math.log(r)))
    n_eff = weights.sum() ** 2 / np.sum(weights**2)
    return COVERAGE_K * s_deg / math.sqrt(n_eff)


def _crossed_peaks(hist: Histogram, expected: tuple[float, ...], tolerance: float):
    """Locate one histogram peak near each expected direction of a crossed lay.

    The histogram (period 180°) is modelled as a floor plus one axial von
    Mises bump per expected direction, ``c + sum_i A_i exp(k_i (cos 2(t - m_i) - 1))``,
    fitted by least squares from starting values at the expected directions.
    Fitting all bumps at once keeps overlapping bumps from pulling each
    other's peak, which picking the highest bins does not.

    Returns
    -------
    list of (peak_deg or None, share)
        Per expected direction: the fitted peak, or None when its bump is
        missing (amplitude below :data:`CROSSED_MIN_PROMINENCE` of the largest,
        or it wandered beyond the search window); ``share`` is the bump's
        share of all the votes above the floor.

    References
    ----------
    .. [1] Mardia, K. V., Jupp, P. E. (2000). Directional Statistics, Wiley,
       section 3.5.4 (von Mises distribution) and 9.3.2 (axial data).
       :doi:`10.1002/9780470316979`
    """
    from scipy.optimize import least_squares

    w = np.asarray(hist.weights, dtype=np.float64)
    n = w.size
    width = 180.0 / n
    t = np.radians(2 * (np.arange(n) + 0.5) * width)
    k_count = len(expected)

    def model(p):
        out = np.full(n, p[0])
        for i in range(k_count):
            a, mu, kappa = p[1 + 3 * i : 4 + 3 * i]
            out += a * np.exp(kappa * (np.cos(t - mu) - 1.0))
        return out

    floor0 = float(w.min())
    p0 = [floor0]
    lo, hi = [0.0], [np.inf]
    for e in expected:
        idx = int(np.clip(e / width, 0, n - 1))
        p0 += [max(float(w[idx]) - floor0, 1e-6), math.radians(2 * e), 4.0]
        lo += [0.0, -np.inf, 0.2]
        hi += [np.inf, np.inf, 400.0]
    fit = least_squares(lambda p: model(p) - w, p0, bounds=(lo, hi))
    p = fit.x
    amps = np.array([p[1 + 3 * i] for i in range(k_count)])
    # votes above the floor in each bump: amplitude times the bump's integral over the circle
    areas = np.array([p[1 + 3 * i] * np.mean(np.exp(p[3 + 3 * i] * (np.cos(t) - 1.0))) for i in range(k_count)])
    total = areas.sum()
    found = []
    for i, e in enumerate(expected):
        peak = (math.degrees(p[2 + 3 * i]) / 2.0) % 180.0
        near = abs(wrap_deviation(peak, e)) <= max(tolerance, width) + 3 * width
        strong = amps.max() > 0 and amps[i] >= CROSSED_MIN_PROMINENCE * amps.max()
        if near and strong and total > 0:
            found.append((peak, float(areas[i] / total)))
        else:
            found.append((None, 0.0))
    return found


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
    cells = m.cells
    jxx, jxy, jyy = cells.jxx.sum(), cells.jxy.sum(), cells.jyy.sum()
    lay_img, coherence = tensor_lay(jxx, jxy, jyy)
    lay = (lay_img - m.rotation_deg) % 180.0
    energy = (jxx + jyy) / max(m.region_mask_area, 1.0)
    # an image with no noise at all (synthetic, or clipped flat) still has quantisation noise:
    # floor the noise at that of a 16-bit image, so a flat surface is never called textured
    noise_energy = max(m.noise_energy, NOISE_ENERGY_FLOOR)
    ratio = energy / noise_energy
    histogram = _histogram(cells)
    tol = region.tolerance_deg
    base = dict(
        name=region.name,
        expected_lay_deg=region.expected_lay_deg,
        tolerance_deg=tol,
        histogram=histogram,
        lay_pattern=region.lay.value,
        outline_px=m.outline_px,
        exclude_px=m.exclude_px,
    )
    extra: dict = {"texture_to_noise": round(float(ratio), 2)}

    cell_lay, cell_coh = _cell_lays(m)
    full = np.array(cells.cell_boxes()[..., 2] * cells.cell_boxes()[..., 3], dtype=np.float64)
    cell_energy = (cells.jxx + cells.jyy) / np.maximum(cells.area, 1.0)
    covered = cells.area >= CELL_MIN_COVER * full
    textured = covered & (cell_energy >= TEXTURE_RATIO_MIN * noise_energy)

    if ratio < TEXTURE_RATIO_MIN:
        nan = np.full(cells.area.shape, np.nan)
        return RegionResult(
            **base,
            lay_deg=None,
            deviation_deg=None,
            uncertainty_deg=None,
            coherence=float(coherence),
            defect_area_fraction=0.0,
            patches=(),
            verdict=RegionVerdict.NO_TEXTURE,
            reasons=(
                f"no measurable texture: gradient energy is {ratio:.1f}x the camera noise's "
                f"(needs at least {TEXTURE_RATIO_MIN:g}x); polished, blurred or blank surface",
            ),
            cells=CellGrid(cells.origin_px, cells.cell_px, nan, cell_coh, nan, np.zeros(nan.shape, bool)),
            extra=extra,
        )

    clear = textured & (cell_coh >= region.min_coherence)
    centre_px = m.centre_px
    if region.lay in (LayPattern.CIRCULAR, LayPattern.RADIAL) and centre_px is None:
        centre_px = fit_centre(m, clear, radial=region.lay is LayPattern.RADIAL)
        extra["centre_fitted"] = True
    expected = _expected_per_cell(region, m, centre_px)
    deviation_cells = wrap_deviation(cell_lay, expected)
    shown_lay = np.where(textured, cell_lay, np.nan)

    reasons: list[str] = []
    failed = False
    deviation = None
    uncertainty = None
    region_lay: float | None = lay
    deviating = np.zeros(cells.area.shape, dtype=bool)
    weights = (cells.jxx + cells.jyy)[clear]

    if region.lay in (LayPattern.DIRECTIONAL, LayPattern.CIRCULAR, LayPattern.RADIAL):
        if region.lay is LayPattern.DIRECTIONAL:
            deviation = wrap_deviation(lay, region.lay_deg[0])
            coherence_judged = coherence
            if abs(deviation) > tol:
                failed = True
                reasons.append(
                    f"lay {_fmt(lay)} is {abs(deviation):.1f}° off {_fmt(region.lay_deg[0])} (tolerance {tol:g}°)"
                )
        else:
            region_lay = None
            if centre_px is None:
                failed = True
                reasons.append("no centre could be fitted to the cell lays; give centre: [x, y] in the recipe")
                coherence_judged = coherence
            else:
                extra["centre_px"] = [round(centre_px[0], 2), round(centre_px[1], 2)]
                dev_clear = deviation_cells[clear]
                if dev_clear.size:
                    mean_dev, _ = axial_mean(dev_clear % 180.0, weights)
                    deviation = wrap_deviation(mean_dev, 0.0)
                    uncertainty = _uncertainty(dev_clear % 180.0, weights)
                    extra["rms_cell_deviation_deg"] = round(float(np.sqrt(np.mean(dev_clear**2))), 3)
                # the lay turns across the region, so the summed tensor's coherence is low by design:
                # judge the mean coherence of the cells instead
                coherence_judged = float(np.average(cell_coh[textured], weights=(cells.jxx + cells.jyy)[textured])) if textured.any() else 0.0
                extra["mean_cell_coherence"] = round(coherence_judged, 4)
                what = "circles" if region.lay is LayPattern.CIRCULAR else "radii"
                if deviation is not None and abs(deviation) > tol:
                    failed = True
                    reasons.append(f"lay is on average {abs(deviation):.1f}° off the {what} about the centre (tolerance {tol:g}°)")
        if coherence_judged < region.min_coherence:
            failed = True
            reasons.append(f"no clear lay: coherence {coherence_judged:.2f} is below {region.min_coherence:g}")
        # local check: cells with clear texture that deviate beyond tolerance
        deviating = clear & (np.abs(deviation_cells) > tol)
        if region.lay is LayPattern.DIRECTIONAL:
            # the scatter of the cells that follow the region's lay; deviating patches are reported apart
            keep = clear & ~deviating if (clear & ~deviating).sum() >= 3 else clear
            uncertainty = _uncertainty(cell_lay[keep], (cells.jxx + cells.jyy)[keep])
    elif region.lay is LayPattern.CROSSED:
        peaks = _crossed_peaks(histogram, region.lay_deg, tol)
        found_lays, devs, shares = [], [], []
        for e, (peak, share) in zip(region.lay_deg, peaks):
            if peak is None:
                failed = True
                reasons.append(f"no grain found near {_fmt(e)} (crossed lay needs both directions)")
                found_lays.append(None)
                devs.append(None)
            else:
                d = wrap_deviation(peak, e)
                found_lays.append(round(peak, 3))
                devs.append(round(d, 3))
                if abs(d) > tol:
                    failed = True
                    reasons.append(f"grain {_fmt(peak)} is {abs(d):.1f}° off {_fmt(e)} (tolerance {tol:g}°)")
            shares.append(share)
        extra.update(crossed_lay_deg=found_lays, crossed_deviation_deg=devs)
        if all(p is not None for p, _ in peaks):
            balance = min(shares) / max(sum(shares), 1e-12)
            extra["balance"] = round(balance, 4)  # share of the weaker direction, 0.5 = even
        known = [d for d in devs if d is not None]
        deviation = max(known, key=abs) if known else None
        region_lay = found_lays[0]
    elif region.lay in (LayPattern.MULTIDIRECTIONAL, LayPattern.PARTICULATE):
        region_lay = None
        if textured.sum() >= 2:
            rt = rayleigh_test(cell_lay[textured], axial=True)
            extra.update(
                rayleigh_resultant_length=round(rt.resultant_length, 4),
                rayleigh_statistic=round(rt.statistic, 3),
                rayleigh_p=round(rt.p_value, 5),
            )
            if rt.p_value < RAYLEIGH_ALPHA:
                failed = True
                reasons.append(
                    f"cells share a direction near {_fmt(rt.mean_deg)} (Rayleigh p = {rt.p_value:.2g} < {RAYLEIGH_ALPHA:g})"
                )
        if coherence > region.max_coherence:
            failed = True
            reasons.append(
                f"dominant direction {_fmt(lay)} present: coherence {coherence:.2f} exceeds {region.max_coherence:g} for a {region.lay.value} lay"
            )
    # LayPattern.ANY: texture is present, nothing more is judged

    patches = _patches(deviating, m, cell_lay, expected) if deviating.any() else ()
    defect = float(sum(p.area_fraction for p in patches))
    if defect > region.max_defect_fraction:
        failed = True
        biggest = patches[0]
        reasons.append(
            f"{100 * defect:.1f}% of the area deviates (allowed {100 * region.max_defect_fraction:g}%): "
            f"{len(patches)} patch{'es' if len(patches) > 1 else ''}, largest {100 * biggest.area_fraction:.1f}% with lay {_fmt(biggest.lay_deg)}"
        )
    if not failed:
        if region.lay is LayPattern.DIRECTIONAL:
            reasons.append(f"lay {_fmt(lay)} within {tol:g}° of {_fmt(region.lay_deg[0])} ({_signed(deviation)})")
        elif region.lay is LayPattern.ANY:
            reasons.append("texture present (direction not judged)")
        else:
            reasons.append(f"{region.lay.value} lay as required")

    return RegionResult(
        **base,
        lay_deg=region_lay,
        deviation_deg=deviation,
        uncertainty_deg=uncertainty,
        coherence=float(coherence),
        defect_area_fraction=defect,
        patches=patches,
        verdict=RegionVerdict.FAIL if failed else RegionVerdict.PASS,
        reasons=tuple(reasons),
        cells=CellGrid(
            origin_px=cells.origin_px,
            cell_px=cells.cell_px,
            lay_deg=shown_lay,
            coherence=np.where(covered, cell_coh, np.nan),
            expected_deg=np.where(covered, expected, np.nan),
            deviating=deviating,
        ),
        extra=extra,
    )
