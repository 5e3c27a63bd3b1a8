"""Orchestration shared by the commands that judge parts: read, inspect, write.

Per-part input errors (an unreadable image, a region outside it) are caught
here and become that part's outcome; nothing is written for such a part.
"""

from __future__ import annotations

import datetime as _dt
import socket
from dataclasses import dataclass
from pathlib import Path
from typing import Iterable, Sequence

import numpy as np

from ..errors import InputError
from ..fsutil import write_text_atomic
from ..measure.engine import inspect_image
from ..measure.imaging import IMAGE_SUFFIXES, LoadedImage, read_image
from ..recipe import Recipe
from ..results import EXIT_INPUT_ERROR, PartResult, PartVerdict, dumps, exit_code

#: Long side of the overlay PNG, px: a full-size overlay of a 12 MP brushed photo is ~25 MB.
OVERLAY_MAX_SIDE = 2000

__all__ = [
    "PartOutcome",
    "output_stems",
    "part_names",
    "inspect_path",
    "judge_path",
    "part_error_text",
    "find_images",
    "run_exit_code",
    "write_part_report",
]


@dataclass(frozen=True)
class PartOutcome:
    """One image's outcome: a result, or the input error that stopped it."""

    path: str
    stem: str  # the name of its output files (JSON, overlay)
    result: PartResult | None = None
    error: str | None = None
    json_path: str | None = None
    overlay_path: str | None = None
    name: str = ""  # the part's name in every output (see part_names)


def output_stems(paths: Sequence[str | Path]) -> list[str]:
    """Output names per image: the file stem, made unique by a numeric suffix on clashes."""
    seen: dict[str, int] = {}
    out = []
    for p in paths:
        stem = Path(p).stem
        n = seen.get(stem, 0)
        seen[stem] = n + 1
        out.append(stem if n == 0 else f"{stem}-{n + 1}")
    return out


def judge_path(path: str | Path, recipe: Recipe, name: str) -> tuple[LoadedImage, PartResult]:
    """Read one image and inspect it (no file is written); raises InputError as :func:`read_image` and the engine."""
    loaded = read_image(path)
    return loaded, inspect_image(loaded.pixels, recipe, name=name, image_info=loaded.info)


def part_error_text(exc: InputError, path: str | Path) -> str:
    """The one-line reason a part was not inspected; a recipe problem found on an image (a region outside it) names it."""
    text = str(exc)
    return text if str(path) in text else f"{path}: {text}"


def part_names(paths: Sequence[str | Path]) -> list[str]:
    """A part's name in every output: its image's file name, with as many of its folders as tell it apart.

    Two images that share a file name (from different folders) are named by their paths from the
    first folder where they differ (``line-1/lw-220-0001.png``, ``line-2/lw-220-0001.png``), so that
    nobody takes one panel for the other.
    """
    parts = [Path(p).parts for p in paths]
    names = []
    for mine in parts:
        depth = 1
        while depth < len(mine) and any(o != mine and o[-depth:] == mine[-depth:] for o in parts):
            depth += 1
        names.append("/".join(mine[-depth:]))
    return names


def inspect_path(
    path: str | Path,
    recipe: Recipe,
    out_dir: str | Path,
    stem: str,
    *,
    keep_pixels: bool = False,
    name: str | None = None,
) -> tuple[PartOutcome, np.ndarray | None]:
    """Read one image, inspect it and write ``<stem>.json`` and ``<stem>.overlay.png`` atomically.

    ``name`` is the part's name in the result (default: the image's file name).
    """
    name = name or Path(path).name
    from ..report.overlay import write_overlay_png

    try:
        loaded, result = judge_path(path, recipe, name)
        out = Path(out_dir)
        json_path = out / f"{stem}.json"
        overlay_path = out / f"{stem}.overlay.png"
        write_overlay_png(overlay_path, loaded.pixels, result, max_side=OVERLAY_MAX_SIDE)
        write_text_atomic(json_path, dumps(result))
    except InputError as exc:
        return PartOutcome(path=str(path), stem=stem, error=part_error_text(exc, path), name=name), None
    outcome = PartOutcome(
        path=str(path), stem=stem, result=result, json_path=str(json_path), overlay_path=str(overlay_path), name=name
    )
    return outcome, (loaded.pixels if keep_pixels else None)


def find_images(folder: str | Path, *, recursive: bool = False, exclude: Sequence[str | Path] = ()) -> list[Path]:
    """Image files in a folder, sorted by path; raises InputError when there are none.

    Overlay pictures this tool wrote (``*.overlay.png``) and anything under the
    ``exclude`` folders (a batch's own output and archive) are never parts.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"{folder}: not a folder of images")
    skip = [Path(e).resolve() for e in exclude]
    pattern = "**/*" if recursive else "*"

    def wanted(p: Path) -> bool:
        if not p.is_file() or p.suffix.lower() not in IMAGE_SUFFIXES or p.name.endswith(".overlay.png"):
            return False
        resolved = p.resolve()
        return not any(resolved.is_relative_to(d) for d in skip)

    files = sorted(p for p in folder.glob(pattern) if wanted(p))
    if not files:
        raise InputError(f"{folder}: no images found (allowed suffixes {', '.join(IMAGE_SUFFIXES)})")
    return files


def run_exit_code(outcomes: Sequence[PartOutcome]) -> int:
    """2 when any part had an input error, else the verdict code (0 accept, 1 reject, 3 review)."""
    if any(o.result is None for o in outcomes):
        return EXIT_INPUT_ERROR
    return exit_code([o.result.verdict for o in outcomes])


def write_part_report(
    path: str | Path,
    results: Sequence[PartResult],
    images: Sequence[np.ndarray | None],
    *,
    operator: str | None = None,
    report_id: str | None = None,
    batch_stats: bool = False,
) -> str:
    """Write the PDF report for these parts atomically; returns the report id."""
    from ..report.pdf import write_report

    now = _dt.datetime.now(_dt.timezone.utc)
    rid = report_id or f"{results[0].recipe.name}-{now.strftime('%Y%m%dT%H%M%SZ')}"
    write_report(
        path,
        results,
        images,
        report_id=rid,
        operator=operator,
        station=socket.gethostname(),
        generated_at=now,
        batch_stats=batch_stats,
    )
    return rid


def verdict_counts(results: Iterable[PartResult]) -> dict[str, int]:
    counts = {v.value: 0 for v in PartVerdict}
    for r in results:
        counts[r.verdict.value] += 1
    return counts
