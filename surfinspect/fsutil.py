"""Atomic file writes: write to a temporary name in the same folder, then rename."""

from __future__ import annotations

import contextlib
import hashlib
import os
import tempfile
from pathlib import Path
from typing import Iterator


def _file_mode() -> int:
    # mkstemp creates 0600 files; results and reports get the usual mode under the umask
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


_MODE = _file_mode()


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike, *, mode: int | None = None) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success rename it over ``path``.

    On any exception the temporary file is removed and ``path`` is untouched,
    so a reader never sees a half-written report or result. ``mode`` sets the
    file's permission bits (default: 0666 less the umask).
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix="." + path.name + ".", suffix=".part", dir=path.parent)
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        with open(tmp_path, "rb+") as fh:
            os.fsync(fh.fileno())
        if mode is None:
            os.chmod(tmp_path, _MODE)
        else:
            os.chmod(tmp_path, mode)
        os.replace(tmp_path, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp_path.unlink()
        raise


def write_bytes_atomic(path: str | os.PathLike, data: bytes) -> None:
    with atomic_path(path) as tmp:
        tmp.write_bytes(data)


def write_text_atomic(path: str | os.PathLike, text: str) -> None:
    write_bytes_atomic(path, text.encode("utf-8"))


def sha256_bytes(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def sha256_file(path: str | os.PathLike, chunk: int = 1 << 20) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while True:
            block = fh.read(chunk)
            if not block:
                break
            h.update(block)
    return h.hexdigest()


def ensure_output_dir(path: str | os.PathLike, flag: str) -> Path:
    """Make the output folder given by a command-line flag, or say in one line why it cannot be.

    Raises
    ------
    InputError
        When ``path`` is a file, or the folder cannot be made or written.
    """
    from .errors import InputError

    out = Path(path)
    if out.exists() and not out.is_dir():
        raise InputError(f"{flag} {out}: not a folder (a file of that name exists; allowed: a folder or a new name)")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"{flag} {out}: cannot make the folder ({exc.strerror or exc})") from None
    if not os.access(out, os.W_OK):
        raise InputError(f"{flag} {out}: the folder is not writable")
    return out
