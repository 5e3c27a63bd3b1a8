"""The PDF inspection report (reportlab): :func:`render_report` assembles the pages that the
other modules of ``report`` lay out (``summary``, ``part_page``, ``batch_stats``, ``footer``).

Pages, in order:

1. Summary: recipe(s), engine version, date and time (UTC and local), station,
   operator, counts of rejected / not inspected / review / accepted parts in
   large boxes, one line per region on the batch statistics (Cp/Cpk, parts
   flagged, their page), the sign-off block, one row per part (rejects first,
   then parts not inspected, then review, then accepted; numbered ``#`` in
   production order) and, once, the legend (angle convention, colours and
   shapes).
2. One page or more per part, in the summary's order: the verdict and why in
   one sentence, the photo as a downsampled JPEG with the overlay of
   :mod:`surfinspect.report.overlay` drawn on top as vector graphics in the result's
   own image-pixel coordinates (as tall as the page leaves room for), a table
   per region in the words of its lay pattern, the deviating patches, a rose
   plot of each region's orientation histogram (and, where the expected lay
   turns, a chart of the cells' deviations), the image file name and SHA-256.
3. Optionally, batch statistics: individuals and moving-range charts of the
   lay deviation and coherence per part on one axis of part numbers, Cp/Cpk of
   the deviation against the tolerance, and a table of the parts the charts
   flag (outside the control limits, beyond the tolerance, not measured).
4. Parts whose image could not be inspected (``not_inspected``), if any.
5. Pages added by the caller (``extra_pages``).

Every page carries the report id, the sign-off state ("NOT SIGNED" or who
signed, with what meaning and when), "page n of N" and the caution that the
measurement supports, and does not replace, the inspector's decision.

Numbers are printed from the result's JSON form (:func:`results.region_to_dict`)
so the report shows what the result file says: angles with
:data:`ANGLE_DECIMALS` decimals, coherence with 3, area shares in per cent
with 2, each rounded half away from zero from the JSON's decimal digits
(:func:`format_fixed`). The document is deterministic apart from
``generated_at``: same inputs and time, same bytes. It is PDF/A-2b
(:mod:`surfinspect.pdfa`): fonts embedded, sRGB output intent, XMP metadata.
"""

from __future__ import annotations

import io
import os
import socket
from datetime import datetime, timezone
from typing import Sequence

import numpy as np
from reportlab.pdfgen.canvas import Canvas

from .. import fsutil
from ..errors import InputError
from ..formatting import ANGLE_DECIMALS, format_angle, format_fixed, format_signed_angle
from ..pdfa.document import DocumentInfo, archival_canvas, finish_archival
from ..results import (
    CAUTION,
    PartResult,
    SignOff,
    region_to_dict,
)
from .batch_stats import _batch_stats, _layout_batch_stats
from .footer import _footer
from .layout import DEFAULT_TITLE, PAGE_SIZE, PICTURE_MAX_PX, ExtraPage, _Layout, _unique, printable_text
from .part_page import _layout_part
from .regions import _PartFigures
from .signoff import signoff_state
from .signoff_page import signoff_pages
from .summary import NotInspected, _layout_not_inspected, _layout_summary, _sort_key

__all__ = [
    "ANGLE_DECIMALS",
    "CAUTION",
    "PAGE_SIZE",
    "PICTURE_MAX_PX",
    "ExtraPage",
    "NotInspected",
    "format_angle",
    "format_fixed",
    "format_signed_angle",
    "printable_text",
    "render_report",
    "signoff_state",
    "write_report",
]


def _check_inputs(parts, images, report_id) -> tuple[list[PartResult], list]:
    parts = list(parts)
    images = list(images)
    if not parts:
        raise InputError("report: parts: no part results to report (allowed: one or more)")
    if len(images) != len(parts):
        raise InputError(
            f"report: images: got {len(images)} pictures for {len(parts)} parts (allowed: one per part, or None)"
        )
    if not str(report_id).strip():
        raise InputError("report: report_id: empty (allowed: a non-empty identifier)")
    for k, p in enumerate(parts):
        if not isinstance(p, PartResult):
            raise InputError(f"report: parts[{k}]: not a PartResult (got {type(p).__name__})")
    return parts, images


def _check_not_inspected(not_inspected) -> list[NotInspected]:
    not_inspected = list(not_inspected)
    for k, item in enumerate(not_inspected):
        if not isinstance(item, NotInspected):
            raise InputError(f"report: not_inspected[{k}]: not a NotInspected (got {type(item).__name__})")
    return not_inspected


def _report_time(generated_at: datetime | str | None) -> datetime:
    """The report's time in UTC: now, an aware or naive (taken as UTC) datetime, or ISO 8601 text."""
    if generated_at is None:
        generated_at = datetime.now(timezone.utc)
    elif isinstance(generated_at, str):
        try:
            generated_at = datetime.fromisoformat(generated_at.replace("Z", "+00:00"))
        except ValueError:
            raise InputError(
                f"report: generated_at: not an ISO 8601 time (got {generated_at!r}, allowed e.g. 2031-04-02T09:00:00Z)"
            ) from None
    if generated_at.tzinfo is None:
        generated_at = generated_at.replace(tzinfo=timezone.utc)
    return generated_at.astimezone(timezone.utc)


def render_report(
    parts: Sequence[PartResult],
    images: Sequence[np.ndarray | None],
    *,
    report_id: str,
    title: str | None = None,
    operator: str | None = None,
    station: str | None = None,
    generated_at: datetime | str | None = None,
    signoff: SignOff | None = None,
    batch_stats: bool = False,
    not_inspected: Sequence[NotInspected] = (),
    extra_pages: Sequence[ExtraPage] = (),
) -> bytes:
    """Render the inspection report of a batch of parts as PDF bytes.

    Parameters
    ----------
    parts : sequence of PartResult
        The judged parts, in production order (the batch charts keep it; the
        summary and part pages put rejects first).
    images : sequence of (M, N) ndarray or None
        One grey picture per part, the one its result was measured on (float
        in [0, 1], or uint8 / uint16). None leaves the part page without a
        picture and says so.
    report_id : str
        Printed on every page and fixed into the PDF's document id.
    title : str, optional
        Default "Surface lay inspection report".
    operator, station : str, optional
        Who ran the inspection and where; the station defaults to this host's name.
    generated_at : datetime or ISO 8601 str, optional
        The report's time (default: now). Naive values are taken as UTC. With
        the same inputs and ``generated_at`` the bytes are the same.
    signoff : SignOff, optional
        Fills the sign-off block; None leaves it visibly empty ("NOT SIGNED").
    batch_stats : bool
        Add the batch statistics page(s) after the part pages, and one line
        per region (Cp/Cpk, parts flagged) to the summary.
    not_inspected : sequence of NotInspected
        Parts of the batch whose image could not be inspected: counted and
        listed on the summary (a box of their own, rows after the rejects)
        and on a page of their own after the statistics.
    extra_pages : sequence of callables ``(canvas, page_size) -> None``
        Each draws one page at the end (the report adds the footer).

    Returns
    -------
    bytes
        The PDF document.

    Raises
    ------
    InputError
        No parts, a picture count or shape that does not match the results,
        an empty ``report_id``, or a ``not_inspected`` entry that is not a
        :class:`NotInspected`.
    """
    parts, images = _check_inputs(parts, images, report_id)
    when = _report_time(generated_at)  # checked before not_inspected, as it always was
    not_inspected = _check_not_inspected(not_inspected)
    figs = [(i, _PartFigures(p, tuple(region_to_dict(r) for r in p.regions))) for i, p in enumerate(parts)]
    summary = dict(
        report_id=str(report_id),
        title=title or DEFAULT_TITLE,
        operator=operator,
        station=station or socket.gethostname(),
        generated_at=when,
        signoff=signoff,
        not_inspected=not_inspected,
        stats=_batch_stats(parts) if batch_stats else [],
    )
    if signoff is not None:  # the dispositions it covers, and the boxes of the later sign-offs
        extra_pages = [*extra_pages, *signoff_pages(signoff)]
    pages = _lay_out_pages(figs, images, summary, extra_pages)
    return _draw_pdf(pages, parts, summary)


def _lay_out_pages(figs: list[tuple[int, _PartFigures]], images: list, summary: dict, extra_pages) -> list[list]:
    """Every page's drawing steps in order: summary, parts, statistics, parts not inspected, extras.

    The summary is laid out twice: the first pass counts its pages, so that the
    part table of the second can give each part's page.
    """
    ordered = sorted(figs, key=_sort_key)
    parts = [fig.part for _, fig in figs]
    stats, not_inspected = summary["stats"], summary["not_inspected"]
    probe = _Layout()
    _layout_summary(probe, ordered, {i: 999 for i, _ in figs}, not_inspected_page=999, stats_page=999, **summary)
    first_part_page = len(probe.pages) + 1
    body, page_of = _layout_part_pages(ordered, images, first_part_page)
    next_page = first_part_page + len(body.pages)
    stats_page = None
    if stats:
        stats_layout = _Layout()
        stats_layout.pages = []  # _layout_batch_stats starts its own page
        _layout_batch_stats(stats_layout, parts, stats, page_of)
        stats_page, next_page = next_page, next_page + len(stats_layout.pages)
    layout = _Layout()
    not_inspected_page = next_page if not_inspected else None
    _layout_summary(layout, ordered, page_of, not_inspected_page=not_inspected_page, stats_page=stats_page, **summary)
    if len(layout.pages) != len(probe.pages):  # pragma: no cover - row heights do not depend on page digits
        raise RuntimeError("summary pagination changed between passes")
    layout.pages.extend(body.pages)
    if stats:
        layout.pages.extend(stats_layout.pages)
    if not_inspected:
        _layout_not_inspected(layout, not_inspected, len(parts) + len(not_inspected))
    for extra in extra_pages:
        layout.new_page()
        layout.pages[-1].append(lambda c, extra=extra: _extra(c, extra))
    return [p for p in layout.pages if p]


def _layout_part_pages(ordered: list[tuple[int, _PartFigures]], images: list, first_page: int):
    """The part pages in the summary's order, and the page number each part starts on."""
    body = _Layout()
    page_of: dict[int, int] = {}
    for i, fig in ordered:
        if not body.page_is_empty:
            body.new_page()
        page_of[i] = first_page + len(body.pages) - 1
        _layout_part(body, fig, images[i], f"part-{len(page_of)}", f"#{i + 1} of {len(ordered)}")
    return body, page_of


def _draw_pdf(pages: list[list], parts: list[PartResult], summary: dict) -> bytes:
    """Draw the pages with their footers into a deterministic PDF (fixed date, id from the report id)."""
    report_id, title, generated_at = summary["report_id"], summary["title"], summary["generated_at"]
    info = DocumentInfo(
        title=f"{title} {report_id}",
        subject=f"surfinspect report {report_id}",  # enters the PDF document id
        author=summary["operator"] or "surfinspect",
        creator="surfinspect " + ", ".join(_unique(p.engine_version for p in parts)),
        keywords=f"report {report_id}; generated {generated_at.strftime('%Y-%m-%dT%H:%M:%SZ')}",
        created=generated_at,
    )
    buf = io.BytesIO()
    c = archival_canvas(buf, info, pagesize=PAGE_SIZE)
    for n, page in enumerate(pages, start=1):
        for draw in page:
            draw(c)
        _footer(c, n, len(pages), report_id, summary["signoff"])
        c.showPage()
    c.save()
    return finish_archival(buf.getvalue(), info)


def _extra(c: Canvas, extra: ExtraPage) -> None:
    c.saveState()
    try:
        extra(c, PAGE_SIZE)
    finally:
        c.restoreState()


def write_report(
    path: str | os.PathLike, parts: Sequence[PartResult], images: Sequence[np.ndarray | None], **kwargs
) -> None:
    """Render the report (:func:`render_report`, same keywords) and write it atomically."""
    fsutil.write_bytes_atomic(path, render_report(parts, images, **kwargs))
