"""Checks of command-line values shared by the commands: one line naming the flag, before any work."""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import Sequence

from ..errors import InputError

__all__ = ["check_output_file", "check_number"]


def check_output_file(
    flag: str,
    path: str | os.PathLike,
    *,
    suffixes: Sequence[str] = (),
    not_same_as: Sequence[tuple[str, str | os.PathLike | None]] = (),
) -> None:
    """Refuse an output file that cannot be written, before any work is done.

    Parameters
    ----------
    flag : str
        The option naming the file, for the message (``'--json'``).
    path : path-like
        The file to be written.
    suffixes : sequence of str, optional
        Allowed name endings, lower case with the dot (``('.pdf',)``); empty: any.
    not_same_as : sequence of (what, path or None), optional
        Files that this output must not overwrite: inputs and other outputs.

    Raises
    ------
    InputError
        One line naming the flag and the path: a wrong suffix, a folder, a
        parent folder that does not exist or is a file, a folder without write
        permission, or the same file as one of ``not_same_as``.
    """
    out = Path(path)
    if out.is_dir():
        raise InputError(f"{flag}: {path} is a folder (allowed: a file name)")
    if suffixes and out.suffix.lower() not in suffixes:
        raise InputError(f"{flag}: {path}: the name must end in {' or '.join(suffixes)}")
    folder = out.parent
    if not folder.is_dir():
        blocking = next((a for a in (folder, *folder.parents) if a.exists() and not a.is_dir()), None)
        if blocking is not None:
            raise InputError(f"{flag}: {path}: {blocking} is a file, not a folder")
        raise InputError(f"{flag}: {path}: the folder {folder} does not exist (create it first)")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise InputError(f"{flag}: {path}: no permission to write in the folder {folder}")
    for what, other in not_same_as:
        if other is not None and Path(other).resolve() == out.resolve():
            raise InputError(f"{flag}: {path} is also {what}; it would be overwritten (choose another name)")


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
