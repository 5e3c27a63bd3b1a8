"""What each page shows, read from the archive through the same calls ``surfinspect show`` makes.

No measurement, judging or signing here: the numbers are the stored
results; the statistics are :mod:`surfinspect.qualify.spc`'s.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from ..archive import store as archive
from ..archive.editions import signs_newest_edition
from ..archive.records import ERROR_VERDICT, OLD_ERROR_VERDICT
from ..errors import InputError
from ..formatting import format_angle
from ..qualify.spc import capability, individuals_chart
from ..report.rose import SPECTRUM_RANGE_DB, spectrum_caption, spectrum_petals
from ..report.scene import PALETTE, PART_LOOKS
from ..results import PartVerdict
from .svg import VERDICT_SHAPES, control_chart_svg, rose_svg

VERDICTS = ("accept", "reject", "review", ERROR_VERDICT, "pending")
#: Words and colours of the part verdicts: the report's own (colour and shape), plus error and pending.
VERDICT_LOOKS: dict[str, dict[str, str]] = {
    **{
        v.value: {"word": word, "colour": "#%02x%02x%02x" % colour, "shape": shape}
        for v, (word, colour, shape) in PART_LOOKS.items()
    },
    ERROR_VERDICT: {"word": "NOT INSPECTED", "colour": "#555555", "shape": "square"},
    "pending": {"word": "PENDING", "colour": "#999999", "shape": "ring"},
}
PATCH_COLOUR = "#%02x%02x%02x" % PALETTE["patch"]
NEEDS_DISPOSITION = ("reject", "review", ERROR_VERDICT)


def verdict_of(part: archive.PartRow) -> str:
    """The part's verdict word on the pages (older archives' word for a part not inspected read as today's)."""
    if part.verdict == OLD_ERROR_VERDICT:
        return ERROR_VERDICT
    return part.verdict or "pending"


@dataclass
class BatchSummary:
    row: archive.BatchRow
    counts: dict[str, int]
    signoffs: list[archive.SignoffRow]

    @property
    def last_signoff(self) -> archive.SignoffRow | None:
        return self.signoffs[-1] if self.signoffs else None

    @property
    def newest_unsigned(self) -> bool:
        return newest_unsigned(self.row, self.signoffs)


def newest_unsigned(batch: archive.BatchRow, signoffs: list[archive.SignoffRow]) -> bool:
    """Signed off, but parts were re-inspected since into a newer report edition nobody signed."""
    return bool(signoffs) and not signs_newest_edition(batch, signoffs[-1])


def batch_summaries(arc: archive.Archive, q: str = "", date_from: str = "", date_to: str = "") -> list[BatchSummary]:
    """Every batch, newest first, that matches the search (id or recipe substring, start date range)."""
    q = q.strip().lower()
    out = []
    for b in reversed(arc.batches()):
        if q and q not in b.batch_id.lower() and q not in b.recipe_name.lower():
            continue
        day = b.started_at[:10]
        if (date_from and day < date_from) or (date_to and day > date_to):
            continue
        out.append(BatchSummary(b, archive.verdict_counts(arc.parts(b.batch_id)), arc.signoffs(b.batch_id)))
    return out


@dataclass
class PartCard:
    row: archive.PartRow
    verdict: str
    worst_deviation: float | None  # largest |deviation| over the part's regions, degrees
    regions: list[dict[str, Any]]
    dispositions: list[archive.DispositionRow] = field(default_factory=list)

    @property
    def last_disposition(self) -> archive.DispositionRow | None:
        return self.dispositions[-1] if self.dispositions else None


def _regions_by_part(arc: archive.Archive, batch_id: str) -> dict[str, list[dict[str, Any]]]:
    by_part: dict[str, list[dict[str, Any]]] = {}
    for r in arc.index.select("regions", {"batch_id": batch_id}, order_by=("part_key", "region_name")):
        by_part.setdefault(r["part_key"], []).append(r)
    return by_part


def part_cards(arc: archive.Archive, batch_id: str) -> list[PartCard]:
    """Every part of the batch in production order, with its region rows and dispositions."""
    by_part = _regions_by_part(arc, batch_id)
    disp: dict[str, list[archive.DispositionRow]] = {}
    for d in arc.dispositions(batch_id):
        disp.setdefault(d.part_key, []).append(d)
    cards = []
    for p in arc.parts(batch_id):
        regions = by_part.get(p.part_key, [])
        devs = [abs(r["deviation_deg"]) for r in regions if r.get("deviation_deg") is not None]
        cards.append(
            PartCard(p, p.verdict or "pending", max(devs) if devs else None, regions, disp.get(p.part_key, []))
        )
    return cards


def filter_and_sort(cards: list[PartCard], verdict: str, sort: str) -> list[PartCard]:
    shown = [c for c in cards if not verdict or c.verdict == verdict]
    if sort == "worst":
        shown.sort(key=lambda c: (c.worst_deviation is None, -(c.worst_deviation or 0.0), c.row.position))
    return shown


@dataclass
class RegionChart:
    region: str
    svg: str
    capability: str


def batch_charts(cards: list[PartCard], tolerances: dict[str, float]) -> tuple[list[RegionChart], list[str]]:
    """Per region: the deviation control chart as SVG with its capability, and notes where none can be drawn."""
    names = sorted({r["region_name"] for c in cards for r in c.regions})
    charts, notes = [], []
    for name in names:
        values, verdicts = [], []
        for c in cards:
            r = next((r for r in c.regions if r["region_name"] == name), None)
            if r is None:
                continue
            d = r.get("deviation_deg")
            values.append(None if d is None else float(d))
            verdicts.append(c.verdict)
        tol = tolerances.get(name)
        try:
            chart = individuals_chart(values)
        except InputError as exc:
            notes.append(f"{name}: no control chart ({exc})")
            continue
        cap_text = ""
        if tol is not None:
            cap = capability(values, -tol, tol)
            cap_text = f"Cp {_num(cap.cp)}, Cpk {_num(cap.cpk)} (n = {cap.n}, within sigma {cap.sigma:.3f}°)"
        title = f"{name}: deviation from the expected lay, individuals chart"
        charts.append(RegionChart(name, control_chart_svg(title, chart, verdicts, tolerance=tol), cap_text))
    return charts, notes


def _num(v: float | None) -> str:
    return "n/a" if v is None or not math.isfinite(v) else f"{v:.2f}"


@dataclass
class PartView:
    card: PartCard
    result: dict[str, Any]
    prev_position: int | None
    next_position: int | None
    regions: list[dict[str, Any]]  # the result's regions, each with 'rose_svg' and numbered 'patches'
    patches: list[dict[str, Any]]  # every patch of every region, numbered on the page


def part_view(arc: archive.Archive, batch_id: str, position: int) -> PartView | None:
    """The part at ``position`` of the batch (None when there is none), with its neighbours."""
    rows = arc.parts(batch_id)  # the neighbours need the part rows only
    index = next((i for i, p in enumerate(rows) if p.position == position), None)
    if index is None:
        return None
    row = rows[index]
    regions_rows = arc.regions(batch_id, row.part_key)
    devs = [abs(r["deviation_deg"]) for r in regions_rows if r.get("deviation_deg") is not None]
    own = [d for d in arc.dispositions(batch_id) if d.part_key == row.part_key]
    card = PartCard(row, verdict_of(row), max(devs) if devs else None, regions_rows, own)
    result = arc.read_result(card.row) if card.row.result_sha256 else {}
    regions, patches = [], []
    for reg in result.get("regions", []):
        view = dict(reg)
        hist = reg.get("histogram") or {}
        expected = reg.get("expected_lay_deg")
        expected = expected if isinstance(expected, list) else ([] if expected is None else [expected])
        view["rose_svg"] = (
            rose_svg(hist["bin_edges_deg"], hist["weights"], expected_deg=expected) if hist.get("weights") else ""
        )
        view["spectrum_svg"], view["spectrum_caption"] = _spectrum_rose(reg, expected)
        view["expected_text"] = ", ".join(format_angle(e) for e in expected) or "-"
        view["patch_numbers"] = []
        for p in reg.get("patches", []):
            number = len(patches) + 1
            patches.append({**p, "number": number, "region": reg["name"]})
            view["patch_numbers"].append(number)
        regions.append(view)
    prev_position = rows[index - 1].position if index > 0 else None
    next_position = rows[index + 1].position if index + 1 < len(rows) else None
    return PartView(card, result, prev_position, next_position, regions, patches)


def _spectrum_rose(reg: dict[str, Any], expected: list) -> tuple[str, tuple[str, ...]]:
    """A crossed region's angular spectrum as the report draws it (30 dB rose, its directions), or nothing."""
    petals = spectrum_petals(reg) if reg.get("lay_pattern") == "crossed" else None
    if petals is None:
        return "", ()
    found = [v for v in (reg.get("extra") or {}).get("crossed_lay_deg") or [] if isinstance(v, (int, float))]
    svg = rose_svg(*petals, expected_deg=expected, measured_deg=found, range_db=SPECTRUM_RANGE_DB)
    return svg, spectrum_caption(reg)


def tolerances_of(arc: archive.Archive, cards: list[PartCard]) -> dict[str, float]:
    """Each region's tolerance, read from the first stored result that has the region."""
    for c in cards:
        if c.row.result_sha256 and c.regions:
            result = arc.read_result(c.row)
            return {r["name"]: float(r["tolerance_deg"]) for r in result.get("regions", []) if "tolerance_deg" in r}
    return {}


def needs_disposition(verdict: str) -> bool:
    return verdict in NEEDS_DISPOSITION


__all__ = [
    "VERDICTS",
    "VERDICT_LOOKS",
    "VERDICT_SHAPES",
    "PartVerdict",
    "batch_summaries",
    "part_cards",
    "filter_and_sort",
    "batch_charts",
    "part_view",
    "tolerances_of",
    "needs_disposition",
]
