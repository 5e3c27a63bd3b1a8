"""The station's journal of judged parts, kept until ``watch`` closes the batch into the archive.

The archive plans a batch's image set once, when the batch starts (its audit
trail binds the batch id to that set), so a batch that grows part by part on
the line is kept here while it is open and handed to the archive at close, in
arrival order, through the same recording as ``batch``. Layout::

    ARCHIVE/watch/<batch id>/journal.jsonl      one header line, then one line per part
    ARCHIVE/watch/<batch id>/parts/000001/      result.json, overlay.png, image copy

Every file of an entry is written under a temporary name, flushed to disk and
renamed into place before the entry's journal line is appended and flushed
(``fsync``): a part is recorded when its line is on disk, and a crash at any
moment leaves either the whole entry or none. A torn last line (a crash while
appending) is dropped on reopening; that part is judged again.
"""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import threading
import uuid
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator

from ..errors import InputError
from ..fsutil import atomic_path, sha256_file, write_bytes_atomic

__all__ = ["SPOOL_FORMAT", "SpooledPart", "Spool", "ImageChanged", "spool_dir"]

SPOOL_FORMAT = "surfinspect.watch-spool/1"
JOURNAL_NAME = "journal.jsonl"


class ImageChanged(Exception):
    """The image's bytes changed between reading and recording it (it is judged again)."""


@dataclass(frozen=True)
class SpooledPart:
    part_key: str
    image_sha256: str | None  # None: the file's bytes could not be read
    verdict: str  # accept | reject | review, or the archive's error verdict
    error: str | None
    entry: str  # folder name under parts/


def spool_dir(archive_dir: str | os.PathLike, batch_id: str) -> Path:
    return Path(archive_dir) / "watch" / batch_id


class Spool:
    """The open batch of one station: which parts are recorded, with their files.

    Raises
    ------
    InputError
        When the spool was started with another recipe, or its journal
        cannot be read or written.
    """

    def __init__(self, archive_dir: str | os.PathLike, batch_id: str, recipe_sha256: str):
        self.root = spool_dir(archive_dir, batch_id)
        self.journal = self.root / JOURNAL_NAME
        self._lock = threading.Lock()
        self._parts: dict[str, SpooledPart] = {}
        header = {"format": SPOOL_FORMAT, "batch_id": batch_id, "recipe_sha256": recipe_sha256}
        try:
            (self.root / "parts").mkdir(parents=True, exist_ok=True)
            shutil.rmtree(self.root / "staging", ignore_errors=True)  # files held by a run that ended
            if not self.journal.exists() or self.journal.stat().st_size == 0:
                write_bytes_atomic(self.journal, _line(header))
            else:
                self._load(header)
        except OSError as exc:
            raise InputError(f"{self.root}: cannot use the station's journal ({exc.strerror or exc})") from None

    def _load(self, header: dict) -> None:
        data = self.journal.read_bytes()
        lines = data.split(b"\n")
        good_end, records = 0, []
        for i, raw in enumerate(lines):
            try:
                records.append(json.loads(raw))
            except ValueError:
                if i < len(lines) - 1 and raw.strip():
                    raise InputError(f"{self.journal}: line {i + 1}: not a journal record (the journal was damaged)")
                break  # the torn tail of a crash while appending, or the empty rest after the last newline
            good_end += len(raw) + 1
        first = records[0] if records else {}
        if first.get("format") != SPOOL_FORMAT or first.get("batch_id") != header["batch_id"]:
            raise InputError(f"{self.journal}: line 1: not a journal of batch {header['batch_id']!r} ({SPOOL_FORMAT})")
        if first.get("recipe_sha256") != header["recipe_sha256"]:
            raise InputError(
                f"--batch-id: open batch {header['batch_id']!r} was started with another recipe "
                f"({str(first.get('recipe_sha256'))[:12]}…); use the same recipe file or a new batch id"
            )
        if good_end != len(data):  # a torn tail to cut off, or a whole last record still without its newline
            with open(self.journal, "rb+") as fh:
                fh.truncate(min(good_end, len(data)))
                if good_end > len(data):
                    fh.seek(0, os.SEEK_END)
                    fh.write(b"\n")
                os.fsync(fh.fileno())
        for number, rec in enumerate(records[1:], start=2):
            try:
                part = SpooledPart(**rec)
            except TypeError:
                raise InputError(
                    f"{self.journal}: line {number}: not a part record (the journal was damaged)"
                ) from None
            self._parts[part.part_key] = part

    # -- reading

    def __contains__(self, part_key: str) -> bool:
        return part_key in self._parts

    def __len__(self) -> int:
        return len(self._parts)

    def parts(self) -> list[SpooledPart]:
        """Recorded parts in the order they were recorded."""
        return list(self._parts.values())

    def image_path(self, part: SpooledPart) -> Path | None:
        folder = self.root / "parts" / part.entry
        found = sorted(folder.glob("image.*")) if part.image_sha256 else []
        return found[0] if found else None

    def outputs(self) -> Iterator[dict]:
        """Each part as a ``batch`` worker hands it over (read from disk one at a time)."""
        for part in self.parts():
            folder = self.root / "parts" / part.entry
            if part.error is not None:
                yield {"part_key": part.part_key, "error": part.error}
            else:
                yield {
                    "part_key": part.part_key,
                    "result_json": (folder / "result.json").read_bytes(),
                    "overlay_png": (folder / "overlay.png").read_bytes(),
                }

    def discard(self) -> None:
        """Remove the journal and its files, once the archive holds the closed batch (they would only double it)."""
        shutil.rmtree(self.root, ignore_errors=True)
        with contextlib.suppress(OSError):
            self.root.parent.rmdir()  # the watch/ folder, when no other batch is open

    # -- recording

    def stage(self, image: Path) -> Path:
        """Hold on to ``image``'s bytes before it is judged: a hard link (a copy across file systems).

        The camera may delete or replace the file after it was judged; the
        staged file is what gets recorded. FileNotFoundError when it is gone.
        """
        staging = self.root / "staging"
        staging.mkdir(exist_ok=True)
        target = staging / f"{uuid.uuid4().hex}{image.suffix.lower()}"
        try:
            os.link(image, target)
        except FileNotFoundError:
            raise
        except OSError:  # another file system, or links not allowed there
            with atomic_path(target) as tmp:
                shutil.copyfile(image, tmp)
        return target

    def unstage(self, staged: Path) -> None:
        with contextlib.suppress(FileNotFoundError):
            staged.unlink()

    def record(
        self,
        part_key: str,
        *,
        image: Path | None,
        image_sha256: str | None,
        verdict: str,
        result_json: bytes | None = None,
        overlay_png: bytes | None = None,
        error: str | None = None,
    ) -> SpooledPart | None:
        """Record one part durably, moving its staged ``image`` in; None when it was recorded already.

        Raises
        ------
        ImageChanged
            When the staged ``image`` does not hold the bytes of ``image_sha256``
            (the file was rewritten in place while it was judged).
        OSError
            When the journal's disk is full or not writable (nothing of the
            part is recorded then).
        """
        with self._lock:
            if part_key in self._parts:
                return None
            entry = f"{len(self._parts) + 1:06d}"
            folder = self.root / "parts" / entry
            if folder.exists():  # left by a crash before its journal line was written
                shutil.rmtree(folder)
            folder.mkdir()
            if image_sha256 is not None:
                if sha256_file(image) != image_sha256:
                    raise ImageChanged(f"{image}: the file changed while it was judged")
                os.replace(image, folder / f"image{image.suffix.lower()}")
            if result_json is not None:
                write_bytes_atomic(folder / "result.json", result_json)
                write_bytes_atomic(folder / "overlay.png", overlay_png)
            part = SpooledPart(part_key, image_sha256, verdict, error, entry)
            with open(self.journal, "ab") as fh:
                fh.write(_line(part.__dict__))
                fh.flush()
                os.fsync(fh.fileno())
            self._parts[part_key] = part
            return part


def _line(record: dict) -> bytes:
    return (json.dumps(record, sort_keys=True, ensure_ascii=False) + "\n").encode("utf-8")
