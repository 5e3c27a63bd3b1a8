"""Checks of command-line values shared by the commands: one line naming the flag, before any work."""

from __future__ import annotations

import math
from pathlib import Path
from typing import TYPE_CHECKING

from ..errors import InputError

if TYPE_CHECKING:
    from ..recipe import Recipe

__all__ = ["check_output_file", "check_number", "load_recipe", "batch_owner"]


def check_output_file(*args, **kwargs):
    """:func:`surfinspect.fsutil.check_output_file` (output files are checked in fsutil, beside the writes).

    Imported when called: ``check`` writes nothing and need not load fsutil's hashing and temporary files.
    """
    from ..fsutil import check_output_file as check

    return check(*args, **kwargs)


def load_recipe(path: str | Path, console) -> Recipe:
    """Load a recipe and print its notices (old key names read under their new names), one line each."""
    from ..recipe import load_recipe as _load_recipe

    recipe = _load_recipe(path)
    for line in recipe.notices:
        console.notice(line)
    return recipe


def check_number(
    flag: str, value: float | None, *, lo: float, hi: float = math.inf, lo_open: bool = False, hi_open: bool = False
) -> None:
    """Refuse a numeric flag outside ``lo .. hi`` (open ends excluded) with one line naming it.

    None (a flag not given) passes.
    """
    if value is None:
        return
    above = value > lo if lo_open else value >= lo
    below = value < hi if hi_open else value <= hi
    if math.isfinite(value) and above and below:
        return
    if math.isinf(hi):
        allowed = f"> {lo:g}" if lo_open else f">= {lo:g}"
    else:
        allowed = f"{lo:g} {'<' if lo_open else '<='} value {'<' if hi_open else '<='} {hi:g}"
    raise InputError(f"{flag}: must be {allowed} (got {value:g})")


def batch_owner(archive: str | Path, batch_id: str) -> str:
    """Whose files an output folder holds when a batch's files are copied there (batch --out, show --out)."""
    from ..archive.location import is_database_url, parse_location

    where = parse_location(archive).display if is_database_url(archive) else Path(archive).resolve()
    return f"batch {batch_id} of the archive {where}"
