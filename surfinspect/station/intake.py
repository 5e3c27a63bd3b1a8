"""What in a batch folder is a part, and why an entry is refused without being read.

Every entry with an image suffix is a part (links, FIFOs and devices too,
without opening them); :func:`discover_images` says for each whether it is
read, and if not, why. A refused part is recorded as not inspected with that
reason; it never stops the batch. See :mod:`surfinspect.inputs` for the
shared rules (regular files only, printable names).
"""

from __future__ import annotations

import hashlib
import os
import stat
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

from ..errors import InputError
from ..inputs import env_limit, escape_text, is_inside, open_regular_file
from ..measure.imaging import DEFAULT_MAX_IMAGE_MB, IMAGE_SUFFIXES, MAX_IMAGE_MB_ENV
from .runner import MAX_NAME_BYTES

__all__ = ["MAX_NAME_BYTES", "FoundPart", "discover_images"]


@dataclass(frozen=True)
class FoundPart:
    """A folder entry that is a part of the batch.

    ``key`` names it in the archive and on the console: its path below the
    folder, '/'-separated, with any control character or undecodable byte
    escaped (``\\n``, ``\\xff``). ``path`` is the file that is read (a link
    inside the folder is replaced by its target). ``refusal`` says why the
    entry is not read at all, or is None.
    """

    key: str
    path: Path
    refusal: str | None = None


def discover_images(
    folder: str | os.PathLike, *, recursive: bool = False, exclude: Sequence[str | os.PathLike] = ()
) -> list[FoundPart]:
    """Folder entries named like images (by suffix), sorted by path, each with any reason it is refused.

    Overlays this tool wrote (``*.overlay.png``) are never parts, nor is
    anything under an ``exclude`` folder that lies inside ``folder`` (the
    batch's own ``--out`` and ``--archive``); an ``exclude`` folder that is
    ``folder`` itself or lies outside it is ignored. Links to folders are not
    descended into. Every other entry with an image suffix is a part, also
    one that cannot be read: it is recorded as not inspected, with the reason.

    Raises
    ------
    InputError
        When the folder is missing or holds no image.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"{escape_text(str(folder))}: not a folder of images")
    skip = [os.path.realpath(e) for e in exclude if _strictly_inside(Path(e), folder)]
    found: list[FoundPart] = []
    keys: set[str] = set()
    for rel in sorted(_image_entries(folder, (), recursive, skip)):
        key = escape_text("/".join(rel))
        while key in keys:  # two raw names that escape alike stay two parts
            key += "~"
        keys.add(key)
        path = folder.joinpath(*rel)
        refusal = _name_refusal(rel) or _file_refusal(path, folder)
        target = Path(os.path.realpath(path)) if refusal is None and path.is_symlink() else path
        found.append(FoundPart(key, target, refusal))
    if not found:
        raise InputError(f"{escape_text(str(folder))}: no images found (allowed suffixes {', '.join(IMAGE_SUFFIXES)})")
    return found


#: Deepest sub-folder a recursive batch descends into, below the batch folder.
MAX_FOLDER_DEPTH = 32


def _image_entries(folder: Path, rel: tuple[str, ...], recursive: bool, skip: list[str]):
    """Relative paths (tuples of names) of entries with an image suffix; sub-folders too when recursive."""
    if len(rel) > MAX_FOLDER_DEPTH:
        raise InputError(
            f"{escape_text(str(folder.joinpath(*rel)))}: folders nested too deep "
            f"(allowed at most {MAX_FOLDER_DEPTH} levels below the batch folder)"
        )
    with os.scandir(folder.joinpath(*rel)) as listing:
        entries = list(listing)
    for entry in entries:
        if entry.is_dir(follow_symlinks=False):
            if recursive and os.path.realpath(entry.path) not in skip:
                yield from _image_entries(folder, (*rel, entry.name), recursive, skip)
            continue
        name = entry.name.lower()
        if os.path.splitext(name)[1] in IMAGE_SUFFIXES and not name.endswith(".overlay.png"):
            yield (*rel, entry.name)


def _name_refusal(rel: tuple[str, ...]) -> str | None:
    """Why a part's name cannot be kept as it is (the file is then not read), or None."""
    for name in rel:
        try:
            size = len(name.encode("utf-8"))
        except UnicodeEncodeError:
            return "the file name is not valid UTF-8 (shown with \\x escapes); rename the file to inspect it"
        if escape_text(name) != name:
            return "the file name holds a control character (shown escaped); rename the file to inspect it"
        if size > MAX_NAME_BYTES:
            return (
                f"the file name is too long (got {size} bytes, allowed at most {MAX_NAME_BYTES}); "
                "rename the file to inspect it"
            )
    return None


def _file_refusal(path: Path, folder: Path) -> str | None:
    """Why a folder entry is not read (a link out of the folder, not a regular file, too large), or None."""
    try:
        st = os.lstat(path)
        if stat.S_ISLNK(st.st_mode):
            if not is_inside(path, folder):
                return "a symbolic link to a place outside the batch folder; not followed (copy the image in instead)"
            st = os.stat(path)
    except FileNotFoundError:
        return "a symbolic link whose target does not exist"
    except OSError as exc:
        return f"cannot read the file ({exc.strerror or exc})"
    if not stat.S_ISREG(st.st_mode):
        kind = "a FIFO (named pipe)" if stat.S_ISFIFO(st.st_mode) else "a device, socket or folder"
        return f"{kind}, not a regular file; not read (allowed: regular image files)"
    max_bytes = int(env_limit(MAX_IMAGE_MB_ENV, DEFAULT_MAX_IMAGE_MB, lo=0.001, hi=1_000_000) * 1e6)
    if st.st_size > max_bytes:
        return (
            f"the file is too large (got {st.st_size} bytes, allowed at most {max_bytes}; "
            f"set {MAX_IMAGE_MB_ENV} in MB to raise it); not read"
        )
    return None


def _strictly_inside(path: Path, folder: Path) -> bool:
    path, folder = path.resolve(), folder.resolve()
    return path != folder and path.is_relative_to(folder)


def _hash_file(path: Path) -> tuple[str | None, str | None]:
    """(SHA-256, None), or (None, why) for a file whose bytes cannot be read; never follows a link."""
    try:
        fd, _ = open_regular_file(path, "image file", follow_symlinks=False)
    except InputError as exc:
        return None, str(exc)
    h = hashlib.sha256()
    try:
        with os.fdopen(fd, "rb") as fh:
            while block := fh.read(1 << 20):
                h.update(block)
    except OSError as exc:
        return None, f"{escape_text(str(path))}: cannot read the file ({exc.strerror or exc})"
    return h.hexdigest(), None
