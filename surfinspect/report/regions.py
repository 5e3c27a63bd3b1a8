"""A part's numbers in words: the region table, the patch table and the verdict sentence of a part page."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping
from xml.sax.saxutils import escape

from reportlab.lib import colors
from reportlab.lib.styles import ParagraphStyle
from reportlab.platypus import Paragraph, Table

from ..formatting import format_angle, format_fixed, format_signed_angle
from ..pdfa.fonts import SANS_BOLD
from ..results import (
    PartResult,
    PartVerdict,
    RegionResult,
    RegionVerdict,
)
from .layout import _CELL, _CELL_BOLD, _REGION_SEVERITY, _percent, _table, _tint
from .scene import REGION_LOOKS, patch_label


@dataclass(frozen=True)
class _PartFigures:
    """The numbers of one part as the JSON prints them."""

    part: PartResult
    regions: tuple[dict, ...]  # region_to_dict of each region

    @property
    def worst(self) -> tuple[RegionResult, dict] | None:
        if not self.part.regions:
            return None

        def size(d: dict) -> float:
            value = worst_deviation(d)[0]
            return -1.0 if value is None else abs(value)

        k = max(
            range(len(self.part.regions)),
            key=lambda i: (_REGION_SEVERITY[self.part.regions[i].verdict], size(self.regions[i]), -i),
        )
        return self.part.regions[k], self.regions[k]


def worst_deviation(d: dict) -> tuple[float | None, str]:
    """The larger deviation of a region (JSON form): its lay's, or its worst patch's; and which ("region", "patch")."""
    value, which = d["deviation_deg"], "region"
    for patch in d.get("patches", ()):
        dev = patch.get("deviation_deg")
        if dev is not None and (value is None or abs(dev) > abs(value)):
            value, which = dev, "patch"
    return value, which


_CENTRED = ("circular", "radial")  # the expected lay turns about a centre, cell by cell
_UNDIRECTED = ("multidirectional", "particulate")  # no direction may dominate
_JUDGED_ANGLE = ("directional", "crossed", *_CENTRED)  # patterns whose tolerance_deg applies
#: ISO 1302 lay symbols of the patterns that have no angle of their own (common drawing practice).
_ISO_1302_SYMBOL = {"crossed": "X", "multidirectional": "M", "particulate": "P", "circular": "C", "radial": "R"}


def _expected_text(region: RegionResult) -> str:
    """What the recipe asks, in words where the lay has no one angle."""
    pattern = region.lay_pattern
    if pattern == "circular":
        return "tangent to circles"
    if pattern == "radial":
        return "along radii"
    if pattern in _UNDIRECTED:
        return "no dominant lay"
    if pattern == "any":
        return "any (not judged)"
    angles = region.expected_angles
    return " / ".join(format_angle(v, axial=True) for v in angles) if angles else "—"


def _tolerance_text(region: RegionResult, d: Mapping) -> str:
    if region.lay_pattern == "any":
        return "not judged"
    if region.lay_pattern not in _JUDGED_ANGLE:
        return "—"
    return f"± {format_angle(d['tolerance_deg'])}"


def _measured_text(region: RegionResult, d: Mapping) -> str:
    """The measured lay as the region's pattern has it; "no texture" only when there is none."""
    if region.verdict is RegionVerdict.NO_TEXTURE:
        return "no-texture"
    pattern = region.lay_pattern
    if pattern in _CENTRED:
        return "per cell (picture)"
    if pattern in _UNDIRECTED:
        return "no single lay"
    if pattern == "crossed" and isinstance(d["extra"].get("crossed_lay_deg"), list):
        found = d["extra"]["crossed_lay_deg"]
        unc = d["extra"].get("crossed_uncertainty_deg")
        unc = unc if isinstance(unc, list) and len(unc) == len(found) else [None] * len(found)
        return " / ".join(
            "not found"
            if v is None
            else format_angle(v, axial=True) + (f", U = {format_angle(u)}" if isinstance(u, (int, float)) else "")
            for v, u in zip(found, unc)
        )
    if d["lay_deg"] is None:
        return "—"
    text = format_angle(d["lay_deg"], axial=True)
    if d["uncertainty_deg"] is not None:
        # expanded uncertainty as the GUM writes it (JCGM 100:2008, 7.2.4): U = k u_c, here k = 2
        text += f", U = {format_angle(d['uncertainty_deg'])}"
    return text


def _deviation_note(region: RegionResult) -> str:
    if region.lay_pattern in _CENTRED:
        return "mean of cells"
    if region.lay_pattern == "crossed":
        return "larger of two"
    return ""


def _coherence_of(region: RegionResult, d: Mapping) -> tuple[float | None, str]:
    """The coherence the verdict rests on, and a note when it is not the region-summed one.

    For circular or radial lay the region-summed tensor is nearly isotropic by
    design (the lay turns), and the judge uses the cells' mean coherence.
    """
    if region.verdict is RegionVerdict.NO_TEXTURE:
        return d["coherence"], ""
    mean_cells = d["extra"].get("mean_cell_coherence")
    if region.lay_pattern in _CENTRED and isinstance(mean_cells, (int, float)):
        return float(mean_cells), "cell mean"
    return d["coherence"], ""


def _figures_text(region: RegionResult, d: Mapping) -> str:
    """The pattern's own figures from the result file (``extra``), in words; nothing is left out."""
    extra = dict(d["extra"])
    said = []
    centre = extra.pop("centre_px", None)
    fitted = extra.pop("centre_fitted", False)
    if centre is not None:
        where = ", ".join(format_fixed(v, 1) for v in centre)
        said.append(f"centre ({where}) px in the image, {'fitted to the cell lays' if fitted else 'from the recipe'}")
    if "rms_cell_deviation_deg" in extra:
        said.append(f"RMS cell deviation {format_angle(extra.pop('rms_cell_deviation_deg'))}")
    if "mean_cell_coherence" in extra:
        extra.pop("mean_cell_coherence")
        if region.lay_pattern in _CENTRED:
            said.append(
                f"region-summed coherence {format_fixed(d['coherence'], 3)} (not judged: the lay turns across the region)"
            )
    found = extra.pop("crossed_lay_deg", None)
    devs = extra.pop("crossed_deviation_deg", None)
    if isinstance(found, list) and isinstance(devs, list):
        grains = [
            "not found" if v is None else f"{format_angle(v, axial=True)} ({format_signed_angle(dv)})"
            for v, dv in zip(found, devs)
        ]
        said.append("grains " + " and ".join(grains))
    extra.pop("angular_spectrum", None)  # drawn beside the histogram
    unc = extra.pop("crossed_uncertainty_deg", None)
    if isinstance(unc, list) and any(isinstance(u, (int, float)) for u in unc):
        said.append(
            "U (k = 2) " + " and ".join("—" if u is None else format_angle(u) for u in unc) + " from the spectrum"
        )
    if "balance" in extra:
        said.append(
            f"balance {format_fixed(extra.pop('balance'), 2)} (weaker family's share of the spectral energy, 0.50 = even)"
        )
    if "rayleigh_p" in extra:
        r = extra.pop("rayleigh_resultant_length", None)
        z = extra.pop("rayleigh_statistic", None)
        said.append(
            f"Rayleigh test of the cell lays: mean resultant length {format_fixed(r, 3)}, "
            f"statistic {format_fixed(z, 2)}, p = {extra.pop('rayleigh_p')}"
        )
    if "texture_to_noise" in extra:
        said.append(f"texture energy {format_fixed(extra.pop('texture_to_noise'), 1)}× the camera noise's")
    for key in sorted(extra):  # figures this report does not know by name are still shown
        said.append(f"{key.replace('_', ' ')} {extra[key]}")
    return "; ".join(escape(str(t)) for t in said)


_CELL_RIGHT = ParagraphStyle("cellr", parent=_CELL, alignment=2)


def _cell_with_note(text: str, note: str, *, right: bool = True):
    if not note:
        return text
    return Paragraph(f"{escape(text)}<br/><font size=6>{escape(note)}</font>", _CELL_RIGHT if right else _CELL)


def _region_table(fig: _PartFigures) -> Table:
    header = [
        "Region",
        "Expected lay",
        "Tolerance",
        "Measured lay, U (k = 2)",
        "Deviation",
        "Coherence",
        "Deviating area",
        "Verdict",
    ]
    rows = [header]
    style = []
    for region, d in zip(fig.part.regions, fig.regions):
        look = REGION_LOOKS[region.verdict]
        name = escape(region.name)
        if region.lay_pattern != "directional":
            symbol = _ISO_1302_SYMBOL.get(region.lay_pattern)
            pattern = f"{region.lay_pattern} lay" + (f", ISO 1302 {symbol}" if symbol else "")
            name += f"<br/><font size=6>({escape(pattern)})</font>"
        coherence, coherence_note = _coherence_of(region, d)
        row = len(rows)
        rows.append(
            [
                Paragraph(name, _CELL_BOLD),
                Paragraph(escape(_expected_text(region)), _CELL_RIGHT),
                _tolerance_text(region, d),
                Paragraph(escape(_measured_text(region, d)), _CELL_RIGHT),
                _cell_with_note(
                    format_signed_angle(d["deviation_deg"]),
                    _deviation_note(region) if d["deviation_deg"] is not None else "",
                ),
                _cell_with_note(format_fixed(coherence, 3), coherence_note),
                _percent(d["deviating_area_fraction"]),
                look.word,
            ]
        )
        style += [
            ("FONT", (-1, row), (-1, row), SANS_BOLD, 8),
            ("BACKGROUND", (-1, row), (-1, row), _tint(look.colour, 0.55)),
            ("ALIGN", (1, row), (-2, row), "RIGHT"),
        ]
        last = row
        lines = []
        if region.reasons:
            lines.append("<i>Reasons:</i> " + "; ".join(escape(r) for r in region.reasons))
        figures = _figures_text(region, d)
        if figures:
            lines.append(f"<font size=6.5><i>Figures:</i> {figures}</font>")
        if lines:
            rows.append([Paragraph("<br/>".join(lines), _CELL), "", "", "", "", "", "", ""])
            last = row + 1
            style.append(("SPAN", (0, last), (-1, last)))
        if region.verdict is RegionVerdict.FAIL:  # a heavy rule beside failing rows, for grey print
            style.append(("LINEBEFORE", (0, row), (0, last), 2.5, colors.black))
    widths = [92, 70, 48, 92, 52, 50, 50, 69]
    return _table(rows, widths, style)


def _patch_table(fig: _PartFigures) -> Table | None:
    rows = [["Region", "Patch", "Box x, y, w, h (px)", "Part frame x, y, w, h (mm)", "Share", "Lay", "Deviation"]]
    for region, d in zip(fig.part.regions, fig.regions):
        for n, p in enumerate(d["patches"], start=1):
            size = "—" if "position_mm" not in p else ", ".join(format_fixed(v, 1) for v in p["position_mm"])
            rows.append(
                [
                    region.name,
                    patch_label(n),
                    ", ".join(str(v) for v in p["bbox_px"]),
                    size,
                    _percent(p["area_fraction"]),
                    format_angle(p["lay_deg"], axial=True),
                    format_signed_angle(p["deviation_deg"]),
                ]
            )
    if len(rows) == 1:
        return None
    return _table(rows, [100, 36, 110, 120, 45, 56, 56], [("ALIGN", (1, 1), (-1, -1), "RIGHT")])


def _verdict_sentence(part: PartResult) -> str:
    """One sentence that says why the part got its verdict."""
    why = [
        f"{r.name}: {r.reasons[0] if r.reasons else REGION_LOOKS[r.verdict].word.lower()}"
        for r in part.regions
        if r.verdict is not RegionVerdict.PASS
    ]
    why = list(part.reasons) + why
    if part.verdict is PartVerdict.ACCEPT:
        n = len(part.regions)
        if why:
            return "; ".join(why)
        return "The region is within its limits." if n == 1 else f"All {n} regions are within their limits."
    lead = "Reject" if part.verdict is PartVerdict.REJECT else "Review"
    return f"{lead}: " + "; ".join(why)
