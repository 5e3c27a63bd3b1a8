"""Recipes: YAML files that say where the regions are and how their lay is judged.

A recipe is parsed once into frozen dataclasses. Validation happens at load
time and reports every problem at once, each as
``file:line: key.path: what is wrong (got X, allowed Y)``. Unknown keys are
errors. See the README for the format.
"""

from __future__ import annotations

import enum
import hashlib
import math
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Callable

import yaml

from .errors import RecipeError

__all__ = ["LayPattern", "Shape", "Region", "Recipe", "load_recipe", "parse_recipe"]


class LayPattern(str, enum.Enum):
    """What lay a region must show. Accepted spellings include ISO 1302 lay symbols."""

    DIRECTIONAL = "directional"  # one direction given by lay_deg
    CROSSED = "crossed"  # two directions, lay_deg: [a, b]
    MULTIDIRECTIONAL = "multidirectional"  # no dominant direction
    PARTICULATE = "particulate"  # no dominant direction (blasted, non-directional)
    CIRCULAR = "circular"  # tangent to circles about a centre
    RADIAL = "radial"  # along radii from a centre
    ANY = "any"  # texture must be present; its direction is not judged


#: Spellings accepted for ``lay`` -> (pattern, fixed lay angle or None).
LAY_SPELLINGS: dict[str, tuple[LayPattern, float | None]] = {
    "directional": (LayPattern.DIRECTIONAL, None),
    "parallel": (LayPattern.DIRECTIONAL, 0.0),
    "=": (LayPattern.DIRECTIONAL, 0.0),
    "perpendicular": (LayPattern.DIRECTIONAL, 90.0),
    "⊥": (LayPattern.DIRECTIONAL, 90.0),
    "crossed": (LayPattern.CROSSED, None),
    "X": (LayPattern.CROSSED, None),
    "multidirectional": (LayPattern.MULTIDIRECTIONAL, None),
    "M": (LayPattern.MULTIDIRECTIONAL, None),
    "particulate": (LayPattern.PARTICULATE, None),
    "P": (LayPattern.PARTICULATE, None),
    "circular": (LayPattern.CIRCULAR, None),
    "C": (LayPattern.CIRCULAR, None),
    "radial": (LayPattern.RADIAL, None),
    "R": (LayPattern.RADIAL, None),
    "any": (LayPattern.ANY, None),
}

DATUMS = ("image", "part-edge")

#: Region parameters that ``defaults`` may set, with their built-in values.
REGION_DEFAULTS: dict[str, Any] = {
    "tolerance_deg": 3.0,
    "min_coherence": 0.2,
    "max_coherence": 0.1,
    "max_deviating_fraction": 0.02,
    "max_masked_fraction": 0.10,
    "max_unmeasured_fraction": 0.25,
    "cell_px": 24,
    "sigma_px": 1.0,
    "illumination_px": 12.0,
    "sharpness_period_px": 3.5,
}

SHAPE_KEYS = ("rect", "polygon", "circle", "annulus")

#: Keys renamed since: old name -> new name. The old name still loads, with a one-line notice.
RENAMED_KEYS = {"max_defect_fraction": "max_deviating_fraction"}


@dataclass(frozen=True)
class Shape:
    """A region shape in datum-frame units (pixels, or mm with ``pixel_size_mm``).

    Coordinates are measured from the datum origin (the image's top-left
    corner, or the part's top-left corner with ``datum: part-edge``): x along
    the frame's +X axis, y *downward* along the part, as a drawing dimensions
    from its top-left corner. Angles, in contrast, are counter-clockwise with
    +Y up.

    ``kind`` is one of ``rect`` (x, y, w, h), ``polygon`` ((x, y), ...),
    ``circle`` (cx, cy, r) or ``annulus`` (cx, cy, r_inner, r_outer).
    """

    kind: str
    params: tuple

    def outline(self, segments: int = 96) -> list[list[tuple[float, float]]]:
        """Closed outlines in frame units: one ring, or two (outer, inner) for an annulus."""
        if self.kind == "rect":
            x, y, w, h = self.params
            return [[(x, y), (x + w, y), (x + w, y + h), (x, y + h)]]
        if self.kind == "polygon":
            return [list(self.params)]
        t = [2 * math.pi * k / segments for k in range(segments)]
        if self.kind == "circle":
            cx, cy, r = self.params
            return [[(cx + r * math.cos(a), cy + r * math.sin(a)) for a in t]]
        cx, cy, ri, ro = self.params
        return [
            [(cx + ro * math.cos(a), cy + ro * math.sin(a)) for a in t],
            [(cx + ri * math.cos(a), cy + ri * math.sin(a)) for a in t],
        ]


@dataclass(frozen=True)
class Region:
    """One region of interest and how its lay is judged."""

    name: str
    shape: Shape
    exclude: tuple[Shape, ...] = ()
    lay: LayPattern = LayPattern.DIRECTIONAL
    lay_deg: tuple[float, ...] = ()  # one angle (directional), two (crossed), none otherwise
    centre: tuple[float, float] | None = None  # circular/radial; None = fitted
    tolerance_deg: float = REGION_DEFAULTS["tolerance_deg"]
    min_coherence: float = REGION_DEFAULTS["min_coherence"]
    max_coherence: float = REGION_DEFAULTS["max_coherence"]
    max_deviating_fraction: float = REGION_DEFAULTS["max_deviating_fraction"]
    max_masked_fraction: float = REGION_DEFAULTS["max_masked_fraction"]
    max_unmeasured_fraction: float = REGION_DEFAULTS["max_unmeasured_fraction"]
    cell_px: int = REGION_DEFAULTS["cell_px"]
    sigma_px: float = REGION_DEFAULTS["sigma_px"]
    illumination_px: float = REGION_DEFAULTS["illumination_px"]
    sharpness_period_px: float = REGION_DEFAULTS["sharpness_period_px"]
    line: int = 0
    lay_symbol: str = ""  # ``lay`` exactly as the recipe's author wrote it ("" when not given)

    @property
    def expected_lay_deg(self) -> float | tuple[float, ...] | None:
        if self.lay is LayPattern.DIRECTIONAL:
            return self.lay_deg[0]
        if self.lay is LayPattern.CROSSED:
            return self.lay_deg
        return None


@dataclass(frozen=True)
class Recipe:
    """A parsed, validated recipe."""

    name: str
    revision: int
    regions: tuple[Region, ...]
    datum: str = "image"
    pixel_size_mm: float | None = None
    camera_rotation_deg: float = 0.0
    saturation_level: float = 1.0
    description: str = ""
    path: str = "<memory>"
    sha256: str = ""
    notices: tuple[str, ...] = ()  # one line each: old key names read under their new names

    def units_to_px(self) -> float:
        """Pixels per recipe coordinate unit (1 without ``pixel_size_mm``)."""
        return 1.0 / self.pixel_size_mm if self.pixel_size_mm else 1.0


# ------------------------------------------------------------------ loading


class _Problems:
    def __init__(self, source: str):
        self.source = source
        self.items: list[tuple[int, str]] = []
        self.notices: list[str] = []

    def add(self, line: int, path: str, text: str) -> None:
        self.items.append((line, f"{self.source}:{line}: {path}: {text}"))


def _to_python(node: yaml.Node, problems: _Problems, path: str) -> Any:
    """Convert a composed YAML node to Python values, keeping line numbers.

    Mappings become :class:`_Map` (a dict that remembers each key's line).
    """
    if isinstance(node, yaml.MappingNode):
        out = _Map(node.start_mark.line + 1)
        for key_node, value_node in node.value:
            key = key_node.value if isinstance(key_node, yaml.ScalarNode) else str(key_node.value)
            sub = f"{path}.{key}" if path else key
            if key in out:
                problems.add(key_node.start_mark.line + 1, sub, "key given twice")
            out[key] = _to_python(value_node, problems, sub)
            out.lines[key] = key_node.start_mark.line + 1
        return out
    if isinstance(node, yaml.SequenceNode):
        seq = _Seq(_to_python(v, problems, f"{path}[{i}]") for i, v in enumerate(node.value))
        seq.line = node.start_mark.line + 1
        seq.lines = [v.start_mark.line + 1 for v in node.value]
        return seq
    return yaml.SafeLoader.construct_object(_constructor(), node)


class _Map(dict):
    def __init__(self, line: int):
        super().__init__()
        self.line = line
        self.lines: dict[str, int] = {}

    def line_of(self, key: str) -> int:
        return self.lines.get(key, self.line)


class _Seq(list):
    line = 0
    lines: list[int] = []


def _constructor() -> yaml.SafeLoader:
    return yaml.SafeLoader("")


def _describe(value: Any) -> str:
    text = repr(value) if isinstance(value, str) else str(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _is_number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


class _Reader:
    """Typed field access that records problems instead of raising."""

    def __init__(self, problems: _Problems):
        self.p = problems

    def unknown(self, m: _Map, allowed: tuple[str, ...], path: str) -> None:
        for key in m:
            if key not in allowed:
                self.p.add(m.line_of(key), _join(path, key), f"unknown key (allowed: {', '.join(allowed)})")

    def number(self, m: _Map, key: str, path: str, *, lo=None, hi=None, lo_open=False, integer=False):
        v = m[key]
        where = _join(path, key)
        if integer and not (isinstance(v, int) and not isinstance(v, bool)):
            self.p.add(m.line_of(key), where, f"must be a whole number (got {_describe(v)})")
            return None
        if not _is_number(v):
            self.p.add(m.line_of(key), where, f"must be a number (got {_describe(v)})")
            return None
        bad_lo = lo is not None and (v <= lo if lo_open else v < lo)
        bad_hi = hi is not None and v > hi
        if bad_lo or bad_hi:
            lo_text = "" if lo is None else (f"> {lo}" if lo_open else f">= {lo}")
            hi_text = "" if hi is None else f"<= {hi}"
            allowed = " and ".join(t for t in (lo_text, hi_text) if t)
            self.p.add(m.line_of(key), where, f"out of range (got {_describe(v)}, allowed {allowed})")
            return None
        return float(v) if not integer else int(v)

    def numbers(self, value: Any, line: int, where: str, count: int | None, what: str):
        if not isinstance(value, list) or (count is not None and len(value) != count):
            n = f"{count} numbers" if count is not None else "a list of numbers"
            self.p.add(line, where, f"must be {n} {what} (got {_describe(value)})")
            return None
        if not all(_is_number(v) for v in value):
            self.p.add(line, where, f"must hold numbers only (got {_describe(value)})")
            return None
        return tuple(float(v) for v in value)


def _rename_old_keys(r: _Reader, m: _Map, path: str) -> None:
    """Read keys under their old names (:data:`RENAMED_KEYS`) as the new ones, with a notice each."""
    for old, new in RENAMED_KEYS.items():
        if old not in m:
            continue
        line = m.line_of(old)
        if new in m:
            r.p.add(line, _join(path, old), f"old name of {new}, which is given too (allowed: {new} only)")
            del m[old]  # named once, not again as an unknown key
            continue
        m[new] = m.pop(old)
        m.lines[new] = line
        r.p.notices.append(f"{r.p.source}:{line}: {_join(path, old)}: old key name, read as {new} (rename it)")


def _join(path: str, key: str) -> str:
    return f"{path}.{key}" if path else key


def _parse_shape(r: _Reader, m: _Map, path: str, *, allow_annulus: bool) -> Shape | None:
    keys = [k for k in SHAPE_KEYS if k in m and (allow_annulus or k != "annulus")]
    allowed = SHAPE_KEYS if allow_annulus else SHAPE_KEYS[:3]
    if len(keys) != 1:
        got = ", ".join(keys) if keys else "none"
        r.p.add(m.line, path, f"needs exactly one shape (got {got}, allowed one of {', '.join(allowed)})")
        return None
    kind = keys[0]
    line = m.line_of(kind)
    where = _join(path, kind)
    value = m[kind]
    if kind == "rect":
        v = r.numbers(value, line, where, 4, "[x, y, w, h]")
        if v is not None and (v[2] <= 0 or v[3] <= 0):
            r.p.add(line, where, f"width and height must be > 0 (got {list(value)})")
            return None
    elif kind == "polygon":
        if not isinstance(value, list) or len(value) < 3:
            r.p.add(line, where, f"must be a list of at least 3 [x, y] points (got {_describe(value)})")
            return None
        pts = [r.numbers(pt, line, f"{where}[{i}]", 2, "[x, y]") for i, pt in enumerate(value)]
        if any(p is None for p in pts):
            return None
        v = tuple(pts)
    elif kind == "circle":
        v = r.numbers(value, line, where, 3, "[cx, cy, r]")
        if v is not None and v[2] <= 0:
            r.p.add(line, where, f"radius must be > 0 (got {v[2]:g})")
            return None
    else:
        v = r.numbers(value, line, where, 4, "[cx, cy, r_inner, r_outer]")
        if v is not None and not (0 <= v[2] < v[3]):
            r.p.add(line, where, f"needs 0 <= r_inner < r_outer (got {list(value)})")
            return None
    return None if v is None else Shape(kind, v)


_REGION_KEYS = ("name", *SHAPE_KEYS, "exclude", "lay", "lay_deg", "centre", *REGION_DEFAULTS)
_TOP_KEYS = (
    "recipe",
    "revision",
    "description",
    "datum",
    "pixel_size_mm",
    "camera_rotation_deg",
    "saturation_level",
    "defaults",
    "regions",
)

_PARAM_RULES: dict[str, Callable[[_Reader, _Map, str, str], Any]] = {
    "tolerance_deg": lambda r, m, k, p: r.number(m, k, p, lo=0, hi=45, lo_open=True),
    "min_coherence": lambda r, m, k, p: r.number(m, k, p, lo=0, hi=1),
    "max_coherence": lambda r, m, k, p: r.number(m, k, p, lo=0, hi=1),
    "max_deviating_fraction": lambda r, m, k, p: r.number(m, k, p, lo=0, hi=1),
    "max_masked_fraction": lambda r, m, k, p: r.number(m, k, p, lo=0, hi=1),
    "max_unmeasured_fraction": lambda r, m, k, p: r.number(m, k, p, lo=0, hi=1),
    "cell_px": lambda r, m, k, p: r.number(m, k, p, lo=8, hi=4096, integer=True),
    "sigma_px": lambda r, m, k, p: r.number(m, k, p, lo=0.5, hi=8),
    "illumination_px": lambda r, m, k, p: r.number(m, k, p, lo=0, hi=512),  # 0: keep the light as it is
    "sharpness_period_px": lambda r, m, k, p: r.number(m, k, p, lo=0, hi=64),
}


def _parse_region(r: _Reader, m: Any, path: str, defaults: dict, names: set, line: int) -> Region | None:
    if not isinstance(m, _Map):
        r.p.add(line, path, f"must be a mapping of region keys such as name, rect, lay_deg (got {_describe(m)})")
        return None
    n_before = len(r.p.items)
    name = m.get("name")
    if not isinstance(name, str) or not name.strip():
        r.p.add(m.line, _join(path, "name"), f"every region needs a name (got {_describe(name)})")
        name = None
    elif name in names:
        r.p.add(m.line_of("name"), _join(path, "name"), f"region name {name!r} is used twice")
    else:
        names.add(name)
    if name:
        path = f"{path}({name})"
    _rename_old_keys(r, m, path)
    r.unknown(m, _REGION_KEYS, path)
    shape = _parse_shape(r, m, path, allow_annulus=True)
    excludes: list[Shape] = []
    if "exclude" in m:
        ex = m["exclude"]
        if not isinstance(ex, list):
            r.p.add(m.line_of("exclude"), _join(path, "exclude"), f"must be a list of shapes (got {_describe(ex)})")
        else:
            for i, item in enumerate(ex):
                where = f"{_join(path, 'exclude')}[{i}]"
                if not isinstance(item, _Map):
                    r.p.add(
                        m.line_of("exclude"),
                        where,
                        f"must be a mapping such as {{rect: [x, y, w, h]}} (got {_describe(item)})",
                    )
                    continue
                r.unknown(item, SHAPE_KEYS[:3], where)
                s = _parse_shape(r, item, where, allow_annulus=False)
                if s is not None:
                    excludes.append(s)

    params = dict(defaults)
    for key, rule in _PARAM_RULES.items():
        if key in m:
            params[key] = rule(r, m, key, path)

    # lay pattern and angles
    pattern, fixed = LayPattern.DIRECTIONAL, None
    if "lay" in m:
        spelled = m["lay"]
        if not isinstance(spelled, str) or spelled not in LAY_SPELLINGS:
            allowed = ", ".join(LAY_SPELLINGS)
            r.p.add(
                m.line_of("lay"),
                _join(path, "lay"),
                f"unknown lay pattern (got {_describe(spelled)}, allowed {allowed})",
            )
            return None  # what lay_deg must be depends on the pattern: nothing more to check
        pattern, fixed = LAY_SPELLINGS[spelled]
    lay_deg: tuple[float, ...] = ()
    where = _join(path, "lay_deg")
    raw = m.get("lay_deg")
    if pattern is LayPattern.DIRECTIONAL:
        if fixed is not None:
            if raw is not None and (not _is_number(raw) or float(raw) % 180 != fixed):
                r.p.add(
                    m.line_of("lay_deg"),
                    where,
                    f"contradicts lay {m['lay']!r} (got {_describe(raw)}, allowed {fixed:g} or leave it out)",
                )
            lay_deg = (fixed,)
        elif raw is None:
            r.p.add(
                m.line,
                where,
                "missing: a directional region needs lay_deg (allowed 0 <= lay_deg < 180), or give lay: multidirectional, circular, ...",
            )
        elif not _is_number(raw):
            r.p.add(m.line_of("lay_deg"), where, f"must be a number (got {_describe(raw)}, allowed 0 <= lay_deg < 180)")
        elif not (0 <= raw < 180):
            r.p.add(m.line_of("lay_deg"), where, f"out of range (got {_describe(raw)}, allowed 0 <= lay_deg < 180)")
        else:
            lay_deg = (float(raw),)
    elif pattern is LayPattern.CROSSED:
        v = r.numbers(raw, m.line_of("lay_deg"), where, 2, "[a, b] for a crossed lay")
        if v is not None:
            tol = params.get("tolerance_deg") or REGION_DEFAULTS["tolerance_deg"]
            if not all(0 <= a < 180 for a in v):
                r.p.add(m.line_of("lay_deg"), where, f"angles out of range (got {list(v)}, allowed 0 <= a < 180)")
            elif abs(((v[0] - v[1]) + 90) % 180 - 90) <= 2 * tol:
                r.p.add(
                    m.line_of("lay_deg"),
                    where,
                    f"the two directions must differ by more than twice the tolerance (got {list(v)}, tolerance {tol:g}°)",
                )
            else:
                lay_deg = v
    elif raw is not None:
        r.p.add(
            m.line_of("lay_deg"), where, f"not used with lay {m['lay']!r} (got {_describe(raw)}, allowed: leave it out)"
        )

    centre = None
    if "centre" in m:
        if pattern not in (LayPattern.CIRCULAR, LayPattern.RADIAL):
            r.p.add(m.line_of("centre"), _join(path, "centre"), "only used with lay circular or radial")
        else:
            centre = r.numbers(m["centre"], m.line_of("centre"), _join(path, "centre"), 2, "[x, y]")

    if len(r.p.items) > n_before or shape is None or name is None:
        return None
    return Region(
        name=name,
        shape=shape,
        exclude=tuple(excludes),
        lay=pattern,
        lay_deg=lay_deg,
        centre=centre,
        line=m.line,
        lay_symbol=m["lay"] if "lay" in m else "",
        **params,
    )


def parse_recipe(text: str, source: str = "<memory>") -> Recipe:
    """Parse and validate recipe YAML text.

    Parameters
    ----------
    text : str
        The YAML document.
    source : str
        File name used in error messages.

    Returns
    -------
    Recipe

    Raises
    ------
    RecipeError
        Listing every problem found, each ``file:line: key: what is wrong``.
    """
    problems = _Problems(source)
    try:
        nodes = list(yaml.compose_all(text, Loader=yaml.SafeLoader))
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        line = mark.line + 1 if mark else 0
        what = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise RecipeError(f"{source}:{line}: not valid YAML: {what}") from None
    if len(nodes) != 1 or not isinstance(nodes[0], yaml.MappingNode):
        raise RecipeError(f"{source}:1: recipe: the file must hold one mapping with keys recipe, revision, regions")
    doc = _to_python(nodes[0], problems, "")
    r = _Reader(problems)
    r.unknown(doc, _TOP_KEYS, "")

    name = doc.get("recipe")
    if not isinstance(name, str) or not name.strip():
        problems.add(doc.line_of("recipe"), "recipe", f"needs a name (got {_describe(name)})")
    revision = r.number(doc, "revision", "", lo=0, integer=True) if "revision" in doc else None
    if "revision" not in doc:
        problems.add(doc.line, "revision", "missing (allowed a whole number >= 0)")
    datum = doc.get("datum", "image")
    if datum not in DATUMS:
        problems.add(
            doc.line_of("datum"), "datum", f"unknown datum (got {_describe(datum)}, allowed {', '.join(DATUMS)})"
        )
    pixel_size = r.number(doc, "pixel_size_mm", "", lo=0, lo_open=True) if "pixel_size_mm" in doc else None
    camera_rotation = 0.0
    if "camera_rotation_deg" in doc:
        if datum != "image":
            problems.add(
                doc.line_of("camera_rotation_deg"),
                "camera_rotation_deg",
                "only used with datum: image (the part-edge datum measures the skew)",
            )
        camera_rotation = r.number(doc, "camera_rotation_deg", "", lo=-45, hi=45) or 0.0
    saturation = r.number(doc, "saturation_level", "", lo=0, hi=1, lo_open=True) if "saturation_level" in doc else 1.0
    description = doc.get("description", "")
    if not isinstance(description, str):
        problems.add(doc.line_of("description"), "description", f"must be text (got {_describe(description)})")

    defaults = dict(REGION_DEFAULTS)
    if "defaults" in doc:
        d = doc["defaults"]
        if not isinstance(d, _Map):
            problems.add(doc.line_of("defaults"), "defaults", f"must be a mapping (got {_describe(d)})")
        else:
            _rename_old_keys(r, d, "defaults")
            r.unknown(d, tuple(REGION_DEFAULTS), "defaults")
            for key, rule in _PARAM_RULES.items():
                if key in d:
                    v = rule(r, d, key, "defaults")
                    if v is not None:
                        defaults[key] = v

    regions: list[Region] = []
    raw_regions = doc.get("regions")
    if not isinstance(raw_regions, list) or not raw_regions:
        problems.add(
            doc.line_of("regions"), "regions", f"needs a list of at least one region (got {_describe(raw_regions)})"
        )
    else:
        names: set[str] = set()
        for i, item in enumerate(raw_regions):
            reg = _parse_region(r, item, f"regions[{i}]", defaults, names, raw_regions.lines[i])
            if reg is not None:
                regions.append(reg)

    if problems.items:
        lines = [text for _, text in sorted(problems.items, key=lambda t: t[0])]
        raise RecipeError(lines[0] if len(lines) == 1 else f"{len(lines)} problems in {source}", lines)

    return Recipe(
        name=name.strip(),
        revision=int(revision),
        regions=tuple(regions),
        datum=datum,
        pixel_size_mm=pixel_size,
        camera_rotation_deg=float(camera_rotation),
        saturation_level=1.0 if saturation is None else float(saturation),
        description=description,
        path=source,
        sha256=hashlib.sha256(text.encode("utf-8")).hexdigest(),
        notices=tuple(problems.notices),
    )


def load_recipe(path: str | Path) -> Recipe:
    """Load and validate a recipe file.

    Raises
    ------
    RecipeError
        When the file cannot be read or holds any problem; ``problems`` lists all.
    """
    path = Path(path)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise RecipeError(f"{path}: cannot read recipe ({exc.strerror or exc})") from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise RecipeError(f"{path}:1: recipe: not a UTF-8 text file") from None
    # the recipe hash covers the file's exact bytes
    return replace(parse_recipe(text, str(path)), sha256=hashlib.sha256(data).hexdigest())
