"""A YAML reader for recipes that a hostile file cannot turn against the machine.

Before anything is built from a recipe, its event stream is checked: no tags
(``!foo``, ``!!python/name:``), no anchors or aliases (so no "billion laughs"
expansion), nesting no deeper than :data:`MAX_DEPTH`, at most
:data:`MAX_NODES` values, and at most :data:`MAX_RECIPE_BYTES` of text. Plain
scalars that YAML 1.1 reads differently from what a person means (``1:30`` as
base 60, ``yes``/``no``/``on``/``off`` as booleans, ``017`` as octal) are
named as problems by :func:`scalar_surprise`.
"""

from __future__ import annotations

import re
from typing import Any

import yaml

from .errors import RecipeError
from .inputs import escape_text

__all__ = [
    "Map",
    "Problems",
    "Seq",
    "compose_mapping",
    "describe",
    "MAX_RECIPE_BYTES",
    "MAX_DEPTH",
    "MAX_NODES",
    "event_problems",
    "scalar_surprise",
]

#: Largest recipe file, bytes. Real recipes are a few kB.
MAX_RECIPE_BYTES = 1_000_000
#: Deepest nesting of mappings and lists (a polygon point inside an exclude inside a region is 7).
MAX_DEPTH = 10
#: Most scalars, mappings and lists in one recipe.
MAX_NODES = 200_000

_SEXAGESIMAL = re.compile(r"^[-+]?[0-9][0-9_]*(:[0-5]?[0-9])+(\.[0-9_]*)?$")
_BOOL_WORDS = {"yes", "no", "on", "off", "y", "n"}
_OCTAL_11 = re.compile(r"^[-+]?0[0-7_]+$")
_OCTAL_12 = re.compile(r"^[-+]?0o[0-7_]+$")
_HEX_OR_BIN = re.compile(r"^[-+]?0[xb][0-9a-fA-F_]+$")
_UNDERSCORED = re.compile(r"^[-+]?[0-9][0-9_]*_[0-9_]*(\.[0-9_]*)?$")


def event_problems(text: str) -> list[tuple[int, str]]:
    """(line, problem) for every tag, anchor and alias, and the first nesting or size violation.

    Parsing stops at the first nesting or count violation: what lies deeper is
    not looked at. YAML syntax errors propagate as :class:`yaml.YAMLError`.
    """
    problems: list[tuple[int, str]] = []
    depth = nodes = 0
    for event in yaml.parse(text, Loader=yaml.SafeLoader):
        line = event.start_mark.line + 1
        if isinstance(event, yaml.AliasEvent):
            alias = (line, f"aliases are not allowed (got *{_short(event.anchor)}; write the value out)")
            if alias not in problems:  # one per line: nine aliases on a line are one problem to fix
                problems.append(alias)
            continue
        if not isinstance(event, (yaml.ScalarEvent, yaml.MappingStartEvent, yaml.SequenceStartEvent)):
            if isinstance(event, (yaml.MappingEndEvent, yaml.SequenceEndEvent)):
                depth -= 1
            continue
        nodes += 1
        if getattr(event, "anchor", None):
            problems.append((line, f"anchors are not allowed (got &{_short(event.anchor)}; write the value out)"))
        if getattr(event, "tag", None):
            problems.append((line, f"YAML tags are not allowed (got {_short(event.tag)}; allowed plain values)"))
        if not isinstance(event, yaml.ScalarEvent):
            depth += 1
            if depth > MAX_DEPTH:
                problems.append(
                    (line, f"nested too deep (got more than {MAX_DEPTH} levels, allowed at most {MAX_DEPTH})")
                )
                break
        if nodes > MAX_NODES:
            problems.append((line, f"too many values (got more than {MAX_NODES}, allowed at most {MAX_NODES})"))
            break
    return problems


def _short(text: str) -> str:
    return text if len(text) <= 40 else text[:37] + "..."


def scalar_surprise(node: yaml.ScalarNode) -> str | None:
    """What a plain scalar would silently turn into under YAML 1.1, when that differs from what it says.

    Returns the problem text, or None for an unsurprising scalar (any quoted scalar is unsurprising).
    """
    if node.style is not None:  # quoted or block: taken as written
        return None
    raw = node.value
    if raw.lower() in _BOOL_WORDS:
        return (
            f"{raw!r} is read by YAML 1.1 as true/false, not as text "
            f"(write true or false, or quote it: '{raw}', if the word was meant)"
        )
    if _SEXAGESIMAL.match(raw):
        return (
            f"{raw!r} is read by YAML 1.1 as a base-60 number, not as a time or ratio "
            "(write a decimal number such as 1.5, or quote it if text was meant)"
        )
    if _OCTAL_11.match(raw) and raw.strip("+-") != "0":
        return f"{raw!r} is read by YAML 1.1 as an octal number (write the decimal number without a leading 0)"
    if _OCTAL_12.match(raw):
        return f"{raw!r} is an octal number in YAML 1.2 but text in YAML 1.1 (write the decimal number)"
    if _HEX_OR_BIN.match(raw):
        return f"{raw!r} is a hexadecimal or binary number (write the decimal number)"
    if _UNDERSCORED.match(raw):
        return f"{raw!r} is read by YAML 1.1 as a number with its '_' dropped (write it without '_')"
    return None


def number_hint(value: object) -> str:
    """A hint for text that a person meant as a number but YAML 1.1 read as text (``1e-3``), else ''."""
    if not isinstance(value, str) or len(value) > 40:
        return ""
    try:
        number = float(value)
    except ValueError:
        return ""
    text = repr(number)
    if "e" in text:  # YAML 1.1 floats need a dot in the mantissa and a signed exponent
        mantissa, exponent = text.split("e")
        mantissa = mantissa if "." in mantissa else mantissa + ".0"
        text = f"{mantissa}e{'' if exponent[0] in '+-' else '+'}{exponent}"
    return f"; YAML 1.1 reads {value!r} as text: write {text} (a float needs a dot, an exponent its sign)"


def to_python(node: yaml.Node, problems: Any, path: str, constructor: yaml.SafeLoader) -> Any:
    """Convert a composed YAML node to Python values, keeping line numbers.

    Mappings become :class:`Map` (a dict that remembers each key's line).
    Plain scalars that YAML 1.1 would read unlike what they say are problems.
    """
    line = node.start_mark.line + 1
    if isinstance(node, yaml.MappingNode):
        out = Map(line)
        for key_node, value_node in node.value:
            key_line = key_node.start_mark.line + 1
            if not isinstance(key_node, yaml.ScalarNode):
                problems.add(key_line, path or "recipe", "keys must be plain words (got a list or mapping as a key)")
                continue
            key = key_node.value
            shown = describe(key)[1:-1] if not key.isidentifier() else key
            sub = f"{path}.{shown}" if path else shown
            if key in out:
                problems.add(key_line, sub, "key given twice")
            out[key] = to_python(value_node, problems, sub, constructor)
            out.lines[key] = key_line
        return out
    if isinstance(node, yaml.SequenceNode):
        seq = Seq(to_python(v, problems, f"{path}[{i}]", constructor) for i, v in enumerate(node.value))
        seq.line = line
        seq.lines = [v.start_mark.line + 1 for v in node.value]
        return seq
    surprise = scalar_surprise(node)
    if surprise is not None:
        problems.add(line, path or "recipe", surprise)
    try:
        return constructor.construct_object(node)
    except (ValueError, OverflowError, yaml.YAMLError) as exc:  # a date such as 2001-13-45, a 5000-digit number
        problems.add(line, path or "recipe", f"cannot read the value {describe(node.value)} ({exc})")
        return None


class Map(dict):
    def __init__(self, line: int):
        super().__init__()
        self.line = line
        self.lines: dict[str, int] = {}

    def line_of(self, key: str) -> int:
        return self.lines.get(key, self.line)


class Seq(list):
    line = 0
    lines: list[int] = []


def describe(value: Any) -> str:
    if isinstance(value, str):
        text = repr(value[:80])
    elif isinstance(value, int) and abs(value) > 10**30:
        text = f"a number of {len(str(abs(value)))} digits"
    else:
        text = escape_text(str(value)[:200])
    return text if len(text) <= 60 else text[:57] + "..."


class Problems:
    """Problems found in one file, each ``file:line: key.path: text``, raised all at once."""

    #: Most problems listed; a count of the rest follows.
    SHOWN = 50

    def __init__(self, source: str):
        self.source = source
        self.items: list[tuple[int, str]] = []
        self.notices: list[str] = []

    def add(self, line: int, path: str, text: str) -> None:
        self.items.append((line, f"{self.source}:{line}: {path}: {text}"))

    def raise_if_any(self) -> None:
        if not self.items:
            return
        lines = [text for _, text in sorted(self.items, key=lambda t: t[0])]
        shown = self.SHOWN
        if len(lines) > shown:
            lines = lines[:shown] + [f"{self.source}: ... and {len(lines) - shown} more problems"]
        raise RecipeError(lines[0] if len(lines) == 1 else f"{len(self.items)} problems in {self.source}", lines)


def compose_mapping(text: str, source: str, problems: Any) -> "Map":
    """The recipe's one mapping as :class:`Map`, after the safe-YAML checks (raises on any problem)."""
    size = len(text.encode("utf-8", "surrogatepass"))
    if size > MAX_RECIPE_BYTES:
        raise RecipeError(f"{source}:1: recipe: file too large (got {size} bytes, allowed at most {MAX_RECIPE_BYTES})")
    try:
        for line, what in event_problems(text):
            problems.add(line, "recipe", what)
        problems.raise_if_any()
        nodes = list(yaml.compose_all(text, Loader=yaml.SafeLoader))
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        line = mark.line + 1 if mark else 0
        what = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise RecipeError(f"{source}:{line}: not valid YAML: {escape_text(what)}") from None
    if len(nodes) != 1 or not isinstance(nodes[0], yaml.MappingNode):
        raise RecipeError(f"{source}:1: recipe: the file must hold one mapping with keys recipe, revision, regions")
    return to_python(nodes[0], problems, "", yaml.SafeLoader(""))
