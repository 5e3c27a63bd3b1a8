"""The figures of one region: the rose plot of its orientation histogram and the chart of its cells' deviations."""

from __future__ import annotations

import math
from typing import Mapping, Sequence

import numpy as np
from reportlab.lib import colors
from reportlab.pdfgen.canvas import Canvas

from ..formatting import format_angle
from ..measure.orientation import wrap_deviation
from ..pdfa.fonts import SANS, SANS_BOLD
from ..results import (
    RegionResult,
    RegionVerdict,
)
from .layout import _rl
from .regions import _CENTRED, _PartFigures
from .scene import PALETTE


def _draw_rose(
    c: Canvas,
    cx: float,
    cy: float,
    radius: float,
    region: RegionResult,
    expected: Sequence[float],
    measured: Sequence[float],
    petals: tuple[Sequence[float], Sequence[float]] | None = None,
    range_db: float | None = None,
) -> None:
    """Axial rose of the orientation histogram (or of ``petals``: bin edges and weights), mirrored to a full circle.

    Petal radius grows with the square root of the bin weight, so petal area
    is proportional to the weight (common practice for rose diagrams, no source); with
    ``range_db`` the radius is instead the weight in decibels over that range below the highest
    bin (a spectrum's ridges are narrow and its floor far below them).
    """
    if petals is None:
        petals = (region.histogram.bin_edges_deg, region.histogram.weights)
    edges = np.asarray(petals[0], dtype=float)
    weights = np.asarray(petals[1], dtype=float)
    c.saveState()
    c.setLineWidth(0.4)
    c.setStrokeColor(colors.Color(0.7, 0.7, 0.7))
    for k in (0.5, 1.0):
        c.circle(cx, cy, radius * k, stroke=1, fill=0)
    for a in range(0, 180, 45):
        ux, uy = math.cos(math.radians(a)), math.sin(math.radians(a))
        c.line(cx - ux * radius, cy - uy * radius, cx + ux * radius, cy + uy * radius)
    tol = region.tolerance_deg
    c.setFillColor(_rl(PALETTE["pass"], 0.35))
    for e in expected:
        for base in (e, e + 180.0):
            p = c.beginPath()
            p.moveTo(cx, cy)
            p.arcTo(cx - radius, cy - radius, cx + radius, cy + radius, startAng=base - tol, extent=2 * tol)
            p.close()
            c.drawPath(p, stroke=0, fill=1)
    wmax = float(weights.max()) if weights.size and np.isfinite(weights).all() else 0.0
    if wmax > 0:
        c.setFillColor(colors.Color(0.35, 0.35, 0.35))
        c.setStrokeColor(colors.Color(0.85, 0.85, 0.85))
        c.setLineWidth(0.2)
        path = c.beginPath()
        for a0, a1, w in zip(edges[:-1], edges[1:], weights):
            if w <= 0:
                continue
            if range_db:
                r = radius * max(0.0, 1.0 + 10.0 * math.log10(w / wmax) / range_db)
            else:
                r = radius * math.sqrt(w / wmax)
            for base in (0.0, 180.0):
                path.moveTo(cx, cy)
                path.arcTo(cx - r, cy - r, cx + r, cy + r, startAng=a0 + base, extent=a1 - a0)
                path.close()
        c.drawPath(path, stroke=1, fill=1)
    # the band's edges as lines too: a narrow band vanishes under the petals and in grey print
    c.setStrokeColor(_rl(PALETTE["pass"]))
    c.setLineWidth(0.6)
    for e in expected:
        for edge in (e - tol, e + tol):
            ux, uy = math.cos(math.radians(edge)), math.sin(math.radians(edge))
            c.line(cx - ux * radius, cy - uy * radius, cx + ux * radius, cy + uy * radius)
    c.setStrokeColor(colors.black)
    c.setLineWidth(0.9)
    c.setDash([3, 2])
    for e in expected:
        ux, uy = math.cos(math.radians(e)), math.sin(math.radians(e))
        c.line(cx - ux * radius * 1.08, cy - uy * radius * 1.08, cx + ux * radius * 1.08, cy + uy * radius * 1.08)
    c.setDash([])
    for m in measured:
        ux, uy = math.cos(math.radians(m)), math.sin(math.radians(m))
        for col, w in ((colors.white, 2.6), (_rl(PALETTE["measured"]), 1.4)):
            c.setStrokeColor(col)
            c.setLineWidth(w)
            c.line(cx - ux * radius, cy - uy * radius, cx + ux * radius, cy + uy * radius)
    c.setFillColor(colors.black)
    c.setFont(SANS, 5.5)
    for a in (0, 45, 90, 135):
        ux, uy = math.cos(math.radians(a)), math.sin(math.radians(a))
        c.drawCentredString(cx + ux * (radius + 7), cy + uy * (radius + 7) - 2, f"{a}°")
    c.restoreState()


def _cell_deviations(d: Mapping) -> np.ndarray:
    """Deviation of each measured cell from its own expected lay, from the JSON's cell grid."""
    cells = d.get("cells")
    if not cells:
        return np.zeros(0)
    lay = np.array([[np.nan if v is None else v for v in row] for row in cells["lay_deg"]], dtype=float)
    exp = np.array([[np.nan if v is None else v for v in row] for row in cells["expected_deg"]], dtype=float)
    if lay.size == 0 or lay.shape != exp.shape:
        return np.zeros(0)
    known = np.isfinite(lay) & np.isfinite(exp)
    return np.asarray(wrap_deviation(lay[known], exp[known]), dtype=float).reshape(-1)


def spectrum_petals(d: Mapping) -> tuple[list, list] | None:
    """Bin edges and weights of a crossed region's angular spectrum, from the JSON (None without one)."""
    spec = (d.get("extra") or {}).get("angular_spectrum")
    if not isinstance(spec, Mapping):
        return None
    edges, weights = spec.get("bin_edges_deg"), spec.get("weights")
    if not isinstance(edges, list) or not isinstance(weights, list) or len(edges) != len(weights) + 1:
        return None
    return edges, weights


#: The depth of a spectrum's rose: petals reach from this far below the highest bin (dB) to the rim.
SPECTRUM_RANGE_DB = 30.0


def spectrum_caption(d: Mapping) -> tuple[str, str]:
    """The two lines under a crossed region's spectrum rose: its directions with U (k = 2), and its scale and balance."""
    extra = d.get("extra") or {}
    found = extra.get("crossed_lay_deg") or []
    unc = extra.get("crossed_uncertainty_deg") or [None] * len(found)
    parts = []
    for v, u in zip(found, unc):
        if isinstance(v, (int, float)):
            parts.append(format_angle(v, axial=True) + (f" ± {format_angle(u)}" if isinstance(u, (int, float)) else ""))
    balance = extra.get("balance")
    note = f"; balance {balance:.2f}" if isinstance(balance, (int, float)) else ""
    return (
        "directions " + (" / ".join(parts) if parts else "not found") + " (k = 2)",
        f"power per direction, {SPECTRUM_RANGE_DB:.0f} dB scale{note}",
    )


def _figure_list(fig: _PartFigures) -> list[tuple[str, RegionResult, dict]]:
    """One rose per region; a crossed region's angular spectrum beside it; a region whose expected lay
    varies also gets its cells' deviations."""
    out = []
    for region, d in zip(fig.part.regions, fig.regions):
        out.append(("rose", region, d))
        if region.lay_pattern == "crossed" and spectrum_petals(d) is not None:
            out.append(("spectrum", region, d))
        if (
            region.lay_pattern in _CENTRED
            and region.verdict is not RegionVerdict.NO_TEXTURE
            and _cell_deviations(d).size
        ):
            out.append(("deviations", region, d))
    return out


def _draw_deviation_bars(c: Canvas, x: float, y_top: float, w: float, region: RegionResult, d: Mapping) -> None:
    """Bar chart of the cells' deviations from their own expected lay, -90..+90 in 5° bins, tolerance shaded."""
    dev = _cell_deviations(d)
    tol = float(d["tolerance_deg"])
    left, right = x + 14, x + w - 10
    bottom, top = y_top - 104, y_top - 22
    edges = np.linspace(-90.0, 90.0, 37)
    counts, _ = np.histogram(np.clip(dev, -90.0, 90.0), bins=edges)

    def px(v: float) -> float:
        return left + (right - left) * (v + 90.0) / 180.0

    c.saveState()
    c.setFillColor(colors.black)
    c.setFont(SANS_BOLD, 7.5)
    c.drawCentredString(x + w / 2, y_top - 9, f"{region.name}: cell deviation")
    c.setFillColor(_rl(PALETTE["pass"], 0.35))
    c.rect(px(-tol), bottom, px(tol) - px(-tol), top - bottom, stroke=0, fill=1)
    c.setStrokeColor(_rl(PALETTE["pass"]))
    c.setLineWidth(0.6)
    for v in (-tol, tol):
        c.line(px(v), bottom, px(v), top)
    peak = max(1, int(counts.max()))
    c.setFillColor(colors.Color(0.35, 0.35, 0.35))
    c.setStrokeColor(colors.white)
    c.setLineWidth(0.2)
    for a0, a1, k in zip(edges[:-1], edges[1:], counts):
        if k:
            c.rect(px(a0), bottom, px(a1) - px(a0), (top - bottom) * k / peak, stroke=1, fill=1)
    c.setStrokeColor(colors.black)
    c.setLineWidth(0.5)
    c.line(left, bottom, right, bottom)
    c.setFillColor(colors.black)
    c.setFont(SANS, 5.5)
    for v in (-90, -45, 0, 45, 90):
        c.line(px(v), bottom, px(v), bottom - 2)
        c.drawCentredString(px(v), bottom - 8, f"{v:+d}°" if v else "0°")
    c.drawString(left, top + 2, f"highest bar {peak} cells")
    within = int((np.abs(dev) <= tol).sum())
    c.setFont(SANS, 6.5)
    c.drawCentredString(x + w / 2, y_top - 128, f"{within} of {dev.size} cells within ± {format_angle(tol)}")
    c.drawCentredString(x + w / 2, y_top - 136, "deviation = cell lay - expected there")
    c.restoreState()
