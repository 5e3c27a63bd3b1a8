"""The batch statistics page: capability per region, control charts, the table of flagged parts."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping, Sequence
from xml.sax.saxutils import escape

from reportlab.platypus import Paragraph, Table

from ..errors import InputError
from ..formatting import ANGLE_DECIMALS, format_angle, format_fixed, format_signed_angle
from ..pdfa.fonts import SANS_BOLD
from ..qualify.spc import (
    CAPABILITY_CONFIDENCE,
    CAPABILITY_MIN_PARTS,
    Capability,
    IndividualsChart,
    capability,
    individuals_chart,
)
from ..results import (
    PartResult,
    RegionResult,
    RegionVerdict,
    region_to_dict,
)
from .charts import _chart, _chart_key
from .layout import _CELL, _CELL_BOLD, _FRAME_W, _MARGIN, _SMALL, _Layout, _table, _tint
from .regions import _JUDGED_ANGLE, _coherence_of
from .scene import PART_LOOKS


@dataclass(frozen=True)
class _RegionStats:
    """Control charts and capability of one recipe region over the parts, in production order."""

    recipe: str
    region: str
    tolerance: float
    judged: bool  # the region's deviation is judged against its tolerance
    present: tuple[int, ...]  # indices of the parts that have this region
    deviations: tuple[float | None, ...]  # per part, as the JSON prints them
    coherences: tuple[float | None, ...]
    dev_chart: IndividualsChart | None
    coh_chart: IndividualsChart | None
    capability: Capability | None
    note: str  # why a chart is missing, in words ("" when both are drawn)

    @property
    def beyond_tolerance(self) -> tuple[int, ...]:
        if not self.judged:
            return ()
        return tuple(i for i, v in enumerate(self.deviations) if v is not None and abs(v) > self.tolerance)

    def flags(self) -> dict[int, list[str]]:
        """Per part index, why the charts flag it (in words)."""
        out: dict[int, list[str]] = {}
        for i in self.beyond_tolerance:
            out.setdefault(i, []).append(f"deviation beyond the tolerance ± {format_angle(self.tolerance)}")
        for what, chart in (("deviation", self.dev_chart), ("coherence", self.coh_chart)):
            if chart is None:
                continue
            for i in chart.out_of_limits:
                out.setdefault(i, []).append(f"{what} outside the control limits")
            for k in chart.mr_out_of_limits:  # mr[k] spans parts k and k + 1
                out.setdefault(k + 1, []).append(f"{what} jump from #{k + 1} above the moving-range limit")
        if self.judged:
            for i in self.present:
                if self.deviations[i] is None:
                    out.setdefault(i, []).append("not measured (no-texture): a gap in the charts")
        return dict(sorted(out.items()))


def _batch_stats(parts: Sequence[PartResult]) -> list[_RegionStats]:
    groups: dict[tuple[str, str], list[tuple[int, RegionResult, dict]]] = {}
    for i, part in enumerate(parts):
        for region in part.regions:
            groups.setdefault((part.recipe.name, region.name), []).append((i, region, region_to_dict(region)))
    out = []
    for (recipe, name), members in groups.items():
        judged = any(region.lay_pattern in _JUDGED_ANGLE for _, region, _ in members)
        devs: list[float | None] = [None] * len(parts)
        cohs: list[float | None] = [None] * len(parts)
        for i, region, d in members:
            if region.lay_pattern in _JUDGED_ANGLE:
                devs[i] = d["deviation_deg"]
            if region.verdict is not RegionVerdict.NO_TEXTURE:
                cohs[i] = _coherence_of(region, d)[0]
        tol = float(members[0][1].tolerance_deg)
        notes = []
        dev_chart = coh_chart = cap = None
        if judged:
            try:
                dev_chart = individuals_chart(devs)
                cap = capability(devs, -tol, tol)
            except InputError as exc:
                notes.append(f"too few measured parts for limits on the deviation ({exc})")
        else:
            notes.append(
                "its lay direction is not judged (lay: "
                + members[0][1].lay_pattern
                + "): no deviation chart, no Cp/Cpk"
            )
        try:
            coh_chart = individuals_chart(cohs)
        except InputError as exc:
            notes.append(f"too few measured parts for limits on the coherence ({exc})")
        out.append(
            _RegionStats(
                recipe,
                name,
                tol,
                judged,
                tuple(i for i, _, _ in members),
                tuple(devs),
                tuple(cohs),
                dev_chart,
                coh_chart,
                cap,
                "; ".join(notes),
            )
        )
    return out


def _capability_text(st: _RegionStats) -> str:
    if st.capability is None:
        return "no Cp/Cpk"
    cap = st.capability

    def index(value: float | None, interval: tuple[float, float] | None) -> str:
        if value is None:
            return "—"
        if interval is None:
            return format_fixed(value, 2)
        return f"{format_fixed(value, 2)} ({format_fixed(interval[0], 2)}-{format_fixed(interval[1], 2)})"

    text = f"Cp {index(cap.cp, cap.cp_interval)} · Cpk {index(cap.cpk, cap.cpk_interval)}"
    if cap.cp_interval or cap.cpk_interval:
        text += f" ({100 * CAPABILITY_CONFIDENCE:g}% intervals)"
    if cap.warnings:
        text += f"; fewer than {CAPABILITY_MIN_PARTS} parts"
    return text


def _stats_line(st: _RegionStats) -> str:
    """One line per region for the summary page: capability and how many parts the charts flag."""
    outside = set()
    for chart in (st.dev_chart, st.coh_chart):
        if chart is not None:
            outside |= set(chart.out_of_limits) | {k + 1 for k in chart.mr_out_of_limits}
    parts = [f"<b>{_capability_text(st)}</b>"]
    parts.append(f"{len(outside)} part{'s' if len(outside) != 1 else ''} outside control limits")
    if st.judged:
        n = len(st.beyond_tolerance)
        parts.append(f"{n} beyond the tolerance")
    return f"{escape(st.recipe)} / {escape(st.region)}: " + " · ".join(parts)


def _flag_table(st: _RegionStats, parts: Sequence[PartResult], page_of: Mapping[int, int]) -> Table | None:
    flags = st.flags()
    if not flags:
        return None
    rows = [["#", "Part", "Verdict", "Deviation", "Coherence", "Flagged for", "Page"]]
    style = []
    for i, why in flags.items():
        word, colour, _ = PART_LOOKS[parts[i].verdict]
        rows.append(
            [
                str(i + 1),
                Paragraph(escape(parts[i].name), _CELL_BOLD),
                word,
                format_signed_angle(st.deviations[i]) if st.judged else "—",
                format_fixed(st.coherences[i], 3),
                Paragraph("; ".join(escape(w) for w in why), _CELL),
                str(page_of.get(i, "")),
            ]
        )
        style.append(("BACKGROUND", (2, len(rows) - 1), (2, len(rows) - 1), _tint(colour, 0.55)))
    style += [
        ("ALIGN", (0, 1), (0, -1), "RIGHT"),
        ("ALIGN", (3, 1), (4, -1), "RIGHT"),
        ("ALIGN", (-1, 1), (-1, -1), "RIGHT"),
    ]
    return _table(rows, [24, 100, 62, 56, 52, 199, 30], style)


def _layout_batch_stats(
    layout: _Layout, parts: Sequence[PartResult], stats: Sequence[_RegionStats], page_of: Mapping[int, int]
) -> None:
    layout.new_page()
    layout.block(20, lambda c, y: (c.setFont(SANS_BOLD, 14), c.drawString(_MARGIN, y - 14, "Batch statistics")))
    layout.text(
        "Individuals (X) and moving-range (MR) charts per recipe region over the parts in production order; "
        "# is the part's number in that order, as in the summary. A moving range sits at the later of its two parts. "
        "Limits from the mean moving range (Montgomery, ch. 6.4): X limits mean ± 2.66 × mean MR, MR limit 3.267 × mean MR. "
        "Cp/Cpk of the lay deviation against the region's tolerance, with the within sigma mean MR / 1.128, "
        "and their 95% confidence intervals (Cp: chi-square, Montgomery ch. 8.3; Cpk: Bissell's approximation, "
        "Applied Statistics 39, 1990). Below 25 parts they rest on too few parts to rely on. "
        "Parts without measurable texture leave a gap.",
        _SMALL,
    )
    for st in stats:
        _layout_region_stats(layout, st, parts, page_of)


def _layout_region_stats(
    layout: _Layout, st: _RegionStats, parts: Sequence[PartResult], page_of: Mapping[int, int]
) -> None:
    """One region of the statistics page: its header line, its charts, the table of parts they flag."""
    layout.text(_region_stats_header(st), gap=2)
    if st.dev_chart is None and st.coh_chart is None:
        layout.text("No chart for this region.", gap=10)
        return
    layout.block(12, lambda c, y: _chart_key(c, y), gap=2)
    for h, title, values, kw in _chart_blocks(st):
        layout.block(
            h,
            lambda c, y, h=h, title=title, values=values, kw=kw: _chart(
                c, _MARGIN, y, _FRAME_W, h, title, values, **kw
            ),
            gap=4,
        )
    table = _flag_table(st, parts, page_of)
    if table is None:
        layout.text("No part outside the control limits or beyond the tolerance.", gap=10)
    else:
        layout.text("<b>Parts flagged on these charts</b>", gap=2)
        layout.flowable(table, gap=12)


def _region_stats_header(st: _RegionStats) -> str:
    """Recipe / region, tolerance, n, mean deviation, within sigma, Cp/Cpk and any note, as one line."""
    header = f"<b>{escape(st.recipe)} / {escape(st.region)}</b>"
    if st.judged:
        header += f" · tolerance ± {format_angle(st.tolerance)}"
    if st.capability is not None:
        cap = st.capability
        header += (
            f" · n = {cap.n} · mean deviation {format_signed_angle(cap.mean)} · within sigma "
            f"{format_fixed(cap.sigma, 3)}° · <b>{_capability_text(st)}</b>"
        )
    if st.note:
        header += f" · {escape(st.note)}"
    return header


def _chart_blocks(st: _RegionStats) -> list[tuple[float, str, Sequence[float], dict]]:
    """(height, title, values, chart keywords) of the region's charts: deviation X and MR, coherence X and MR."""
    blocks = []
    if st.dev_chart is not None:
        ch = st.dev_chart
        individuals = dict(
            centre=ch.center,
            ucl=ch.ucl,
            lcl=ch.lcl,
            flagged=ch.out_of_limits,
            beyond=st.beyond_tolerance,
            spec=(-st.tolerance, st.tolerance),
            unit="°",
            decimals=ANGLE_DECIMALS,
        )
        blocks += [
            (118, "Lay deviation (°): individuals", ch.values, individuals),
            _moving_range_block(70, "Lay deviation (°): moving range", ch, unit="°", decimals=ANGLE_DECIMALS),
        ]
    if st.coh_chart is not None:
        ch = st.coh_chart
        # enough decimals to tell the limits apart, up to the 4 the result file keeps
        spread = ch.ucl - ch.lcl
        dec = 3 if spread <= 0 else int(min(4, max(3, math.ceil(-math.log10(spread)) + 1)))
        individuals = dict(centre=ch.center, ucl=ch.ucl, lcl=ch.lcl, flagged=ch.out_of_limits, decimals=dec)
        blocks += [
            (100, "Coherence: individuals", ch.values, individuals),
            _moving_range_block(64, "Coherence: moving range", ch, decimals=dec),
        ]
    return blocks


def _moving_range_block(h: float, title: str, ch: IndividualsChart, **kw) -> tuple[float, str, tuple, dict]:
    """A moving-range chart: each range at the later of its two parts, no lower limit, the axis from 0."""
    flagged = [k + 1 for k in ch.mr_out_of_limits]
    return (
        h,
        title,
        (math.nan, *ch.mr),
        dict(centre=ch.mr_bar, ucl=ch.mr_ucl, lcl=None, flagged=flagged, **kw, lower_zero=True),
    )
