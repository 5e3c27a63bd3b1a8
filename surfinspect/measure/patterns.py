"""The rules of the lay patterns other than one direction: circular, radial, crossed, none."""

from __future__ import annotations

import math

import numpy as np

from ..recipe import LayPattern, Region
from ..results import Histogram
from .axial import axial_mean, rayleigh_test, wrap_deviation
from .cells import CellSums
from .derivatives import tensor_lay
from .uncertainty import cell_uncertainty
from .verdict import Cells, Verdict, fmt_angle

__all__ = [
    "RAYLEIGH_ALPHA",
    "CROSSED_MIN_PROMINENCE",
    "fit_centre",
    "crossed_peaks",
    "judge_centred",
    "judge_crossed",
    "judge_nondirectional",
]

#: Significance level below which a Rayleigh test says the cells share a direction.
RAYLEIGH_ALPHA = 0.01

#: A fitted histogram bump counts for a crossed lay when its height is at least this share of
#: the highest bump's. Chosen on synthetic textures, no source.
CROSSED_MIN_PROMINENCE = 0.25


def fit_centre(m, valid: np.ndarray, *, radial: bool) -> tuple[float, float] | None:
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


def crossed_peaks(hist: Histogram, expected: tuple[float, ...], tolerance: float):
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


def judge_centred(region: Region, c: Cells, centre_px, deviation_cells: np.ndarray, v: Verdict) -> None:
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
        v.uncertainty = cell_uncertainty(deviation_cells % 180.0, c.energy, c.clear)
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


def judge_crossed(region: Region, histogram: Histogram, v: Verdict) -> None:
    peaks = crossed_peaks(histogram, region.lay_deg, region.tolerance_deg)
    found, devs = [], []
    for e, (peak, _) in zip(region.lay_deg, peaks):
        if peak is None:
            v.fail(f"no lay found near {fmt_angle(e)} (crossed lay needs both directions)")
            found.append(None)
            devs.append(None)
            continue
        d = wrap_deviation(peak, e)
        found.append(round(peak, 3))
        devs.append(round(d, 3))
        if abs(d) > region.tolerance_deg:
            v.fail(f"lay {fmt_angle(peak)} is {abs(d):.1f}° off {fmt_angle(e)} (tolerance {region.tolerance_deg:g}°)")
    v.extra.update(crossed_lay_deg=found, crossed_deviation_deg=devs)
    if all(p is not None for p, _ in peaks):
        shares = [share for _, share in peaks]
        v.extra["balance"] = round(min(shares) / max(sum(shares), 1e-12), 4)  # weaker direction's share; 0.5 = even
    known = [d for d in devs if d is not None]
    v.deviation = max(known, key=abs) if known else None
    v.lay = found[0]


def judge_nondirectional(region: Region, c: Cells, cells: CellSums, coherence: float, v: Verdict) -> None:
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
                f"cells share a direction near {fmt_angle(rt.mean_deg)} (Rayleigh p = {rt.p_value:.2g} < {RAYLEIGH_ALPHA:g})"
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
                f"cells share a crossed pattern near {fmt_angle(a)} and {fmt_angle(a + 90.0)} "
                f"(Rayleigh p = {r4.p_value:.2g} < {RAYLEIGH_ALPHA:g} on the four-fold harmonic)"
            )
    if coherence > region.max_coherence:
        v.fail(
            f"dominant direction {fmt_angle(dominant)} present: coherence {coherence:.2f} exceeds "
            f"{region.max_coherence:g} for a {region.lay.value} lay"
        )
