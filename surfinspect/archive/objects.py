"""The content-addressed object store: every archived file named by the SHA-256 of its bytes.

``DIR/objects/ab/cdef...``: the first two hex digits name a sub-folder. An
object is written under a temporary name and renamed into place, read-only
(0444: never written again, and not writable by anyone by mistake), and
stored once however often it is referred to.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path
from typing import Iterator

from ..errors import InputError
from ..fsutil import atomic_path, sha256_bytes, sha256_file

__all__ = ["ObjectStore", "OBJECTS_DIR", "OBJECT_MODE"]

OBJECTS_DIR = "objects"
OBJECT_MODE = 0o440  # read-only, and not readable by other users: images are customer data


class ObjectStore:
    def __init__(self, root: str | os.PathLike):
        self.root = Path(root) / OBJECTS_DIR

    @classmethod
    def at(cls, folder: str | os.PathLike) -> "ObjectStore":
        """The store in ``folder`` itself (an archive whose index is a database)."""
        store = cls.__new__(cls)
        store.root = Path(folder)
        return store

    def make(self) -> None:
        try:
            self.root.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise InputError(
                f"--archive: cannot make the folder {self.root} for the archived files ({exc.strerror or exc})"
            )

    def path(self, sha256: str) -> Path:
        return self.root / sha256[:2] / sha256[2:]

    def read(self, sha256: str) -> bytes:
        return self.path(sha256).read_bytes()

    def put_bytes(self, data: bytes) -> str:
        sha = sha256_bytes(data)
        target = self.path(sha)
        if not target.exists():
            with atomic_path(target, mode=OBJECT_MODE) as tmp:
                tmp.write_bytes(data)
        return sha

    def put_file(self, path: Path, expected_sha256: str | None) -> str:
        """Copy a file in; refused when its bytes are not the ``expected_sha256`` planned for it."""
        sha = sha256_file(path)
        if expected_sha256 is not None and sha != expected_sha256:
            raise InputError(
                f"{path}: the file changed while the batch ran (hash {sha[:12]}…, planned {expected_sha256[:12]}…)"
            )
        target = self.path(sha)
        if not target.exists():
            with atomic_path(target, mode=OBJECT_MODE) as tmp:
                shutil.copyfile(path, tmp)
                if sha256_file(tmp) != sha:
                    raise InputError(f"{path}: the file changed while it was being archived; run the batch again")
        return sha

    def state(self, sha256: str) -> str | None:
        """None when the object is there and matches its hash; else what is wrong, in words."""
        target = self.path(sha256)
        if not target.exists():
            return "is missing"
        if not target.is_file():
            return "is not a regular file"
        try:
            actual = sha256_file(target)
        except OSError as exc:
            return f"cannot be read ({exc.strerror or exc})"
        return None if actual == sha256 else "has changed (its content no longer matches its hash)"

    def stored(self) -> Iterator[str]:
        """The hash of every object file present (names that are not hashes are skipped)."""
        if not self.root.is_dir():
            return
        for sub in sorted(self.root.iterdir()):
            if not sub.is_dir() or len(sub.name) != 2:
                continue
            for f in sorted(sub.iterdir()):
                name = sub.name + f.name
                if len(name) == 64 and all(c in "0123456789abcdef" for c in name):
                    yield name
