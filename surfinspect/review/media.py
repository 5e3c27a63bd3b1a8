"""Thumbnails of the overlay pictures, cached beside the archive under the content hash they come from.

The cache folder is ``DIR/review-cache/`` (outside ``objects/``, so ``verify``
does not count it). A thumbnail's name holds the SHA-256 of the overlay it is
made from and its width: a changed overlay has another hash, so a stale
thumbnail is never served, and the cache may be deleted at any time.
"""

from __future__ import annotations

from pathlib import Path

from ..archive import store as archive
from ..fsutil import write_bytes_atomic

CACHE_FOLDER = "review-cache"
THUMB_WIDTH = 240


def cache_dir(archive_root: Path) -> Path:
    return Path(archive_root) / CACHE_FOLDER


def thumbnail(arc: archive.Archive, overlay_sha256: str, width: int = THUMB_WIDTH) -> bytes:
    """PNG thumbnail (``width`` pixels wide) of a stored overlay, made once and then read from the cache."""
    path = cache_dir(arc.root) / "thumbs" / overlay_sha256[:2] / f"{overlay_sha256}-w{width}.png"
    try:
        return path.read_bytes()
    except OSError:
        pass
    import cv2
    import numpy as np

    picture = cv2.imdecode(np.frombuffer(arc.read_object(overlay_sha256), np.uint8), cv2.IMREAD_COLOR)
    if picture is None:
        raise ValueError(f"overlay {overlay_sha256}: not a readable picture")
    h, w = picture.shape[:2]
    scale = min(1.0, width / float(w))
    if scale < 1.0:
        picture = cv2.resize(picture, (width, max(1, round(h * scale))), interpolation=cv2.INTER_AREA)
    ok, png = cv2.imencode(".png", picture, [cv2.IMWRITE_PNG_COMPRESSION, 3])
    if not ok:  # pragma: no cover - OpenCV encodes any 8-bit picture
        raise ValueError(f"overlay {overlay_sha256}: cannot encode its thumbnail")
    data = png.tobytes()
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        write_bytes_atomic(path, data)
    except OSError:
        pass  # a read-only archive folder: serve it uncached
    return data
