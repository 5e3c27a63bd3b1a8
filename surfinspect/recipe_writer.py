"""Writing recipes: a recipe's mapping (the YAML's keys and values) to YAML text, and back.

The recipe page of the review station edits a recipe as the plain mapping its
YAML file holds (``rect: [x, y, w, h]``, ``lay: parallel``, ...), so what the
page holds, what it saves and what ``surfinspect check`` reads are one form.
:func:`recipe_text` writes that mapping human-readable and diff-friendly: the
keys in the order the README lists them, lists on one line, one region after
another, and a comment line naming the reference image. Validation is not
done here: the text goes through :func:`surfinspect.recipe.parse_recipe`,
the loader every command uses.
"""

from __future__ import annotations

import math
from typing import Any, Mapping, Sequence

import yaml

from . import _safe_yaml
from ._safe_yaml import Problems
from .recipe import _REGION_KEYS, _TOP_KEYS, REGION_DEFAULTS

__all__ = ["recipe_text", "recipe_mapping", "header_comments", "REFERENCE_COMMENT"]

#: The start of the comment line that names the reference image a recipe was drawn on.
REFERENCE_COMMENT = "# reference image"


def _scalar(value: Any) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            return ".nan" if math.isnan(value) else (".inf" if value > 0 else "-.inf")
        text = repr(value)  # the shortest form that reads back as the same number
        if "e" in text:  # YAML 1.1 reads 1e-30 as text: a float needs a dot, its exponent a sign
            mantissa, exponent = text.split("e")
            mantissa = mantissa if "." in mantissa else mantissa + ".0"
            exponent = exponent if exponent[0] in "+-" else "+" + exponent
            text = f"{mantissa}e{exponent}"
        return text
    text = str(value)
    if not text.isprintable():
        return _double_quoted(text)
    text = yaml.safe_dump(text, default_flow_style=True, allow_unicode=True, width=1 << 30)
    return text.removesuffix("\n...\n").removesuffix("\n")


def _double_quoted(text: str) -> str:
    """A YAML double-quoted scalar on one line: every character that is not printable escaped (YAML 1.1, 5.7)."""
    out = []
    for ch in text:
        if ch in '"\\':
            out.append("\\" + ch)
        elif ch.isprintable():
            out.append(ch)
        elif ord(ch) < 0x10000:
            out.append(f"\\u{ord(ch):04x}")
        else:
            out.append(f"\\U{ord(ch):08x}")
    return '"' + "".join(out) + '"'


def _flow(value: Any) -> str:
    """A value on one line: scalars as YAML scalars, lists as ``[a, b]``, mappings as ``{k: v}``."""
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_flow(v) for v in value) + "]"
    if isinstance(value, Mapping):
        return "{" + ", ".join(f"{_scalar(k)}: {_flow(v)}" for k, v in value.items()) + "}"
    return _scalar(value)


def _ordered(mapping: Mapping[str, Any], order: Sequence[str]) -> list[str]:
    """Known keys in their order, then any other keys (sorted), which the loader will name as unknown."""
    known = [k for k in order if k in mapping]
    return known + sorted((str(k) for k in mapping if k not in order), key=str)


def _region_lines(region: Any) -> list[str]:
    if not isinstance(region, Mapping):
        return [f"  - {_flow(region)}"]
    lines = []
    for key in _ordered(region, _REGION_KEYS):
        value = region[key]
        if key == "exclude" and isinstance(value, list) and value:
            lines.append("exclude:")
            lines += ["  " + _exclude_item(shape) for shape in value]
        else:
            lines.append(f"{_scalar(key)}: {_flow(value)}")
    if not lines:
        return ["  - {}"]
    return ["  - " + lines[0]] + ["    " + line for line in lines[1:]]


def _exclude_item(shape: Any) -> str:
    """One excluded shape as ``- circle: [cx, cy, r]`` (a mapping of one key), else its flow form."""
    if isinstance(shape, Mapping) and len(shape) == 1:
        ((key, value),) = shape.items()
        return f"- {_scalar(key)}: {_flow(value)}"
    return f"- {_flow(shape)}"


def recipe_text(recipe: Mapping[str, Any], *, comments: Sequence[str] = ()) -> str:
    """The YAML text of a recipe mapping, keys in a fixed order.

    Parameters
    ----------
    recipe : mapping
        Top-level keys as in a recipe file (``recipe``, ``revision``, ...,
        ``regions``: a list of region mappings). Values are written as given;
        a wrong one is left for the loader to name.
    comments : sequence of str
        Comment lines written first, each prefixed with ``# `` unless it
        starts with ``#`` (line breaks inside one are replaced by spaces).

    Returns
    -------
    str
        YAML text, ending in a newline.
    """
    out = []
    for c in comments:
        c = " ".join(str(c).splitlines())
        out.append(c if c.startswith("#") else f"# {c}")
    for key in _ordered(recipe, _TOP_KEYS):
        value = recipe[key]
        if key == "defaults" and isinstance(value, Mapping) and value:
            out.append("defaults:")
            out += [f"  {_scalar(k)}: {_flow(value[k])}" for k in _ordered(value, tuple(REGION_DEFAULTS))]
        elif key == "regions" and isinstance(value, list) and value:
            out.append("regions:")
            for region in value:
                out += _region_lines(region)
        else:
            out.append(f"{_scalar(key)}: {_flow(value)}")
    return "\n".join(out) + "\n"


def _plain(node: Any) -> Any:
    if isinstance(node, _safe_yaml.Map):
        return {str(k): _plain(v) for k, v in node.items()}
    if isinstance(node, list):
        return [_plain(v) for v in node]
    return node


def recipe_mapping(text: str, source: str = "<memory>") -> dict[str, Any]:
    """A recipe's YAML text as a plain mapping (what :func:`recipe_text` writes back).

    The text is read by the recipe loader's own safe reader (no tags, anchors
    or aliases, bounded size). Call :func:`surfinspect.recipe.parse_recipe`
    first to know that it is a valid recipe.

    Raises
    ------
    RecipeError
        When the text is not a YAML mapping the safe reader accepts.
    """
    problems = Problems(source)
    doc = _safe_yaml.compose_mapping(text, source, problems)
    problems.raise_if_any()
    return _plain(doc)


def header_comments(text: str) -> list[str]:
    """The comment lines a recipe file starts with, but an earlier reference-image line."""
    lines = []
    for line in text.splitlines():
        if not line.startswith("#"):
            break
        if not line.startswith(REFERENCE_COMMENT):
            lines.append(line)
    return lines
