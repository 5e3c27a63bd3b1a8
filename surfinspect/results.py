"""Result dataclasses and their versioned JSON form.

The JSON form is a contract with other programs (line controllers, shop-floor
systems): ``schema`` names its version, and the keys listed in the project's
README are fixed. Everything here is plain data; no computation beyond the
part verdict rule and no file I/O.
"""

from __future__ import annotations

import enum
import json
from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

import numpy as np

from . import errors

SCHEMA = "surfinspect.part-result/1"

#: Printed on every report, study page and target sheet.
CAUTION = (
    "The measurement supports, and does not replace, the qualified inspector's decision "
    "and the customer's specification."
)


class RegionVerdict(str, enum.Enum):
    """Outcome of one region."""

    PASS = "pass"
    FAIL = "fail"
    NO_TEXTURE = "no-texture"
    REVIEW = "review"  # measured, but what the camera could not see or measure is too much to judge


class PartVerdict(str, enum.Enum):
    """Outcome of one part; ordered from best to worst by :data:`EXIT_CODES`."""

    ACCEPT = "accept"
    REJECT = "reject"
    REVIEW = "review"


#: The word for a part whose image could not be inspected (unreadable, refused): in JSON, CSV,
#: ``show``, the console and the PDF alike. It is not a verdict; it counts as needing review.
NOT_INSPECTED = "not-inspected"

#: Exit code of a command that judged parts, by the worst part verdict (fixed).
EXIT_CODES = {PartVerdict.ACCEPT: 0, PartVerdict.REJECT: 1, PartVerdict.REVIEW: 3}
EXIT_INPUT_ERROR = errors.EXIT_INPUT_ERROR


def part_verdict(region_verdicts: Sequence[RegionVerdict]) -> PartVerdict:
    """Combine region verdicts: any fail rejects, else any no-texture or review asks for review."""
    if any(v is RegionVerdict.FAIL for v in region_verdicts):
        return PartVerdict.REJECT
    if any(v in (RegionVerdict.NO_TEXTURE, RegionVerdict.REVIEW) for v in region_verdicts):
        return PartVerdict.REVIEW
    return PartVerdict.ACCEPT


def exit_code(verdicts: Sequence[PartVerdict]) -> int:
    """Exit code for a run over several parts: 1 if any reject, 3 if any review, else 0."""
    if any(v is PartVerdict.REJECT for v in verdicts):
        return EXIT_CODES[PartVerdict.REJECT]
    if any(v is PartVerdict.REVIEW for v in verdicts):
        return EXIT_CODES[PartVerdict.REVIEW]
    return EXIT_CODES[PartVerdict.ACCEPT]


@dataclass(frozen=True)
class ImageInfo:
    path: str
    sha256: str
    width: int
    height: int
    bit_depth: int


@dataclass(frozen=True)
class RecipeInfo:
    name: str
    revision: int
    sha256: str


@dataclass(frozen=True)
class Histogram:
    """Orientation histogram of the lay over [0, 180) degrees (part frame)."""

    bin_edges_deg: tuple[float, ...]
    weights: tuple[float, ...]


@dataclass(frozen=True)
class Patch:
    """A connected group of deviating cells.

    ``bbox_px`` is ``(x, y, w, h)`` in image pixels from the image's top-left.
    """

    bbox_px: tuple[int, int, int, int]
    area_fraction: float
    lay_deg: float
    deviation_deg: float
    area_px: int
    bbox_mm: tuple[float, float] | None = None  # (width, height) in mm, when the recipe gives pixel_size_mm
    area_mm2: float | None = None
    # (x, y, w, h) in mm in the part frame (from the datum origin, y down), when the recipe gives pixel_size_mm:
    # the box of the patch's cells as a drawing would dimension it (for a rotated frame, the box around them)
    position_mm: tuple[float, float, float, float] | None = None
    length_px: float = 0.0  # extent of the patch's cells along the patch's own lay
    cells: int = 0  # number of cells in the patch


@dataclass(frozen=True)
class CellGrid:
    """The local map of one region on a grid of square cells.

    Arrays have shape ``(rows, cols)``; cell ``(i, j)`` covers image pixels
    ``x0 + j*cell_px .. x0 + (j+1)*cell_px`` by ``y0 + i*cell_px ..``.
    ``lay_deg`` is NaN where the cell is not measured (outside the region, or
    without clear texture). ``expected_deg`` is the expected lay per cell (it
    varies for circular or radial lay).
    """

    origin_px: tuple[int, int]
    cell_px: int
    lay_deg: np.ndarray
    coherence: np.ndarray
    expected_deg: np.ndarray
    deviating: np.ndarray


@dataclass(frozen=True)
class RegionResult:
    name: str
    expected_lay_deg: float | tuple[float, ...] | None
    tolerance_deg: float
    lay_deg: float | None
    deviation_deg: float | None
    uncertainty_deg: float | None
    coherence: float
    deviating_area_fraction: float  # share of the region in patches of deviating lay
    patches: tuple[Patch, ...]
    histogram: Histogram
    verdict: RegionVerdict
    reasons: tuple[str, ...]
    lay_pattern: str = "directional"
    lay_symbol: str = ""  # the recipe's ``lay`` as its author wrote it ("parallel", "=", ...); "" when not given
    outline_px: tuple[tuple[tuple[float, float], ...], ...] = ()  # outer outline(s) in image px
    exclude_px: tuple[tuple[tuple[float, float], ...], ...] = ()
    cells: CellGrid | None = None
    extra: Mapping[str, Any] = field(default_factory=dict)  # pattern-specific figures

    @property
    def expected_angles(self) -> tuple[float, ...]:
        """The expected lay direction(s) as a tuple: one, two (crossed) or none."""
        e = self.expected_lay_deg
        if e is None:
            return ()
        return tuple(float(v) for v in e if v is not None) if isinstance(e, tuple) else (float(e),)


@dataclass(frozen=True)
class DatumInfo:
    """The part frame in image pixels."""

    kind: str  # "image" or "part-edge"
    rotation_deg: float  # counter-clockwise skew of the part frame against the image
    origin_px: tuple[float, float]
    fit_quality: float | None = None  # RMS distance of edge points to the fitted sides, px
    size_px: tuple[float, float] | None = None
    pixel_size_mm: float | None = None
    fit: Mapping[str, Any] | None = None  # further fit figures (filled share, corner error, ...)


@dataclass(frozen=True)
class PartResult:
    name: str
    image: ImageInfo
    recipe: RecipeInfo
    verdict: PartVerdict
    regions: tuple[RegionResult, ...]
    inspected_at: str
    engine_version: str
    datum: DatumInfo | None = None
    reasons: tuple[str, ...] = ()


# ---------------------------------------------------------------- JSON form


def _num(x: float | None, digits: int = 4) -> float | None:
    if x is None:
        return None
    x = float(x)
    if not np.isfinite(x):
        return None
    return round(x, digits)


def _grid(a: np.ndarray, digits: int) -> list:
    out = []
    for row in np.asarray(a, dtype=float):
        out.append([None if not np.isfinite(v) else round(float(v), digits) for v in row])
    return out


def _cells_to_dict(c: CellGrid) -> dict:
    return {
        "origin_px": list(c.origin_px),
        "cell_px": c.cell_px,
        "lay_deg": _grid(c.lay_deg, 2),
        "coherence": _grid(c.coherence, 3),
        "expected_deg": _grid(c.expected_deg, 2),
        "deviating": np.asarray(c.deviating, dtype=int).tolist(),
    }


def _cells_from_dict(d: Mapping[str, Any]) -> CellGrid:
    def arr(key: str) -> np.ndarray:
        return np.array([[np.nan if v is None else v for v in row] for row in d[key]], dtype=float).reshape(
            len(d[key]), -1
        )

    return CellGrid(
        origin_px=tuple(d["origin_px"]),
        cell_px=int(d["cell_px"]),
        lay_deg=arr("lay_deg"),
        coherence=arr("coherence"),
        expected_deg=arr("expected_deg"),
        deviating=np.array(d["deviating"], dtype=bool).reshape(len(d["deviating"]), -1),
    )


def _expected_to_json(e: float | tuple[float, ...] | None):
    if e is None:
        return None
    if isinstance(e, tuple):
        return [_num(v) for v in e]
    return _num(e)


def region_to_dict(r: RegionResult) -> dict:
    return {
        "name": r.name,
        "lay_pattern": r.lay_pattern,
        "lay_symbol": r.lay_symbol,
        "expected_lay_deg": _expected_to_json(r.expected_lay_deg),
        "tolerance_deg": _num(r.tolerance_deg),
        "lay_deg": _num(r.lay_deg, 3),
        "deviation_deg": _num(r.deviation_deg, 3),
        "uncertainty_deg": _num(r.uncertainty_deg, 3),
        "coherence": _num(r.coherence, 4),
        # the same share under two keys: the fixed contract's name, and the tool's one word for it
        "defect_area_fraction": _num(r.deviating_area_fraction, 5),
        "deviating_area_fraction": _num(r.deviating_area_fraction, 5),
        "patches": [
            {
                "bbox_px": list(p.bbox_px),
                "area_fraction": _num(p.area_fraction, 5),
                "lay_deg": _num(p.lay_deg, 2),
                "deviation_deg": _num(p.deviation_deg, 2),
                "area_px": p.area_px,
                "length_px": _num(p.length_px, 1),
                "cells": p.cells,
                **({"bbox_mm": [_num(v, 3) for v in p.bbox_mm]} if p.bbox_mm is not None else {}),
                **({"area_mm2": _num(p.area_mm2, 3)} if p.area_mm2 is not None else {}),
                **({"position_mm": [_num(v, 3) for v in p.position_mm]} if p.position_mm is not None else {}),
            }
            for p in r.patches
        ],
        "histogram": {
            "bin_edges_deg": [_num(v, 3) for v in r.histogram.bin_edges_deg],
            "weights": [_num(v, 6) for v in r.histogram.weights],
        },
        "verdict": r.verdict.value,
        "reasons": list(r.reasons),
        "outline_px": [[[_num(x, 2), _num(y, 2)] for x, y in poly] for poly in r.outline_px],
        "exclude_px": [[[_num(x, 2), _num(y, 2)] for x, y in poly] for poly in r.exclude_px],
        "cells": None if r.cells is None else _cells_to_dict(r.cells),
        "extra": dict(r.extra),
    }


def part_to_dict(p: PartResult) -> dict:
    """The JSON-ready form of a part result (schema ``surfinspect.part-result/1``)."""
    d = {
        "schema": SCHEMA,
        "engine_version": p.engine_version,
        "inspected_at": p.inspected_at,
        "name": p.name,
        "image": {
            "path": p.image.path,
            "sha256": p.image.sha256,
            "width": p.image.width,
            "height": p.image.height,
            "bit_depth": p.image.bit_depth,
        },
        "recipe": {"name": p.recipe.name, "revision": p.recipe.revision, "sha256": p.recipe.sha256},
        "verdict": p.verdict.value,
        "reasons": list(p.reasons),
        "datum": None
        if p.datum is None
        else {
            "kind": p.datum.kind,
            "rotation_deg": _num(p.datum.rotation_deg, 4),
            "origin_px": [_num(v, 3) for v in p.datum.origin_px],
            "fit_quality": _num(p.datum.fit_quality, 5),
            "size_px": None if p.datum.size_px is None else [_num(v, 2) for v in p.datum.size_px],
            "pixel_size_mm": p.datum.pixel_size_mm,
            "fit": None if p.datum.fit is None else dict(p.datum.fit),
        },
        "regions": [region_to_dict(r) for r in p.regions],
    }
    return d


def _tuple_or_float(e):
    if e is None:
        return None
    if isinstance(e, list):
        return tuple(float(v) for v in e)
    return float(e)


def region_from_dict(d: Mapping[str, Any]) -> RegionResult:
    return RegionResult(
        name=d["name"],
        lay_pattern=d.get("lay_pattern", "directional"),
        lay_symbol=d.get("lay_symbol", ""),
        expected_lay_deg=_tuple_or_float(d["expected_lay_deg"]),
        tolerance_deg=float(d["tolerance_deg"]),
        lay_deg=d["lay_deg"],
        deviation_deg=d["deviation_deg"],
        uncertainty_deg=d["uncertainty_deg"],
        coherence=float(d["coherence"] or 0.0),
        deviating_area_fraction=float(d.get("deviating_area_fraction", d.get("defect_area_fraction")) or 0.0),
        patches=tuple(
            Patch(
                bbox_px=tuple(int(v) for v in p["bbox_px"]),
                area_fraction=float(p["area_fraction"]),
                lay_deg=float(p["lay_deg"]) if p["lay_deg"] is not None else float("nan"),
                deviation_deg=float(p["deviation_deg"]) if p["deviation_deg"] is not None else float("nan"),
                area_px=int(p["area_px"]),
                length_px=float(p.get("length_px") or 0.0),
                cells=int(p.get("cells") or 0),
                bbox_mm=tuple(p["bbox_mm"]) if "bbox_mm" in p else None,
                area_mm2=p.get("area_mm2"),
                position_mm=tuple(p["position_mm"]) if "position_mm" in p else None,
            )
            for p in d["patches"]
        ),
        histogram=Histogram(tuple(d["histogram"]["bin_edges_deg"]), tuple(d["histogram"]["weights"])),
        verdict=RegionVerdict(d["verdict"]),
        reasons=tuple(d["reasons"]),
        outline_px=tuple(tuple((float(x), float(y)) for x, y in poly) for poly in d.get("outline_px", [])),
        exclude_px=tuple(tuple((float(x), float(y)) for x, y in poly) for poly in d.get("exclude_px", [])),
        cells=None if d.get("cells") is None else _cells_from_dict(d["cells"]),
        extra=d.get("extra", {}),
    )


def part_from_dict(d: Mapping[str, Any]) -> PartResult:
    """Rebuild a :class:`PartResult` from its JSON form (inverse of :func:`part_to_dict`)."""
    if d.get("schema") != SCHEMA:
        raise ValueError(f"schema: unknown result schema (got {d.get('schema')!r}, allowed {SCHEMA!r})")
    dt = d.get("datum")
    return PartResult(
        name=d["name"],
        image=ImageInfo(**d["image"]),
        recipe=RecipeInfo(**d["recipe"]),
        verdict=PartVerdict(d["verdict"]),
        regions=tuple(region_from_dict(r) for r in d["regions"]),
        inspected_at=d["inspected_at"],
        engine_version=d["engine_version"],
        reasons=tuple(d.get("reasons", ())),
        datum=None
        if dt is None
        else DatumInfo(
            kind=dt["kind"],
            rotation_deg=float(dt["rotation_deg"]),
            origin_px=tuple(dt["origin_px"]),
            fit_quality=dt.get("fit_quality"),
            size_px=None if dt.get("size_px") is None else tuple(dt["size_px"]),
            pixel_size_mm=dt.get("pixel_size_mm"),
            fit=dt.get("fit"),
        ),
    )


def dumps(p: PartResult) -> str:
    """Serialise a part result as indented, key-sorted JSON (deterministic)."""
    return json.dumps(part_to_dict(p), indent=2, sort_keys=True, ensure_ascii=False) + "\n"


def loads(text: str) -> PartResult:
    return part_from_dict(json.loads(text))


#: What a sign-off means; no word is shared with a part verdict (accept/reject/review) or a region
#: verdict (pass/fail/no-texture): released = may go on as judged, withheld = held back,
#: examined = read and checked without a release decision.
SIGNOFF_MEANINGS = ("released", "withheld", "examined")


@dataclass(frozen=True)
class DispositionNote:
    """A disposition as a signed edition prints it: what is to become of a doubtful part, who decided, when, why."""

    part_key: str
    decision: str  # use-as-is, rework, scrap, re-inspect
    signer_name: str
    decided_at_utc: str
    comment: str = ""
    disposition_no: int = 1


@dataclass(frozen=True)
class SignOff:
    """What a signed report shows in its sign-off block (filled by the archive)."""

    signer_name: str
    meaning: str  # one of SIGNOFF_MEANINGS
    signed_at_utc: str  # ISO 8601, UTC
    key_fingerprint: str  # SHA-256 of the raw Ed25519 public key, hex
    comment: str = ""
    record_sha256: str = ""  # hash of the canonical signed record
    report_sha256: str = ""  # hash of the unsigned batch report the signature covers
    chain_head: str = ""  # "N <sha256>": the archive's audit chain head the signature covers (an anchor on paper)
    dispositions: tuple[DispositionNote, ...] = ()  # the batch's dispositions this sign-off covers (printed with it)
    signoff_no: int = 1
    role: str = ""  # the signer's role in the register (inspector, quality, ...), printed beside the name
