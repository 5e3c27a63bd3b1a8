"""Atomic file writes: write to a temporary name in the same folder, then rename."""

from __future__ import annotations

import contextlib
import hashlib
import os
import tempfile
from pathlib import Path
from typing import Iterator, Sequence


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


def check_output_dir(path: str | os.PathLike, flag: str) -> Path:
    """Check, without making anything, that a flag's output folder can be made and written.

    The folder itself is made by the first write into it, so a run that stops on
    an input error leaves nothing behind, not even an empty folder.

    Raises
    ------
    InputError
        When ``path`` or one of its parents is a file, or the folder (or the
        nearest existing parent) is not writable.
    """
    from .errors import InputError

    out = Path(path)
    if out.exists() and not out.is_dir():
        raise InputError(f"{flag} {out}: not a folder (a file of that name exists; allowed: a folder or a new name)")
    existing = next(p for p in (out, *out.absolute().parents) if p.exists())
    if not existing.is_dir():
        raise InputError(f"{flag} {out}: {existing} is a file, not a folder")
    if not os.access(existing, os.W_OK | os.X_OK):
        raise InputError(f"{flag} {out}: no permission to write in {existing}")
    return out


def ensure_output_dir(path: str | os.PathLike, flag: str) -> Path:
    """:func:`check_output_dir`, then make the folder.

    Raises
    ------
    InputError
        As :func:`check_output_dir`, or when the folder cannot be made.
    """
    from .errors import InputError

    out = check_output_dir(path, flag)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"{flag} {out}: cannot make the folder ({exc.strerror or exc})") from None
    return out


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
    from .errors import InputError

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


#: The list of files a command wrote into its output folder (one relative path a line), kept in that folder.
WRITTEN_LIST = ".surfinspect-written"
_OWNER_PREFIX = "# written for: "


class OutputFolder:
    """An output folder that never mixes runs: a folder holding anything is refused unless told.

    :meth:`claim` (before the first write) refuses a folder that holds
    anything, unless ``overwrite`` is given or the folder holds only what was
    written before for the same ``owner`` (a batch's own export, written
    again). With ``overwrite``, the files the tool listed there before
    (:data:`WRITTEN_LIST`) are removed and nothing else. :meth:`finish` (after
    the last write) lists every file the run added, so the next ``overwrite``
    removes exactly those.
    """

    def __init__(self, path: str | os.PathLike, flag: str, *, overwrite: bool = False, owner: str | None = None):
        self.path = check_output_dir(path, flag)
        self.flag = flag
        self.overwrite = overwrite
        self.owner = owner
        self._before: set[Path] | None = None  # set by claim()

    def _listed(self) -> tuple[str | None, list[str]]:
        try:
            lines = (self.path / WRITTEN_LIST).read_text(encoding="utf-8").splitlines()
        except (OSError, UnicodeDecodeError):
            return None, []
        owner = next((ln[len(_OWNER_PREFIX) :] for ln in lines if ln.startswith(_OWNER_PREFIX)), None)
        return owner, [ln for ln in lines if ln and not ln.startswith("#")]

    def _files(self) -> set[Path]:
        if not self.path.is_dir():
            return set()
        return {p.relative_to(self.path) for p in self.path.rglob("*") if not p.is_dir()} - {Path(WRITTEN_LIST)}

    def claim(self) -> OutputFolder:
        """Check the folder may be written (see the class); with ``overwrite``, remove the earlier listed files."""
        from .errors import InputError

        entries = sorted(self._files())
        owner, listed = self._listed()
        same_owner = self.owner is not None and owner == self.owner and set(map(Path, listed)) >= set(entries)
        if entries and not self.overwrite and not same_owner:
            foreign = [e for e in entries if e.as_posix() not in listed] or entries
            raise InputError(
                f"{self.flag} {self.path}: folder is not empty ({len(entries)} file(s), e.g. {foreign[0]}); "
                "allowed: a new or empty folder, or --overwrite to remove what surfinspect wrote there before"
            )
        if self.overwrite or same_owner:
            root = self.path.resolve()
            for rel in listed:
                name = Path(rel)
                if name.is_absolute() or ".." in name.parts:
                    continue  # only names inside the folder
                target = self.path / name
                if not target.parent.resolve().is_relative_to(root):
                    continue  # never through a linked folder out of it
                if target.is_symlink() or (target.is_file() and target.resolve().is_relative_to(root)):
                    target.unlink()
            self._prune_empty_dirs()
            with contextlib.suppress(FileNotFoundError):
                (self.path / WRITTEN_LIST).unlink()
        self._before = self._files()
        return self

    def _prune_empty_dirs(self) -> None:
        root = self.path.resolve()
        inside = (
            p for p in self.path.rglob("*") if p.is_dir() and not p.is_symlink() and p.resolve().is_relative_to(root)
        )
        for d in sorted(inside, reverse=True):
            with contextlib.suppress(OSError):
                d.rmdir()  # only empty folders go

    def finish(self) -> list[Path]:
        """List (in :data:`WRITTEN_LIST`) and return the files this run added to the folder."""
        if self._before is None:
            return []  # not claimed (refused, or stopped before): nothing of this run is there
        added = sorted(self._files() - self._before)
        if added:
            head = ["# files surfinspect wrote here; --overwrite removes these and nothing else"]
            if self.owner is not None:
                head.append(_OWNER_PREFIX + self.owner)
            write_text_atomic(self.path / WRITTEN_LIST, "\n".join(head + [p.as_posix() for p in added]) + "\n")
        return [self.path / p for p in added]
