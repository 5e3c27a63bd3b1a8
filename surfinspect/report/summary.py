"""The summary page (counts, parts, sign-off, legend) and the page of parts not inspected."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Mapping, Sequence
from xml.sax.saxutils import escape

from reportlab.lib import colors
from reportlab.pdfgen.canvas import Canvas
from reportlab.platypus import Paragraph, Table

from ..formatting import format_signed_angle
from ..pdfa.fonts import MONO, SANS, SANS_BOLD
from ..results import NOT_INSPECTED, PartResult, PartVerdict, RegionVerdict, SignOff
from .batch_stats import _RegionStats, _stats_line
from .layout import (
    _CELL,
    _CELL_BOLD,
    _FRAME_W,
    _MARGIN,
    _VERDICT_ORDER,
    _Layout,
    _rl,
    _table,
    _tint,
    _unique,
    _verdict_icon,
)
from .legend import _LEGEND_H, _legend
from .regions import _JUDGED_ANGLE, _PartFigures, worst_deviation
from .scene import PALETTE, PART_LOOKS, REGION_LOOKS, RGB
from .signoff import _signoff_block, _signoff_height


def _sort_key(item: tuple[int, _PartFigures]):
    index, fig = item
    return _VERDICT_ORDER[fig.part.verdict], index


@dataclass(frozen=True)
class NotInspected:
    """A part of the batch whose image could not be inspected (it counts as needing review).

    ``name`` is the part's name (its file name), ``sha256`` the file's hash
    when it could be read (else ""), ``error`` the reason in words.
    """

    name: str
    sha256: str
    error: str


_NOT_INSPECTED_WORD = NOT_INSPECTED.upper()


def _count_boxes(c: Canvas, y: float, counts: Mapping[PartVerdict, int], not_inspected: int) -> None:
    """Big verdict counts; a box for parts not inspected appears only when there are some."""
    kinds: list[tuple[str, RGB, str, int]] = [(*PART_LOOKS[PartVerdict.REJECT], counts.get(PartVerdict.REJECT, 0))]
    if not_inspected:
        kinds.append((_NOT_INSPECTED_WORD, PALETTE["no-texture"], "triangle", not_inspected))
    kinds += [(*PART_LOOKS[v], counts.get(v, 0)) for v in (PartVerdict.REVIEW, PartVerdict.ACCEPT)]
    gap, h = 8.0, 46.0
    w = (_FRAME_W - gap * (len(kinds) - 1)) / len(kinds)
    for k, (word, colour, shape, n) in enumerate(kinds):
        x = _MARGIN + k * (w + gap)
        c.saveState()
        c.setFillColor(_rl(colour) if n else colors.white)
        c.setStrokeColor(colors.black)
        c.setLineWidth(2.0 if n else 0.6)
        c.rect(x, y - h, w, h, stroke=1, fill=1)
        _verdict_icon(c, shape, x + 20, y - h / 2, 22)
        c.setFillColor(colors.black)
        c.setFont(SANS_BOLD, 24)
        number_w = c.stringWidth(str(n), SANS_BOLD, 24)
        c.drawRightString(x + w - 10, y - h / 2 - 8, str(n))
        size = 11.0
        while size > 6 and c.stringWidth(word, SANS_BOLD, size) > w - 38 - number_w - 16:
            size -= 0.5
        c.setFont(SANS_BOLD, size)
        c.drawString(x + 38, y - h / 2 - size * 0.36, word)
        c.restoreState()


def _layout_summary(
    layout: _Layout,
    figs: Sequence[tuple[int, _PartFigures]],
    page_of: Mapping[int, int],
    *,
    report_id: str,
    title: str,
    operator: str | None,
    station: str,
    generated_at: datetime,
    signoff: SignOff | None,
    not_inspected: Sequence[NotInspected] = (),
    not_inspected_page: int | None = None,
    stats: Sequence[_RegionStats] = (),
    stats_page: int | None = None,
) -> None:
    """The summary page(s): head with counts, facts of the batch, sign-off, the parts table, the legend."""
    parts = [f.part for _, f in figs]
    layout.block(88, lambda c, y: _summary_head(c, y, parts, title, report_id, len(not_inspected)))
    layout.flowable(_facts_table(parts, generated_at, station, operator, stats, stats_page))
    layout.block(_signoff_height(signoff), lambda c, y: _signoff_block(c, y, signoff))
    order = (
        "reject first, then not-inspected, then review, then accept"
        if not_inspected
        else "reject first, then review, then accept"
    )
    layout.text(f"<b>Parts</b> ({order}; # is the part's number in production order)", gap=2)
    layout.flowable(_parts_table(figs, page_of, not_inspected, not_inspected_page))
    layout.block(_LEGEND_H, _legend)


def _summary_head(
    c: Canvas, y: float, parts: Sequence[PartResult], title: str, report_id: str, not_inspected: int
) -> None:
    """Title, report id and part counts, and the boxes of counts by verdict."""
    counts = {v: sum(p.verdict is v for p in parts) for v in PartVerdict}
    c.setFillColor(colors.black)
    c.setFont(SANS_BOLD, 17)
    c.drawString(_MARGIN, y - 17, title)
    c.setFont(SANS, 9)
    line = f"Report {report_id} · {len(parts)} part{'s' if len(parts) != 1 else ''} inspected"
    if not_inspected:
        line += f" · {not_inspected} {NOT_INSPECTED} (image unreadable)"
    c.drawString(_MARGIN, y - 31, line)
    _count_boxes(c, y - 40, counts, not_inspected)


def _facts_table(
    parts: Sequence[PartResult],
    generated_at: datetime,
    station: str,
    operator: str | None,
    stats: Sequence[_RegionStats],
    stats_page: int | None,
) -> Table:
    """Recipes, engine version, time (UTC and local), station, operator and the batch statistics lines."""
    local = generated_at.astimezone()
    info = []
    for name, revision, sha in _unique((p.recipe.name, p.recipe.revision, p.recipe.sha256) for p in parts):
        n = sum(p.recipe.name == name and p.recipe.revision == revision for p in parts)
        recipe = (
            f"<b>{escape(name)}</b> · revision {revision} · {n} part{'s' if n != 1 else ''}<br/>"
            f"SHA-256 <font name={MONO} size=7>{sha}</font>"
        )
        info.append(["Recipe", Paragraph(recipe, _CELL)])
    info += [
        ["Engine version", ", ".join(_unique(p.engine_version for p in parts))],
        ["Generated (UTC)", generated_at.strftime("%Y-%m-%d %H:%M:%S UTC")],
        ["Generated (local)", local.strftime("%Y-%m-%d %H:%M:%S ") + (local.tzname() or local.strftime("%z"))],
        ["Station", station],
        ["Operator", operator if operator else "not given"],
    ]
    if stats:
        lines = "<br/>".join(_stats_line(st) for st in stats)
        where = f" (page {stats_page})" if stats_page is not None else ""
        note = f"{lines}<br/><font size=6.5>control charts and capability{where}</font>"
        info.append(["Batch statistics", Paragraph(note, _CELL)])
    shading = [
        ("FONT", (0, 0), (0, -1), SANS_BOLD, 7.5),
        ("BACKGROUND", (0, 0), (0, -1), colors.Color(0.93, 0.93, 0.93)),
    ]
    return _table(info, [100, _FRAME_W - 100], shading, repeat_rows=0)


def _parts_table(
    figs: Sequence[tuple[int, _PartFigures]],
    page_of: Mapping[int, int],
    not_inspected: Sequence[NotInspected],
    not_inspected_page: int | None,
) -> Table:
    """One row per part: rejects, then parts not inspected (a hold like the rejects), then the rest."""
    rows = [["#", "Part", "Verdict", "Worst region", "Worst deviation", "First reason", "Page"]]
    style = []

    def add_row(number: str, name: str, word: str, colour: RGB, region: str, deviation: str, reason: str, page) -> None:
        k = len(rows)
        rows.append(
            [
                number,
                Paragraph(escape(name), _CELL_BOLD),
                Paragraph(f"<b>{word}</b>", _CELL),
                region,
                deviation,
                Paragraph(escape(reason), _CELL),
                str(page if page is not None else ""),
            ]
        )
        style.extend([("BACKGROUND", (2, k), (2, k), _tint(colour, 0.55))])
        if word in (PART_LOOKS[PartVerdict.REJECT][0], _NOT_INSPECTED_WORD):
            style.append(("LINEBEFORE", (0, k), (0, k), 2.5, colors.black))

    for index, fig in figs:
        if fig.part.verdict is PartVerdict.REJECT:
            add_row(*_part_row(index, fig), page_of.get(index))
    for item in not_inspected:
        reason = item.error or "image could not be read"
        add_row("—", item.name, _NOT_INSPECTED_WORD, PALETTE["no-texture"], "—", "—", reason, not_inspected_page)
    for index, fig in figs:
        if fig.part.verdict is not PartVerdict.REJECT:
            add_row(*_part_row(index, fig), page_of.get(index))
    right = [
        ("ALIGN", (0, 1), (0, -1), "RIGHT"),
        ("ALIGN", (4, 1), (4, -1), "RIGHT"),
        ("ALIGN", (-1, 1), (-1, -1), "RIGHT"),
    ]
    return _table(rows, [20, 96, 62, 88, 66, 161, 30], style + right)


def _part_row(index: int, fig: _PartFigures) -> tuple[str, str, str, RGB, str, str, str]:
    """A part's number, name, verdict word and colour, worst region and its deviation, first reason."""
    worst = fig.worst
    if worst is None:
        region_name, deviation = "—", "—"
    else:
        region, d = worst
        region_name = f"{region.name} ({REGION_LOOKS[region.verdict].word})"
        if region.verdict is RegionVerdict.NO_TEXTURE:
            deviation = "no-texture"
        elif region.lay_pattern in _JUDGED_ANGLE:
            value, which = worst_deviation(d)
            deviation = f"{format_signed_angle(value)} ({which})"
        else:
            deviation = "not judged"
    reasons = [r for reg in fig.part.regions if reg.verdict is not RegionVerdict.PASS for r in reg.reasons]
    reasons = list(fig.part.reasons) + reasons
    word, colour, _ = PART_LOOKS[fig.part.verdict]
    return str(index + 1), fig.part.name, word, colour, region_name, deviation, reasons[0] if reasons else "—"


def _layout_not_inspected(layout: _Layout, items: Sequence[NotInspected], total: int) -> None:
    layout.new_page()
    layout.block(
        20,
        lambda c, y: (
            c.setFont(SANS_BOLD, 14),
            c.drawString(_MARGIN, y - 14, f"Parts {NOT_INSPECTED}: {len(items)} of {total}"),
        ),
    )
    layout.text(
        f"These images could not be inspected ({NOT_INSPECTED}). Each counts as review: its verdict is neither accept "
        "nor reject in this report, and it appears in no statistics."
    )
    rows = [["Part", "Why", "File SHA-256"]]
    for item in items:
        rows.append(
            [
                Paragraph(escape(item.name), _CELL_BOLD),
                Paragraph(escape(item.error or "(no reason recorded)"), _CELL),
                Paragraph(
                    f"<font name={MONO} size=6>{escape(item.sha256) or '(file could not be read)'}</font>", _CELL
                ),
            ]
        )
    layout.flowable(_table(rows, [110, 243, 170], []))
