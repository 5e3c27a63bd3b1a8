"""The PDF summary of a re-judgement: which archived parts change verdict under another recipe revision."""

from __future__ import annotations

import io
from dataclasses import dataclass
from typing import Sequence

from reportlab.lib import colors
from reportlab.platypus import Paragraph, SimpleDocTemplate, Spacer

from .._version import __version__
from ..pdfa import fonts
from ..pdfa.document import DocumentInfo, archival_canvas, finish_archival
from ..results import CAUTION
from .layout import _BODY, _CELL, _FRAME_W, _MARGIN, PAGE_SIZE, _table, printable_text

__all__ = ["ChangedPart", "render_rejudge_summary"]


@dataclass(frozen=True)
class ChangedPart:
    batch_id: str
    part_key: str
    old: str  # verdict recorded in the archive
    new: str  # verdict under the new recipe
    why: str  # regions not passed under the new recipe, or the error


_VERDICT_TINT = {
    "reject": colors.Color(0.96, 0.82, 0.80),
    "review": colors.Color(0.99, 0.93, 0.75),
    "accept": colors.Color(0.83, 0.93, 0.84),
}


def _text(value: str) -> str:
    return printable_text(value)[0].replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def render_rejudge_summary(
    *,
    archive: str,
    old_recipes: Sequence[str],
    new_recipe: str,
    generated_at: str,
    parts_total: int,
    counts: dict[str, dict[str, int]],
    changed: Sequence[ChangedPart],
) -> bytes:
    """The summary PDF (PDF/A-2b, the shipped fonts): the recipes compared, recorded × new counts, every changed part.

    ``counts[old][new]`` is the number of parts with that pair of verdicts.
    """
    info = DocumentInfo(
        title="Re-judgement of archived parts",
        subject=f"surfinspect rejudge under {new_recipe}",
        author="surfinspect",
        keywords=f"rejudge; {new_recipe}; generated {generated_at}",
    )
    buf = io.BytesIO()

    def page(c, doc) -> None:
        c.saveState()
        c.setFont(fonts.SANS, 7.5)
        c.drawString(_MARGIN, _MARGIN + 6, f"Re-judgement under {new_recipe}")
        c.drawRightString(PAGE_SIZE[0] - _MARGIN, _MARGIN + 6, f"Page {doc.page} · surfinspect {__version__}")
        c.setFont(fonts.SANS_OBLIQUE, 6.8)
        c.drawCentredString(PAGE_SIZE[0] / 2, _MARGIN - 4, CAUTION)
        c.restoreState()

    doc = SimpleDocTemplate(
        buf,
        pagesize=PAGE_SIZE,
        leftMargin=_MARGIN,
        rightMargin=_MARGIN,
        topMargin=_MARGIN,
        bottomMargin=_MARGIN + 24,
    )
    title = Paragraph("<b>Re-judgement of archived parts</b>", _BODY.clone("t", fontSize=14, leading=18))
    intro = Paragraph(
        f"Archive {_text(archive)}. Archived images re-inspected under <b>{_text(new_recipe)}</b>, "
        f"recorded under {_text(', '.join(old_recipes))}. {parts_total} part(s) compared, "
        f"<b>{len(changed)} change verdict</b>. Generated {_text(generated_at)}. Nothing in the archive was "
        "changed: the recorded verdicts, sign-offs and dispositions stand until a qualified person acts on this list.",
        _BODY,
    )
    verdicts = ["accept", "reject", "review", "error"]
    grid = [["recorded \\ new", *verdicts]] + [
        [old, *[str(counts.get(old, {}).get(new, 0)) for new in verdicts]] for old in verdicts
    ]
    story = [title, Spacer(1, 6), intro, Spacer(1, 8), _table(grid, [90] + [60] * 4, [])]
    story += [Spacer(1, 10), Paragraph("<b>Parts whose verdict changes</b>", _BODY), Spacer(1, 4)]
    if changed:
        rows = [["batch", "part", "recorded", "new", "regions not passed / error"]]
        style = []
        for i, p in enumerate(changed, start=1):
            rows.append([p.batch_id, p.part_key, p.old, p.new, Paragraph(_text(p.why or "-"), _CELL)])
            style.append(("BACKGROUND", (3, i), (3, i), _VERDICT_TINT.get(p.new, colors.white)))
        widths = [80, 100, 50, 50, _FRAME_W - 280]
        story.append(_table(rows, widths, style))
    else:
        story.append(Paragraph("None: every part keeps its recorded verdict under the new recipe.", _BODY))
    doc.build(
        story,
        onFirstPage=page,
        onLaterPages=page,
        canvasmaker=lambda target, **_: archival_canvas(target, info, pagesize=PAGE_SIZE),
    )
    return finish_archival(buf.getvalue(), info)
