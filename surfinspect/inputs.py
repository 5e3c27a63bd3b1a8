"""The input policy: what untrusted text, names and files may be before anything reads them.

Every file this tool reads on a user's behalf (recipes, images, a batch
folder's entries) comes through :func:`read_regular_file` or
:func:`open_regular_file`: only regular files are opened, a FIFO cannot hang
the reader (the open is non-blocking), a device cannot feed endless bytes, and
a size bound holds before the first byte is read. Text that came from a file
(names, descriptions) is checked by :func:`text_problem`; text printed to a
terminal or stored as a key goes through :func:`escape_text` so that a
control or bidirectional-override character cannot rewrite what is shown.
"""

from __future__ import annotations

import errno
import os
import stat
import unicodedata
from pathlib import Path

from .errors import InputError

__all__ = [
    "BIDI_CONTROLS",
    "escape_text",
    "text_problem",
    "open_regular_file",
    "read_regular_file",
    "env_limit",
]

#: Bidirectional embedding, override and isolate controls (Unicode UAX #9, section 2): they reorder
#: what a reader sees without changing the stored text ("Trojan Source", CVE-2021-42574).
BIDI_CONTROLS = frozenset("\u061c\u200e\u200f\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069")


def _unsafe(ch: str, allow: str = "") -> bool:
    if ch in allow:
        return False
    if ch in BIDI_CONTROLS:
        return True
    # Cc control, Cs lone surrogate (an undecodable byte of a file name), Cn unassigned
    return unicodedata.category(ch) in ("Cc", "Cs", "Cn")


def escape_text(text: str) -> str:
    """``text`` with every control, bidi-control, surrogate or unassigned character as a visible escape.

    A newline becomes ``\\n``, an undecodable file-name byte (a surrogate from
    :func:`os.fsdecode`) ``\\xNN``, others ``\\xNN``/``\\uNNNN``. Printable
    text, any script, is left alone. The escape is one-way (for showing and
    for keys), not a serialisation.
    """
    if not any(_unsafe(ch) for ch in text):
        return text
    out = []
    for ch in text:
        if not _unsafe(ch):
            out.append(ch)
        elif ch == "\n":
            out.append("\\n")
        elif ch == "\t":
            out.append("\\t")
        elif 0xDC80 <= ord(ch) <= 0xDCFF:  # surrogateescape of a raw byte
            out.append(f"\\x{ord(ch) - 0xDC00:02x}")
        elif ord(ch) < 0x100:
            out.append(f"\\x{ord(ch):02x}")
        else:
            out.append(f"\\u{ord(ch):04x}")
    return "".join(out)


def text_problem(value: str, *, max_chars: int, allow: str = "") -> str | None:
    """What is wrong with a name or free text from a file, or None when it is fine.

    Parameters
    ----------
    value : str
        The text.
    max_chars : int
        Longest allowed length in characters.
    allow : str
        Control characters allowed besides printable ones (``"\\n"`` for a description).
    """
    if len(value) > max_chars:
        return f"too long (got {len(value)} characters, allowed at most {max_chars})"
    bad = next((ch for ch in value if _unsafe(ch, allow)), None)
    if bad is not None:
        kind = "a bidirectional-override" if bad in BIDI_CONTROLS else "a control or unassigned"
        return (
            f"holds {kind} character U+{ord(bad):04X} at position {value.index(bad) + 1} "
            "(allowed printable characters only)"
        )
    return None


def env_limit(name: str, default: float, *, lo: float, hi: float) -> float:
    """A numeric limit from the environment variable ``name`` (``default`` when unset).

    Raises
    ------
    InputError
        When the variable is set to something that is not a number in [lo, hi].
    """
    raw = os.environ.get(name)
    if raw is None or raw.strip() == "":
        return default
    try:
        value = float(raw)
    except ValueError:
        value = float("nan")
    if not (lo <= value <= hi):
        raise InputError(
            f"{name}: not a usable limit (got {escape_text(raw)!r}, allowed a number from {lo:g} to {hi:g})"
        )
    return value


def _kind_of(mode: int) -> str:
    if stat.S_ISDIR(mode):
        return "a folder"
    if stat.S_ISFIFO(mode):
        return "a FIFO (named pipe)"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    return "not a regular file"


def open_regular_file(path: str | os.PathLike, what: str, *, follow_symlinks: bool = True) -> tuple[int, int]:
    """Open ``path`` read-only if, and only if, it is a regular file; returns (fd, size in bytes).

    The open is non-blocking, so a FIFO cannot hang it, and the file's kind is
    taken from the opened descriptor (no race between a check and the open).
    With ``follow_symlinks=False`` a symbolic link is refused
    (``O_NOFOLLOW``).

    Raises
    ------
    InputError
        Naming ``path`` and ``what`` it was to be (``"image file"``): missing,
        unreadable, a link (when not followed), a folder, FIFO, device or socket.
    """
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_CLOEXEC", 0)
    if not follow_symlinks:
        flags |= getattr(os, "O_NOFOLLOW", 0)
    shown = escape_text(os.fsdecode(path))
    try:
        fd = os.open(path, flags)
    except FileNotFoundError:
        raise InputError(f"{shown}: {what} not found") from None
    except OSError as exc:
        if exc.errno == errno.ELOOP and not follow_symlinks:
            raise InputError(f"{shown}: {what} is a symbolic link; refused (allowed: regular files)") from None
        raise InputError(f"{shown}: cannot read {what} ({exc.strerror or exc})") from None
    st = os.fstat(fd)
    if not stat.S_ISREG(st.st_mode):
        os.close(fd)
        raise InputError(f"{shown}: {what} is {_kind_of(st.st_mode)}; refused (allowed: regular files)")
    if hasattr(os, "set_blocking"):
        os.set_blocking(fd, True)
    return fd, st.st_size


def read_regular_file(
    path: str | os.PathLike, what: str, *, max_bytes: int, follow_symlinks: bool = True, limit_hint: str = ""
) -> bytes:
    """The bytes of a regular file of at most ``max_bytes``, read through :func:`open_regular_file`.

    Raises
    ------
    InputError
        As :func:`open_regular_file`, or when the file is larger than
        ``max_bytes`` (checked before reading, and again while reading, for a
        file that grows).
    """
    fd, size = open_regular_file(path, what, follow_symlinks=follow_symlinks)
    shown = escape_text(os.fsdecode(path))
    too_big = InputError(f"{shown}: {what} is too large (got {size} bytes, allowed at most {max_bytes}{limit_hint})")
    try:
        if size > max_bytes:
            raise too_big
        with os.fdopen(fd, "rb", closefd=False) as fh:
            data = fh.read(max_bytes + 1)
    except OSError as exc:
        raise InputError(f"{shown}: cannot read {what} ({exc.strerror or exc})") from None
    finally:
        os.close(fd)
    if len(data) > max_bytes:
        raise too_big
    return data


def is_inside(path: str | os.PathLike, folder: str | os.PathLike) -> bool:
    """Whether ``path``, all links resolved, lies inside ``folder`` (resolved too)."""
    return Path(os.path.realpath(path)).is_relative_to(os.path.realpath(folder))
