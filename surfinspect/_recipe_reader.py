"""Typed field access for the recipe parser: every problem recorded, none raised."""

from __future__ import annotations

import math
from typing import Any

from . import _safe_yaml
from ._safe_yaml import Map as _Map
from ._safe_yaml import Problems as _Problems
from ._safe_yaml import describe as _describe
from .inputs import text_problem


def _join(path: str, key: str) -> str:
    return f"{path}.{key}" if path else key


def _is_number(v: Any) -> bool:
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        return False
    # an int beyond float range would raise in isfinite; no recipe number comes near 1e15
    return abs(v) <= 1e15 if isinstance(v, int) else math.isfinite(v)


def _num(x: float) -> str:
    return f"{x:g}" if isinstance(x, float) else str(x)


def _not_a_number(v: Any) -> str:
    if isinstance(v, float):
        return f"must be a finite number (got {_describe(v)})"
    return f"must be a number (got {_describe(v)}{_safe_yaml.number_hint(v)})"


class _Reader:
    """Typed field access that records problems instead of raising."""

    def __init__(self, problems: _Problems, *, coordinate_limit: float):
        self.p = problems
        self.coordinate_limit = coordinate_limit

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
        huge = isinstance(v, int) and not isinstance(v, bool) and not _is_number(v)
        if not _is_number(v) and not huge:
            self.p.add(m.line_of(key), where, _not_a_number(v))
            return None
        bad_lo = lo is not None and (v <= lo if lo_open else v < lo)
        bad_hi = huge or (hi is not None and v > hi)
        if bad_lo or bad_hi:
            lo_text = "" if lo is None else (f"> {_num(lo)}" if lo_open else f">= {_num(lo)}")
            hi_text = "" if hi is None else f"<= {_num(hi)}"
            allowed = " and ".join(t for t in (lo_text, hi_text) if t)
            self.p.add(m.line_of(key), where, f"out of range (got {_describe(v)}, allowed {allowed})")
            return None
        return float(v) if not integer else int(v)

    def numbers(self, value: Any, line: int, where: str, count: int | None, what: str):
        if not isinstance(value, list) or (count is not None and len(value) != count):
            n = f"{count} numbers" if count is not None else "a list of numbers"
            self.p.add(line, where, f"must be {n} {what} (got {_describe(value)})")
            return None
        limit = self.coordinate_limit
        huge = next((v for v in value if isinstance(v, int) and not isinstance(v, bool) and abs(v) > limit), None)
        bad = next((v for v in value if not _is_number(v) and v is not huge), None)
        if bad is not None:
            self.p.add(line, where, f"must hold numbers only (got {_describe(bad)}{_safe_yaml.number_hint(bad)})")
            return None
        if huge is not None or any(abs(v) > limit for v in value):
            self.p.add(line, where, f"out of range (got {_describe(list(value))}, allowed -{limit:g} to {limit:g})")
            return None
        return tuple(float(v) for v in value)

    def text(self, m: _Map, key: str, path: str, *, max_chars: int, allow: str = "", required: bool = True):
        """A name or free text: a string of printable characters, bounded in length."""
        v = m.get(key)
        where = _join(path, key)
        if not isinstance(v, str) or (required and not v.strip()):
            what = "needs a name" if required else "must be text"
            self.p.add(m.line_of(key), where, f"{what} (got {_describe(v)})")
            return None
        problem = text_problem(v, max_chars=max_chars, allow=allow)
        if problem is not None:
            self.p.add(m.line_of(key), where, problem)
            return None
        return v
