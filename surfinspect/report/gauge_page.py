"""The one-page PDF of a gauge R&R study: ANOVA and variance tables, verdict, range and means charts."""

from __future__ import annotations

import io
import math
import os
from datetime import datetime, timezone
from pathlib import Path
from typing import Sequence

from .. import fsutil
from .._version import __version__
from ..pdfa.document import DocumentInfo, archival_canvas, finish_archival
from ..pdfa.fonts import SANS, SANS_BOLD, SANS_OBLIQUE
from ..qualify.gauge import D4_BY_SUBGROUP, GaugeStudy, GaugeVerdict
from ..qualify.gauge_forms import ANOVA_HEADER, COMPONENT_HEADER, anova_text_rows, component_text_rows
from ..results import CAUTION

__all__ = ["write_gauge_pdf"]

_INK = (0.12, 0.14, 0.18)
_GRID = (0.78, 0.80, 0.84)
_VERDICT_TINT = {
    GaugeVerdict.ACCEPTABLE: (0.16, 0.45, 0.33),
    GaugeVerdict.CONDITIONAL: (0.62, 0.44, 0.05),
    GaugeVerdict.NOT_ACCEPTABLE: (0.62, 0.13, 0.15),
}
#: Line styles told apart without colour (printed in black and white): dash pattern and marker.
_SERIES_DASHES = ((), (4, 2), (1, 2), (6, 2, 1, 2), (8, 3))
_SERIES_MARKERS = ("circle", "square", "triangle", "diamond", "cross")
_SERIES_GREYS = (0.10, 0.35, 0.55, 0.25, 0.45)


def _draw_table(
    c, x: float, y: float, header: Sequence[str], rows: Sequence[Sequence[str]], widths: Sequence[float]
) -> float:
    """Draw a ruled text table with its top-left at (x, y) in points; return the y below it."""
    line_h = 12.0
    c.setFont(SANS_BOLD, 8)
    cx = x
    for text, w in zip(header, widths):
        if cx == x:
            c.drawString(cx + 2, y - 9, text)
        else:
            c.drawRightString(cx + w - 2, y - 9, text)
        cx += w
    c.setLineWidth(0.6)
    c.setStrokeColorRGB(*_INK)
    c.line(x, y - line_h, x + sum(widths), y - line_h)
    c.setFont(SANS, 8)
    yy = y - line_h
    for row in rows:
        cx = x
        for k, (text, w) in enumerate(zip(row, widths)):
            if k == 0:
                c.drawString(cx + 2, yy - 9, text)
            else:
                c.drawRightString(cx + w - 2, yy - 9, text)
            cx += w
        yy -= line_h
    c.setLineWidth(0.3)
    c.line(x, yy, x + sum(widths), yy)
    return yy


def _draw_marker(c, kind: str, x: float, y: float, size: float = 2.2) -> None:
    p = c.beginPath()
    if kind == "circle":
        c.circle(x, y, size, stroke=1, fill=1)
        return
    if kind == "square":
        c.rect(x - size, y - size, 2 * size, 2 * size, stroke=1, fill=1)
        return
    if kind == "triangle":
        p.moveTo(x, y + size * 1.2)
        p.lineTo(x - size, y - size * 0.8)
        p.lineTo(x + size, y - size * 0.8)
    elif kind == "diamond":
        p.moveTo(x, y + size * 1.3)
        p.lineTo(x + size, y)
        p.lineTo(x, y - size * 1.3)
        p.lineTo(x - size, y)
    else:
        c.line(x - size, y - size, x + size, y + size)
        c.line(x - size, y + size, x + size, y - size)
        return
    p.close()
    c.drawPath(p, stroke=1, fill=1)


def _nice_ticks(lo: float, hi: float, count: int = 5) -> list[float]:
    if hi <= lo:
        hi = lo + 1.0
    raw = (hi - lo) / count
    mag = 10 ** math.floor(math.log10(raw))
    step = min((s * mag for s in (1, 2, 2.5, 5, 10) if s * mag >= raw), default=10 * mag)
    first = math.ceil(lo / step) * step
    return [first + k * step for k in range(int((hi - first) / step + 1e-9) + 1)]


def _draw_axes(c, box, lo: float, hi: float, title: str, ylabel: str) -> tuple[float, float]:
    """Frame, horizontal grid and y tick labels; returns the padded (lo, hi) used."""
    x0, y0, w, h = box
    pad = 0.08 * (hi - lo) if hi > lo else max(abs(hi), 1.0) * 0.1
    lo, hi = lo - pad, hi + pad
    c.setFont(SANS_BOLD, 8.5)
    c.setFillColorRGB(*_INK)
    c.drawString(x0, y0 + h + 5, title)
    c.setLineWidth(0.3)
    c.setFont(SANS, 6.5)
    for t in _nice_ticks(lo, hi):
        ty = y0 + (t - lo) / (hi - lo) * h
        c.setStrokeColorRGB(*_GRID)
        c.line(x0, ty, x0 + w, ty)
        c.drawRightString(x0 - 2, ty - 2, f"{t:g}")
    c.setStrokeColorRGB(*_INK)
    c.setLineWidth(0.6)
    c.rect(x0, y0, w, h, stroke=1, fill=0)
    c.saveState()
    c.translate(x0 - 27, y0 + h / 2)
    c.rotate(90)
    c.drawCentredString(0, 0, ylabel)
    c.restoreState()
    return lo, hi


def _draw_range_chart(c, study: GaugeStudy, box) -> None:
    """Range of the trials of each part, one panel per appraiser, with mean range and UCL."""
    x0, y0, w, h = box
    ranges = study.values.max(axis=2) - study.values.min(axis=2)  # (parts, appraisers)
    r_bar = float(ranges.mean())
    d4 = D4_BY_SUBGROUP.get(study.n_trials)
    ucl = d4 * r_bar if d4 is not None else None
    top = max(float(ranges.max()), ucl or 0.0, r_bar)
    lo, hi = _draw_axes(c, box, 0.0, top, "Range of trials by appraiser", "range")
    n_parts, n_app = ranges.shape
    panel_w = w / n_app
    scale = lambda v: y0 + (v - lo) / (hi - lo) * h  # noqa: E731
    c.setFont(SANS, 6.5)
    for j, appraiser in enumerate(study.appraisers):
        px0 = x0 + j * panel_w
        if j:
            c.setStrokeColorRGB(*_INK)
            c.setLineWidth(0.4)
            c.line(px0, y0, px0, y0 + h)
        c.setFillColorRGB(*_INK)
        c.drawCentredString(px0 + panel_w / 2, y0 - 9, f"appraiser {appraiser}")
        xs = [px0 + panel_w * (i + 0.5) / n_parts for i in range(n_parts)]
        ys = [scale(v) for v in ranges[:, j]]
        c.setLineWidth(0.8)
        c.setStrokeColorRGB(*_INK)
        for k in range(n_parts - 1):
            c.line(xs[k], ys[k], xs[k + 1], ys[k + 1])
        for xx, yy in zip(xs, ys):
            _draw_marker(c, "circle", xx, yy, 1.6)
    c.setLineWidth(0.7)
    c.setDash(3, 2)
    c.line(x0, scale(r_bar), x0 + w, scale(r_bar))
    c.drawString(x0 + w + 2, scale(r_bar) - 2, f"R-bar {r_bar:.3g}")
    if ucl is not None:
        c.setDash(1, 1.5)
        c.line(x0, scale(ucl), x0 + w, scale(ucl))
        c.drawString(x0 + w + 2, scale(ucl) - 2, f"UCL {ucl:.3g}")
    c.setDash()


def _short_labels(labels: Sequence[str], width: int = 8) -> list[str]:
    """Labels without their common prefix (``LW-220-01`` -> ``01``), cut to ``width`` characters."""
    prefix = os.path.commonprefix(list(labels)) if len(labels) > 1 else ""
    return [(label[len(prefix) :] or label)[-width:] for label in labels]


def _draw_means_chart(c, study: GaugeStudy, box) -> None:
    """Mean of the trials per part, one line per appraiser."""
    x0, y0, w, h = box
    means = study.values.mean(axis=2)
    lo, hi = _draw_axes(c, box, float(means.min()), float(means.max()), "Means by part and appraiser", "mean")
    n_parts, n_app = means.shape
    xs = [x0 + w * (i + 0.5) / n_parts for i in range(n_parts)]
    scale = lambda v: y0 + (v - lo) / (hi - lo) * h  # noqa: E731
    c.setFont(SANS, 6.5)
    c.setFillColorRGB(*_INK)
    for i, part in enumerate(_short_labels(study.parts)):
        c.drawCentredString(xs[i], y0 - 9, part)
    for j, appraiser in enumerate(study.appraisers):
        grey = _SERIES_GREYS[j % len(_SERIES_GREYS)]
        marker = _SERIES_MARKERS[j % len(_SERIES_MARKERS)]
        c.setStrokeColorRGB(grey, grey, grey)
        c.setFillColorRGB(grey, grey, grey)
        c.setLineWidth(0.8)
        dash = _SERIES_DASHES[j % len(_SERIES_DASHES)]
        c.setDash(*dash) if dash else c.setDash()
        ys = [scale(v) for v in means[:, j]]
        for k in range(n_parts - 1):
            c.line(xs[k], ys[k], xs[k + 1], ys[k + 1])
        c.setDash()
        for xx, yy in zip(xs, ys):
            _draw_marker(c, marker, xx, yy)
        # legend
        lx, ly = x0 + w + 6, y0 + h - 10 - 11 * j
        c.setDash(*dash) if dash else c.setDash()
        c.line(lx, ly + 2.5, lx + 14, ly + 2.5)
        c.setDash()
        _draw_marker(c, marker, lx + 7, ly + 2.5)
        c.setFillColorRGB(*_INK)
        c.drawString(lx + 17, ly, str(appraiser)[:10])
    c.setStrokeColorRGB(*_INK)
    c.setFillColorRGB(*_INK)


def write_gauge_pdf(
    study: GaugeStudy,
    path: str | Path,
    *,
    title: str = "Gauge R&R study (ANOVA method)",
    generated_at: datetime | None = None,
) -> None:
    """Write the one-page PDF of a gauge study (atomically), PDF/A-2b (:mod:`surfinspect.pdfa`).

    The page holds the ANOVA table of the model used (and the table with the
    interaction when that was pooled), the variance components, the verdict
    with its reasons, the range chart by appraiser and the chart of means by
    part and appraiser, drawn as vector graphics. ``generated_at`` (default
    now, naive taken as UTC) is printed and dated into the document: with the
    same study and time, the same bytes.
    """
    from reportlab.lib.pagesizes import A4
    from reportlab.lib.units import mm

    when = generated_at or datetime.now(timezone.utc)
    when = (when if when.tzinfo else when.replace(tzinfo=timezone.utc)).astimezone(timezone.utc)
    page_w, page_h = A4
    left = 18 * mm
    info = DocumentInfo(
        title=title, subject=f"surfinspect gauge study {study.source or ''}".strip(), author="surfinspect", created=when
    )
    buf = io.BytesIO()
    c = archival_canvas(buf, info)
    y = _study_head(c, study, title, left, page_h - 18 * mm, when)
    y = _verdict_box(c, study, left, y - 26, page_w - 2 * left)
    y = _study_tables(c, study, left, y)
    chart_h = min(120.0, (y - 34 * mm) / 2 - 30)
    chart_w = page_w - 2 * left - 95
    _draw_range_chart(c, study, (left + 30, y - chart_h - 12, chart_w, chart_h))
    y -= chart_h + 40
    _draw_means_chart(c, study, (left + 30, y - chart_h - 12, chart_w, chart_h))
    c.setFont(SANS_OBLIQUE, 7.5)
    c.setFillColorRGB(*_INK)
    c.drawString(left, 14 * mm, CAUTION)
    c.setFont(SANS, 7)
    c.drawRightString(page_w - left, 10 * mm, f"surfinspect {__version__}")
    c.showPage()
    c.save()
    fsutil.write_bytes_atomic(path, finish_archival(buf.getvalue(), info))


def _study_head(c, study: GaugeStudy, title: str, left: float, y: float, when: datetime) -> float:
    """Title, and the study's source, size, tolerance and time; return the y of the last line."""
    c.setFillColorRGB(*_INK)
    c.setFont(SANS_BOLD, 14)
    c.drawString(left, y, title)
    y -= 14
    c.setFont(SANS, 8.5)
    c.drawString(
        left,
        y,
        f"{study.source or 'study'}  |  {len(study.parts)} parts x {len(study.appraisers)} appraisers x "
        f"{study.n_trials} trials  |  tolerance width {study.tolerance:g}  |  "
        f"{when.strftime('%Y-%m-%d %H:%M UTC')}",
    )
    return y


def _verdict_box(c, study: GaugeStudy, left: float, y: float, width: float) -> float:
    """The verdict in its colour with %GRR and ndc, then its reasons and the model's; return the y below."""
    tint = _VERDICT_TINT[study.verdict]
    c.setStrokeColorRGB(*tint)
    c.setLineWidth(1.4)
    c.rect(left, y - 4, width, 22, stroke=1, fill=0)
    c.setFillColorRGB(*tint)
    c.setFont(SANS_BOLD, 11)
    c.drawString(left + 6, y + 3, f"Gauge {study.verdict.value.replace('-', ' ')}")
    c.setFillColorRGB(*_INK)
    c.setFont(SANS, 8.5)
    ndc = "undefined" if study.ndc is None else str(study.ndc)
    c.drawString(
        left + 150,
        y + 3,
        f"%GRR of total variation {study.grr_percent_of_total_variation:.2f}%   "
        f"%GRR of tolerance {study.grr_percent_of_tolerance:.2f}%   ndc {ndc}",
    )
    y -= 16
    c.setFont(SANS, 7.5)
    for reason in study.reasons:
        c.drawString(left + 6, y, "- " + reason)
        y -= 9.5
    c.drawString(left + 6, y, "- model: " + study.model_reason)
    for warning in study.warnings:
        from reportlab.lib.utils import simpleSplit

        for line in simpleSplit("- warning: " + warning, SANS, 7.5, 500):
            y -= 9.5
            c.drawString(left + 6, y, line)
    return y - 16


def _study_tables(c, study: GaugeStudy, left: float, y: float) -> float:
    """The ANOVA table(s) and the variance components with their note; return the y below."""
    widths = (110, 35, 75, 75, 65, 65)
    header = [h.capitalize() if h == "source" else h for h in ANOVA_HEADER]
    for table in (study.anova,):  # only the table the study used; the JSON holds both
        name = "with interaction" if table.model == "interaction" else "interaction pooled into repeatability"
        c.setFont(SANS_BOLD, 9)
        c.drawString(left, y, f"ANOVA, {name}")
        y = _draw_table(c, left, y - 4, header, anova_text_rows(table), widths) - 14
    c.setFont(SANS_BOLD, 9)
    c.drawString(left, y, "Variance components")
    y = _draw_table(
        c,
        left,
        y - 4,
        ("Source", *COMPONENT_HEADER[1:4], "% total var.", "% tolerance"),
        component_text_rows(study),
        (110, 70, 65, 70, 65, 65),
    )
    c.setFont(SANS, 7)
    c.drawString(
        left,
        y - 9,
        "% total variation = sigma / sigma(TV); % tolerance = 6 sigma / tolerance width; ndc = floor(1.41 PV / GRR).",
    )
    return y - 24
