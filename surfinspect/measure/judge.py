"""Judging: measured cell sums + a recipe region -> a region verdict with reasons.

Pure functions. The rules (all thresholds come from the recipe region):

* **No texture**: the region's mean gradient energy is less than
  :data:`TEXTURE_RATIO_MIN` times what the image's own camera noise would give.
  Such a region gets no angle at all.
* **Directional** lay passes when ``|deviation| <= tolerance_deg``, coherence
  ``>= min_coherence`` and the deviating-patch share ``<= max_deviating_fraction``.
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
from dataclasses import dataclass, field

import cv2
import numpy as np

from ..recipe import LayPattern, Region
from ..results import CellGrid, Histogram, Patch, RegionResult, RegionVerdict
from .orientation import CellSums, axial_mean, noise_gradient_energy, rayleigh_test, tensor_lay, wrap_deviation

__all__ = ["TEXTURE_RATIO_MIN", "RegionMeasurement", "judge_region"]

#: Texture is present when gradient energy exceeds this multiple of the noise's
#: own (signal energy at least three times the noise energy). Common practice
#: for a detection threshold on an energy ratio, no source.
TEXTURE_RATIO_MIN = 4.0

#: Gradient energy of uniform quantisation noise of a 16-bit image (step 1/65535, variance
#: step^2 / 12) through the default sigma = 1 px derivative: the least noise any image has.
NOISE_ENERGY_FLOOR = noise_gradient_energy(1.0 / 65535.0 / math.sqrt(12.0), 1.0)

#: A cell takes part in the local check when the region covers at least this share of a full cell.
CELL_MIN_COVER = 0.5

#: Significance level below which a Rayleigh test says the cells share a direction.
RAYLEIGH_ALPHA = 0.01

#: A fitted histogram bump counts for a crossed lay when its height is at least this share of
#: the highest bump's. Chosen on synthetic textures, no source.
CROSSED_MIN_PROMINENCE = 0.25

#: Blocks needed before a coarser block size enters the uncertainty estimate.
MIN_UNCERTAINTY_BLOCKS = 6

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


def _patches(deviating: np.ndarray, m: RegionMeasurement, expected: np.ndarray) -> tuple[Patch, ...]:
    """Connected groups (8-neighbour) of deviating cells, largest first."""
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


def _standard_error(lays: np.ndarray, weights: np.ndarray) -> float:
    """Standard error (degrees) of the weighted axial mean of ``lays``.

    The circular standard deviation of the doubled angles, halved, over the
    square root of Kish's effective number of samples.
    """
    _, r = axial_mean(lays, weights)
    r = min(max(r, 1e-12), 1.0)
    s_deg = 0.5 * math.degrees(math.sqrt(-2.0 * math.log(r)))
    n_eff = weights.sum() ** 2 / np.sum(weights**2)
    return s_deg / math.sqrt(n_eff)


def _uncertainty(lays: np.ndarray, weights: np.ndarray, keep: np.ndarray) -> float | None:
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
    errors = [_standard_error(lays[keep], weights[keep])]
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
        errors.append(_standard_error(block_lays, bw[used]))
    return COVERAGE_K * max(errors)


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


@dataclass
class _Verdict:
    """What the pattern rules decide; collected, then turned into a RegionResult."""

    lay: float | None
    deviation: float | None = None
    uncertainty: float | None = None
    failed: bool = False
    reasons: list = field(default_factory=list)
    extra: dict = field(default_factory=dict)
    deviating: np.ndarray | None = None

    def fail(self, reason: str) -> None:
        self.failed = True
        self.reasons.append(reason)


@dataclass(frozen=True)
class _Cells:
    """The region's cells: lays in the part frame and which cells take part in the checks."""

    lay: np.ndarray
    coherence: np.ndarray
    energy: np.ndarray  # jxx + jyy per cell (weights)
    covered: np.ndarray  # at least CELL_MIN_COVER of the cell in the region
    textured: np.ndarray  # covered, and gradient energy above the texture threshold
    clear: np.ndarray  # textured, and coherence at least min_coherence


def _cells_of(region: Region, m: RegionMeasurement, noise_energy: float) -> _Cells:
    cells = m.cells
    lay, coh = _cell_lays(m)
    # against the nominal cell area: a sliver of a cell at the region's edge holds too few pixels
    # for a trustworthy local lay
    covered = cells.area >= CELL_MIN_COVER * cells.cell_px**2
    energy = cells.jxx + cells.jyy
    textured = covered & (energy / np.maximum(cells.area, 1.0) >= TEXTURE_RATIO_MIN * noise_energy)
    return _Cells(lay, coh, energy, covered, textured, textured & (coh >= region.min_coherence))


def _judge_directional(region: Region, c: _Cells, coherence: float, v: _Verdict) -> None:
    expected = region.lay_deg[0]
    v.deviation = wrap_deviation(v.lay, expected)
    if abs(v.deviation) > region.tolerance_deg:
        v.fail(
            f"lay {_fmt(v.lay)} is {abs(v.deviation):.1f}° off {_fmt(expected)} (tolerance {region.tolerance_deg:g}°)"
        )
    if coherence < region.min_coherence:
        v.fail(f"no clear lay: coherence {coherence:.2f} is below {region.min_coherence:g}")
    # the scatter of the cells that follow the region's lay; deviating patches are reported apart
    keep = c.clear & ~v.deviating
    keep = keep if keep.sum() >= 3 else c.clear
    v.uncertainty = _uncertainty(c.lay, c.energy, keep)


def _judge_centred(region: Region, c: _Cells, centre_px, deviation_cells: np.ndarray, v: _Verdict) -> None:
    """Circular or radial lay: the cells' deviations from the direction expected where they are."""
    v.lay = None  # the lay turns across the region: there is no one angle to report
    if centre_px is None:
        v.fail("no centre could be fitted to the cell lays; give centre: [x, y] in the recipe")
        return
    v.extra["centre_px"] = [round(centre_px[0], 2), round(centre_px[1], 2)]
    dev = deviation_cells[c.clear] % 180.0
    if dev.size:
        mean_dev, _ = axial_mean(dev, c.energy[c.clear])
        v.deviation = wrap_deviation(mean_dev, 0.0)
        v.uncertainty = _uncertainty(deviation_cells % 180.0, c.energy, c.clear)
        v.extra["rms_cell_deviation_deg"] = round(float(np.sqrt(np.mean(deviation_cells[c.clear] ** 2))), 3)
        what = "circles" if region.lay is LayPattern.CIRCULAR else "radii"
        if abs(v.deviation) > region.tolerance_deg:
            v.fail(
                f"lay is on average {abs(v.deviation):.1f}° off the {what} about the centre (tolerance {region.tolerance_deg:g}°)"
            )
    # the summed tensor's coherence is low by design here: judge the cells' mean coherence
    coherence = float(np.average(c.coherence[c.textured], weights=c.energy[c.textured])) if c.textured.any() else 0.0
    v.extra["mean_cell_coherence"] = round(coherence, 4)
    if coherence < region.min_coherence:
        v.fail(f"no clear lay: coherence {coherence:.2f} is below {region.min_coherence:g}")


def _judge_crossed(region: Region, histogram: Histogram, v: _Verdict) -> None:
    peaks = _crossed_peaks(histogram, region.lay_deg, region.tolerance_deg)
    found, devs = [], []
    for e, (peak, _) in zip(region.lay_deg, peaks):
        if peak is None:
            v.fail(f"no lay found near {_fmt(e)} (crossed lay needs both directions)")
            found.append(None)
            devs.append(None)
            continue
        d = wrap_deviation(peak, e)
        found.append(round(peak, 3))
        devs.append(round(d, 3))
        if abs(d) > region.tolerance_deg:
            v.fail(f"lay {_fmt(peak)} is {abs(d):.1f}° off {_fmt(e)} (tolerance {region.tolerance_deg:g}°)")
    v.extra.update(crossed_lay_deg=found, crossed_deviation_deg=devs)
    if all(p is not None for p, _ in peaks):
        shares = [share for _, share in peaks]
        v.extra["balance"] = round(min(shares) / max(sum(shares), 1e-12), 4)  # weaker direction's share; 0.5 = even
    known = [d for d in devs if d is not None]
    v.deviation = max(known, key=abs) if known else None
    v.lay = found[0]


def _judge_nondirectional(region: Region, c: _Cells, cells: CellSums, coherence: float, v: _Verdict) -> None:
    """Multidirectional or particulate lay: no direction may dominate.

    Two Rayleigh tests over the cells: on their lays (a shared direction), and
    on the phase of the fourth angular harmonic of their orientation histograms
    (a shared pair of directions at right angles: a crossed lay, whose summed
    tensor and doubled angles cancel and would pass the first test).
    """
    dominant = v.lay
    v.lay = None
    if c.textured.sum() >= 2:
        rt = rayleigh_test(c.lay[c.textured], axial=True)
        v.extra.update(
            rayleigh_resultant_length=round(rt.resultant_length, 4),
            rayleigh_statistic=round(rt.statistic, 3),
            rayleigh_p=round(rt.p_value, 5),
        )
        if rt.p_value < RAYLEIGH_ALPHA:
            v.fail(
                f"cells share a direction near {_fmt(rt.mean_deg)} (Rayleigh p = {rt.p_value:.2g} < {RAYLEIGH_ALPHA:g})"
            )
        centres = np.radians((np.arange(cells.bins) + 0.5) * 180.0 / cells.bins)
        fourfold = np.tensordot(cells.hist[c.textured], np.exp(4j * centres), axes=([1], [0]))
        r4 = rayleigh_test(np.degrees(np.angle(fourfold)))
        v.extra.update(
            rayleigh_crossed_resultant_length=round(r4.resultant_length, 4), rayleigh_crossed_p=round(r4.p_value, 5)
        )
        if r4.p_value < RAYLEIGH_ALPHA:
            a = (r4.mean_deg / 4.0) % 90.0
            v.fail(
                f"cells share a crossed pattern near {_fmt(a)} and {_fmt(a + 90.0)} "
                f"(Rayleigh p = {r4.p_value:.2g} < {RAYLEIGH_ALPHA:g} on the four-fold harmonic)"
            )
    if coherence > region.max_coherence:
        v.fail(
            f"dominant direction {_fmt(dominant)} present: coherence {coherence:.2f} exceeds "
            f"{region.max_coherence:g} for a {region.lay.value} lay"
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
    ratio = (sums.jxx.sum() + sums.jyy.sum()) / max(m.region_mask_area, 1.0) / noise_energy
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
    extra: dict = {"texture_to_noise": round(float(ratio), 2)}

    if ratio < TEXTURE_RATIO_MIN:
        nan = np.full(sums.area.shape, np.nan)
        return RegionResult(
            **base,
            lay_deg=None,
            deviation_deg=None,
            uncertainty_deg=None,
            deviating_area_fraction=0.0,
            patches=(),
            verdict=RegionVerdict.NO_TEXTURE,
            reasons=(
                f"no measurable texture: gradient energy is {ratio:.1f}x the camera noise's "
                f"(needs at least {TEXTURE_RATIO_MIN:g}x); polished, blurred or blank surface",
            ),
            cells=CellGrid(sums.origin_px, sums.cell_px, nan, c.coherence, nan, np.zeros(nan.shape, bool)),
            extra=extra,
        )

    centre_px = m.centre_px
    if region.lay in (LayPattern.CIRCULAR, LayPattern.RADIAL) and centre_px is None:
        centre_px = fit_centre(m, c.clear, radial=region.lay is LayPattern.RADIAL)
        extra["centre_fitted"] = True
    expected = _expected_per_cell(region, m, centre_px)
    deviation_cells = wrap_deviation(c.lay, expected)
    v = _Verdict(lay=lay, extra=extra, deviating=np.zeros(sums.area.shape, dtype=bool))
    if region.lay in (LayPattern.DIRECTIONAL, LayPattern.CIRCULAR, LayPattern.RADIAL):
        # local check: cells with clear texture whose lay deviates beyond tolerance
        v.deviating = c.clear & (np.abs(deviation_cells) > region.tolerance_deg)
    if region.lay is LayPattern.DIRECTIONAL:
        _judge_directional(region, c, coherence, v)
    elif region.lay in (LayPattern.CIRCULAR, LayPattern.RADIAL):
        _judge_centred(region, c, centre_px, deviation_cells, v)
    elif region.lay is LayPattern.CROSSED:
        _judge_crossed(region, histogram, v)
    elif region.lay in (LayPattern.MULTIDIRECTIONAL, LayPattern.PARTICULATE):
        _judge_nondirectional(region, c, sums, coherence, v)
    # LayPattern.ANY: texture is present, nothing more is judged

    patches = _patches(v.deviating, m, expected) if v.deviating.any() else ()
    deviating = float(sum(p.area_fraction for p in patches))
    if deviating > region.max_deviating_fraction:
        biggest = patches[0]
        v.fail(
            f"{100 * deviating:.1f}% of the area deviates (allowed {100 * region.max_deviating_fraction:g}%): "
            f"{len(patches)} patch{'es' if len(patches) > 1 else ''}, largest {100 * biggest.area_fraction:.1f}% "
            f"with lay {_fmt(biggest.lay_deg)}"
        )
    if not v.failed:
        if region.lay is LayPattern.DIRECTIONAL:
            v.reasons.append(
                f"lay {_fmt(lay)} within {region.tolerance_deg:g}° of {_fmt(region.lay_deg[0])} ({_signed(v.deviation)})"
            )
        elif region.lay is LayPattern.ANY:
            v.reasons.append("texture present (direction not judged)")
        else:
            v.reasons.append(f"{region.lay.value} lay as required")

    return RegionResult(
        **base,
        lay_deg=v.lay,
        deviation_deg=v.deviation,
        uncertainty_deg=v.uncertainty,
        deviating_area_fraction=deviating,
        patches=patches,
        verdict=RegionVerdict.FAIL if v.failed else RegionVerdict.PASS,
        reasons=tuple(v.reasons),
        cells=CellGrid(
            origin_px=sums.origin_px,
            cell_px=sums.cell_px,
            lay_deg=np.where(c.textured, c.lay, np.nan),
            coherence=np.where(c.covered, c.coherence, np.nan),
            expected_deg=np.where(c.covered, expected, np.nan),
            deviating=v.deviating,
        ),
        extra=v.extra,
    )
