"""The recipe page: a recipe drawn on a reference photo, checked and measured as it is drawn, then saved.

The page edits the recipe as the mapping its YAML file holds. Every check
turns that mapping into the text Save would write (:func:`recipe_text`) and
reads it with :func:`surfinspect.recipe.parse_recipe`, the loader of
``surfinspect check``, so the page shows exactly the messages ``check`` would
print for the saved file; then each region is placed on the reference through
the engine's own ``frame_for`` and ``region_masks`` (the messages of
``surfinspect inspect``: a region outside the image, a part frame not found).
The preview measures one region with ``measure.engine.inspect_region``, the
code ``inspect_image`` runs per region, on the reference kept in memory with
its noise level: only that region's bounding box is read.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import re
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from .. import fsutil
from ..errors import InputError, RecipeError
from ..formatting import format_angle, format_fixed, format_signed_angle, region_lay_text
from ..inputs import read_regular_file, text_problem
from ..measure import engine
from ..measure.datum import DatumError
from ..measure.imaging import decode_image, read_image_bytes
from ..measure.noise import noise_sigma
from ..recipe import LAY_SPELLINGS, REGION_DEFAULTS, LayPattern, Recipe, parse_recipe
from ..recipe_writer import REFERENCE_COMMENT, header_comments, recipe_mapping, recipe_text
from ..report.scene import build_scene
from ..results import DatumInfo, ImageInfo, PartResult, PartVerdict, RecipeInfo, region_to_dict

#: Names a saved recipe may take: one file in the station's recipe folder, nothing else.
FILE_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,99}\.ya?ml$")
#: Media types the browser shows as they are; any other reference is sent as an 8-bit PNG.
_SHOWN_AS_IS = {b"\x89PNG": "image/png", b"\xff\xd8\xff": "image/jpeg"}
#: ``file:line: `` at the start of a loader's problem line.
_WHERE = re.compile(r"^[^:]*:\d+: ")
#: The glyph lattice of the preview: cells closer than this (image px) are thinned out.
PREVIEW_GLYPH_SPACING_PX = 12.0


@dataclass
class Reference:
    """A reference photo held in memory: its pixels, noise level and the frames found on it."""

    name: str
    sha256: str
    pixels: np.ndarray
    bit_depth: int
    shown: bytes  # what the page's <img> gets
    shown_type: str
    _noise: float | None = None
    _frames: dict = field(default_factory=dict)
    lock: threading.Lock = field(default_factory=threading.Lock)

    @property
    def width(self) -> int:
        return int(self.pixels.shape[1])

    @property
    def height(self) -> int:
        return int(self.pixels.shape[0])

    def noise_sigma(self) -> float:
        if self._noise is None:
            self._noise = noise_sigma(self.pixels)  # of the whole image, as inspect_image computes it
        return self._noise

    def frame(self, recipe: Recipe) -> tuple[engine.Frame, DatumInfo]:
        """The recipe's datum frame on this photo (found once per datum, pixel size and rotation)."""
        key = (recipe.datum, recipe.pixel_size_mm, recipe.camera_rotation_deg)
        if key not in self._frames:
            try:
                self._frames[key] = engine.frame_for(recipe, self.pixels)
            except DatumError as exc:
                self._frames[key] = exc
        found = self._frames[key]
        if isinstance(found, Exception):
            raise found
        return found


def reference_from_bytes(data: bytes, name: str) -> Reference:
    """Decode a reference photo with the engine's strict reader (the checks ``inspect`` makes)."""
    pixels, bit_depth = decode_image(data, name)
    kind = next((t for magic, t in _SHOWN_AS_IS.items() if data.startswith(magic)), None)
    if kind is None:
        import cv2

        ok, png = cv2.imencode(".png", np.round(pixels * 255).astype(np.uint8))
        shown, kind = png.tobytes(), "image/png"
    else:
        shown = data
    reference = Reference(name, hashlib.sha256(data).hexdigest(), pixels, bit_depth, shown, kind)
    reference.noise_sigma()  # once, now: the first preview then costs what every other one does
    return reference


def reference_from_file(path: str | Path) -> Reference:
    data = read_image_bytes(path)
    return reference_from_bytes(data, str(path))


# ------------------------------------------------------------------ the recipe being drawn


def new_recipe(reference: Reference) -> dict[str, Any]:
    """A first recipe for a photo: named after it, revision 1, the image frame, no region yet."""
    stem = re.sub(r"[^a-z0-9-]+", "-", Path(reference.name).stem.lower()).strip("-") or "new-part"
    return {"recipe": stem, "revision": 1, "datum": "image", "regions": []}


@dataclass(frozen=True)
class Loaded:
    """An existing recipe read for editing: its mapping, header comments and revision."""

    mapping: dict
    comments: list[str]
    file_name: str
    revision: int


def load_for_editing(text: str, file_name: str) -> Loaded:
    """An existing recipe's text, validated by the loader, as the page edits it.

    Raises
    ------
    RecipeError
        With every problem ``check`` would name: an invalid recipe is not loaded.
    """
    recipe = parse_recipe(text, file_name)
    return Loaded(recipe_mapping(text, file_name), header_comments(text), Path(file_name).name, recipe.revision)


def printable(comment: str) -> bool:
    """A comment line the saved file may carry (printable text, bounded)."""
    return text_problem(comment, max_chars=200) is None


def allowed_name(name: str) -> str:
    """``name`` made a file name :data:`FILE_NAME` allows (other characters become '-'), ending in .yaml."""
    path = Path(str(name))
    suffix = path.suffix if path.suffix in (".yaml", ".yml") else ".yaml"
    stem = re.sub(r"[^A-Za-z0-9._-]+", "-", path.stem if path.suffix == suffix else path.name).strip(".-_")[:95]
    return f"{stem or 'recipe'}{suffix}"


def _source(file_name: str) -> str:
    return file_name if FILE_NAME.match(file_name or "") else "recipe.yaml"


def file_text(
    mapping: dict, reference: Reference, comments: Sequence[str] = (), now: _dt.datetime | None = None
) -> str:
    """The text Save writes: the leading comments, the reference image's line, the recipe's keys."""
    stamp = (now or _dt.datetime.now(_dt.timezone.utc)).strftime("%Y-%m-%d %H:%M UTC")
    line = f"{REFERENCE_COMMENT} {Path(reference.name).name} sha256 {reference.sha256}, drawn and saved {stamp}"
    return recipe_text(mapping, comments=[*comments, line])


def check(
    mapping: Any, file_name: str, reference: Reference, comments: Sequence[str] = ()
) -> tuple[Recipe | None, list[str]]:
    """The problems ``surfinspect check`` would print for the saved file, then those ``inspect`` would meet.

    The recipe is read as the very text Save writes (:func:`file_text`, comments included), so
    the line numbers are those of the saved file. Returns the parsed recipe (None when the
    loader refused it) and the problem lines.
    """
    if not isinstance(mapping, dict):
        return None, ["the recipe must be a mapping of keys such as recipe, revision, regions"]
    source = _source(file_name)
    try:
        recipe = parse_recipe(file_text(mapping, reference, comments), source)
    except RecipeError as exc:
        return None, list(exc.problems)
    problems = []
    with reference.lock:
        try:
            frame, _ = reference.frame(recipe)
        except DatumError as exc:
            return recipe, [f"{source}: datum: part frame not found on the reference photo: {exc}"]
    for region in recipe.regions:
        try:
            engine.region_masks(region, frame, reference.pixels.shape, source)
        except InputError as exc:
            problems.append(str(exc))
    return recipe, problems


def frame_view(recipe: Recipe | None, reference: Reference) -> dict | None:
    """The datum frame as the page draws it: frame units -> image px is ``origin + ppu * R(rotation)``."""
    if recipe is None:
        return None
    try:
        with reference.lock:
            frame, datum = reference.frame(recipe)
    except DatumError:
        return None
    return {
        "origin_px": [round(float(v), 4) for v in frame.origin_px],
        "rotation_deg": round(float(frame.rotation_deg), 5),
        "px_per_unit": float(frame.px_per_unit),
        "kind": datum.kind,
        "size_px": None if datum.size_px is None else [round(float(v), 2) for v in datum.size_px],
        "pixel_size_mm": recipe.pixel_size_mm,
    }


def preview(mapping: Any, index: Any, file_name: str, reference: Reference) -> dict:
    """Measure one region of the recipe on the reference: the numbers and glyphs ``inspect`` would give.

    Raises
    ------
    InputError
        When the recipe does not load, or the region cannot be placed on the photo
        (the message is the one ``check`` or ``inspect`` prints).
    """
    if not isinstance(mapping, dict) or not isinstance(mapping.get("regions"), list):
        raise InputError("the recipe must be a mapping with a list of regions")
    regions = mapping["regions"]
    if not isinstance(index, int) or isinstance(index, bool) or not 0 <= index < len(regions):
        raise InputError(f"region: no region number {index!r} (allowed 0 to {len(regions) - 1})")
    source = _source(file_name)
    try:  # the region alone, with the recipe's other keys: a problem elsewhere does not stop its preview
        recipe = parse_recipe(recipe_text({**mapping, "regions": [regions[index]]}), source)
    except RecipeError as exc:  # the line numbers are the one-region text's: the check names the file's
        problems = [_WHERE.sub("", p, count=1) for p in exc.problems]
        raise InputError(problems[0], problems) from None
    (region,) = recipe.regions
    start = time.perf_counter()
    with reference.lock:
        try:
            frame, datum = reference.frame(recipe)
        except DatumError as exc:
            raise InputError(f"{source}: datum: part frame not found on the reference photo: {exc}") from None
        result = engine.inspect_region(reference.pixels, recipe, region, frame, reference.noise_sigma())
    elapsed = time.perf_counter() - start
    return _preview_view(result, datum, reference, elapsed, recipe)


def _preview_view(result, datum: DatumInfo, reference: Reference, elapsed: float, recipe: Recipe) -> dict:
    """What the page shows of one measured region, printed as ``inspect`` prints it."""
    d = region_to_dict(result)  # the JSON form: the numbers inspect prints are rounded from it
    lay_text, shown = region_lay_text(d)
    part = PartResult(
        name="reference",
        image=ImageInfo("", reference.sha256, reference.width, reference.height, reference.bit_depth),
        recipe=RecipeInfo(recipe.name, recipe.revision, ""),
        verdict=PartVerdict.ACCEPT,
        regions=(result,),
        inspected_at="",
        engine_version="",
        datum=datum,
    )
    (scene,) = build_scene(
        part, reference.width, reference.height, min_glyph_spacing_px=PREVIEW_GLYPH_SPACING_PX
    ).regions

    def segments(a) -> list:
        return np.round(np.asarray(a, dtype=float).reshape(-1, 4), 1).tolist()

    measured = d["lay_deg"]
    pattern = d["lay_pattern"]
    use = None
    if measured is not None and pattern == LayPattern.DIRECTIONAL.value:
        use = float(format_fixed(measured, 1))
        use = 0.0 if use >= 180 else use
    return {
        "region": d["name"],
        "verdict": d["verdict"],
        "lay": lay_text,
        "lay_is": shown,
        "lay_deg": measured,
        "deviation": format_signed_angle(d["deviation_deg"]),
        "uncertainty": format_angle(d["uncertainty_deg"]),
        "coherence": format_fixed(d["coherence"], 3),
        "deviating": f"{format_fixed(100 * (d['deviating_area_fraction'] or 0.0), 1)} %",
        "reasons": d["reasons"],
        "use_measured": use,
        "crossed_peaks": _crossed_peaks(d),
        "glyphs": segments(scene.glyphs),
        "deviating_glyphs": segments(scene.deviating_glyphs),
        "patches": [list(p.bbox_px) for p in scene.patches],
        "elapsed_ms": round(1000 * elapsed, 1),
    }


def _crossed_peaks(d: dict) -> list[float]:
    """Both measured directions of a crossed lay, to 0.1 degree; none unless both were found."""
    peaks = (d.get("extra") or {}).get("crossed_lay_deg") or []
    if len(peaks) != 2 or any(v is None for v in peaks):
        return []
    return [float(format_fixed(v, 1)) % 180 for v in peaks]


# ------------------------------------------------------------------ saving


@dataclass(frozen=True)
class Saved:
    path: Path
    revision: int
    kept: Path | None  # where the file it replaced was kept
    text: str


class SaveRefused(InputError):
    """Saving would replace a file the person was not asked about."""


def save(
    folder: Path,
    file_name: str,
    mapping: Any,
    *,
    reference: Reference,
    base_revision: int | None,
    comments: list[str],
    overwrite: bool,
    now: _dt.datetime | None = None,
) -> Saved:
    """Write the recipe into ``folder/file_name`` atomically, after the checks the page made.

    The revision is the loaded one plus one when an existing recipe was edited
    (and above the revision of a file it replaces); a file that exists is
    replaced only with ``overwrite`` and is first kept beside it as
    ``<stem>.rev<N>.yaml``, so the old revision stays readable.

    Raises
    ------
    InputError
        For a bad file name or a recipe with problems (their lines in ``problems``).
    SaveRefused
        When the file exists and ``overwrite`` is false.
    """
    if not FILE_NAME.match(file_name or ""):
        raise InputError(
            f"file name: not allowed (got {file_name[:120]!r}; allowed letters, digits, '.', '_' and '-', "
            "ending in .yaml, no folder)"
        )
    if not isinstance(mapping, dict):
        raise InputError("the recipe must be a mapping of keys such as recipe, revision, regions")
    target = folder / file_name
    old_text, old_revision = _existing(target)
    if old_text is not None and not overwrite:
        rev = "" if old_revision is None else f" (revision {old_revision})"
        raise SaveRefused(
            f"{file_name} exists{rev}; replace it? It will be kept as {_kept_name(target, old_revision).name}"
        )
    revision = mapping.get("revision", 1)
    if base_revision is not None:
        revision = base_revision + 1
    if old_revision is not None and isinstance(revision, int) and revision <= old_revision:
        revision = old_revision + 1
    mapping = {**mapping, "revision": revision}
    recipe, problems = check(mapping, file_name, reference, comments)
    if problems:
        raise InputError(problems[0], problems)
    text = file_text(mapping, reference, comments, now)
    kept = None
    if old_text is not None:
        kept = _kept_name(target, old_revision)
        fsutil.write_bytes_atomic(kept, old_text)
    fsutil.write_text_atomic(target, text)
    return Saved(target, int(recipe.revision), kept, text)


def _existing(target: Path) -> tuple[bytes | None, int | None]:
    if not target.exists() and not target.is_symlink():
        return None, None
    try:
        data = read_regular_file(target, "recipe", max_bytes=2_000_000, follow_symlinks=False)
    except InputError:
        raise InputError(f"{target.name}: exists and is not a regular recipe file; choose another name") from None
    try:
        return data, parse_recipe(data.decode("utf-8"), target.name).revision
    except (RecipeError, UnicodeDecodeError):
        return data, None


def _kept_name(target: Path, revision: int | None) -> Path:
    """``<stem>.rev<N>.yaml`` beside the file (``-2``, ``-3``, ... when that name is taken)."""
    base = f"{target.stem}.rev{revision if revision is not None else 'unknown'}"
    candidate = target.with_name(base + target.suffix)
    n = 2
    while candidate.exists() or candidate.is_symlink():
        candidate = target.with_name(f"{base}-{n}{target.suffix}")
        n += 1
    return candidate


# ------------------------------------------------------------------ what the page starts with


def page_data(reference: Reference, loaded: Loaded | None) -> dict:
    """The page's starting state (sent as JSON inside the page): the recipe, the frame, defaults, spellings."""
    mapping = loaded.mapping if loaded else new_recipe(reference)
    file_name = allowed_name(loaded.file_name if loaded else f"{mapping['recipe']}.yaml")
    recipe, problems = check(mapping, file_name, reference, loaded.comments if loaded else ())
    return {
        "recipe": mapping,
        "comments": loaded.comments if loaded else [],
        "file_name": file_name,
        "base_revision": loaded.revision if loaded else None,
        "problems": problems,
        "frame": frame_view(recipe, reference),
        "image": {"width": reference.width, "height": reference.height, "name": Path(reference.name).name},
        "defaults": REGION_DEFAULTS,
        "spellings": {k: [p.value, a] for k, (p, a) in LAY_SPELLINGS.items()},
    }


__all__ = [
    "Reference",
    "reference_from_bytes",
    "reference_from_file",
    "Loaded",
    "load_for_editing",
    "check",
    "file_text",
    "allowed_name",
    "frame_view",
    "preview",
    "save",
    "SaveRefused",
    "printable",
    "page_data",
]
