"""Reading images: 8/16-bit PNG and TIFF, JPEG, BMP; colour to grey; file hashes.

One policy for every image that enters the engine: a 2-D float32 array of grey
values scaled to [0, 1] by the file's own bit depth, rows growing downward.

An image file is untrusted input. Before it is decoded: only a regular file
is read (never a FIFO or a device), at most ``SURFINSPECT_MAX_IMAGE_MB``
megabytes of it (default 1024), and the size its header declares must be
within the pixel budget, ``SURFINSPECT_MAX_MEGAPIXELS`` (default 200). Then a
strict decoder must read the whole file without a warning (libjpeg-turbo
through simplejpeg for JPEG, Pillow for the rest) before OpenCV decodes it for
the engine: OpenCV, like libjpeg, fills a damaged or short file with grey and
only warns.
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import logging
import os
import re
import tempfile
import threading
import warnings
import zlib
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator

import cv2
import numpy as np
import simplejpeg
from PIL import Image

from ..errors import InputError
from ..inputs import env_limit, read_regular_file
from ..results import ImageInfo

__all__ = [
    "LoadedImage",
    "read_image",
    "decode_image",
    "as_grey_float",
    "IMAGE_SUFFIXES",
    "MAX_MEGAPIXELS_ENV",
    "MAX_IMAGE_MB_ENV",
    "pixel_budget",
]

#: Environment variable: the pixel budget in megapixels (default 200; a header declaring more is refused).
MAX_MEGAPIXELS_ENV = "SURFINSPECT_MAX_MEGAPIXELS"
DEFAULT_MAX_MEGAPIXELS = 200.0
#: Environment variable: the largest image file read, in megabytes (default 1024).
MAX_IMAGE_MB_ENV = "SURFINSPECT_MAX_IMAGE_MB"
DEFAULT_MAX_IMAGE_MB = 1024.0
#: Smallest image side, px.
MIN_SIDE_PX = 16

IMAGE_SUFFIXES = (".png", ".tif", ".tiff", ".jpg", ".jpeg", ".bmp")

# A broken file is reported once, in our words (InputError); OpenCV's own decoder warnings
# would only repeat it on stderr.
cv2.utils.logging.setLogLevel(cv2.utils.logging.LOG_LEVEL_SILENT)


@dataclass(frozen=True)
class LoadedImage:
    pixels: np.ndarray  # (M, N) float32 in [0, 1]
    info: ImageInfo


def as_grey_float(image: np.ndarray) -> np.ndarray:
    """Convert an image array to the engine's form: (M, N) float32 grey in [0, 1].

    Parameters
    ----------
    image : (M, N) or (M, N, 3|4) ndarray
        uint8 and uint16 are scaled by their full range; float input is taken
        as already in [0, 1]. Colour is converted with the ITU-R BT.601 luma
        weights (OpenCV's ``cvtColor``), channels in RGB order.

    Raises
    ------
    ValueError
        For an unsupported shape or dtype (the message names both).
    """
    a = np.asarray(image)
    if a.ndim == 3 and a.shape[2] in (3, 4):
        if a.dtype == np.float64:
            a = a.astype(np.float32)
        code = cv2.COLOR_RGB2GRAY if a.shape[2] == 3 else cv2.COLOR_RGBA2GRAY
        a = cv2.cvtColor(np.ascontiguousarray(a), code)
    if a.ndim != 2:
        raise ValueError(f"image must be (M, N) grey or (M, N, 3|4) colour (got shape {a.shape})")
    if a.dtype == np.uint8:
        return a.astype(np.float32) * np.float32(1 / 255)
    if a.dtype == np.uint16:
        return a.astype(np.float32) * np.float32(1 / 65535)
    if a.dtype in (np.float32, np.float64):
        return a.astype(np.float32, copy=False)
    if a.dtype == bool:
        return a.astype(np.float32)
    raise ValueError(f"image dtype must be uint8, uint16 or float (got {a.dtype})")


def decode_image(data: bytes, name: str) -> tuple[np.ndarray, int]:
    """Decode image file bytes to grey float32 and the file's bit depth.

    The header's declared size is checked against :func:`pixel_budget` and
    the whole file is read by a strict decoder before OpenCV decodes it (see
    the module notes).

    Raises
    ------
    InputError
        When the bytes are empty, truncated, damaged, declare more pixels than
        the budget or fewer than 16 x 16, or are not an image this tool reads.
    """
    if not data:
        raise InputError(f"{name}: image file is empty")
    if _looks_truncated(data):  # checked first: the decoder would print its own complaint
        raise InputError(f"{name}: image file is truncated (its end marker is missing)")
    _check_strictly(data, name)
    buf = np.frombuffer(data, dtype=np.uint8)
    # ANYCOLOR (not UNCHANGED) so that a camera's EXIF orientation tag is applied: the picture
    # is measured the way it is seen, and lay angles refer to that view
    raw = cv2.imdecode(buf, cv2.IMREAD_ANYCOLOR | cv2.IMREAD_ANYDEPTH)
    if raw is None or raw.size == 0:
        raise InputError(
            f"{name}: not a readable image (allowed PNG, TIFF, JPEG, BMP at 8 or 16 bits; the file may be truncated)"
        )
    if raw.dtype not in (np.uint8, np.uint16):
        raise InputError(f"{name}: unsupported sample type {raw.dtype} (allowed 8- or 16-bit integer images)")
    bit_depth = 16 if raw.dtype == np.uint16 else 8
    if raw.ndim == 3:
        # OpenCV decodes colour as BGR(A)
        code = cv2.COLOR_BGR2GRAY if raw.shape[2] == 3 else cv2.COLOR_BGRA2GRAY
        raw = cv2.cvtColor(raw, code)
    if raw.shape[0] < 16 or raw.shape[1] < 16:
        raise InputError(f"{name}: image is too small ({raw.shape[1]}x{raw.shape[0]} px, allowed at least 16x16)")
    return as_grey_float(raw), bit_depth


def pixel_budget() -> int:
    """The largest image, in pixels, that is decoded (``SURFINSPECT_MAX_MEGAPIXELS``, default 200 MP).

    Raises
    ------
    InputError
        When the variable is set to something other than a number from 0.001 to 10000.
    """
    return int(env_limit(MAX_MEGAPIXELS_ENV, DEFAULT_MAX_MEGAPIXELS, lo=0.001, hi=10_000) * 1e6)


#: Pillow's own decompression-bomb bound is a module global; it is lifted only while a header is
#: read under this lock, because the pixel budget below takes its place.
_PIL_LOCK = threading.Lock()


@contextlib.contextmanager
def _pillow_strict(data: bytes) -> Iterator[Image.Image]:
    """The image opened by Pillow with every warning an error, and truncated files refused.

    Pillow's own decompression-bomb bound (a module global) is lifted for the
    open, under a lock, because the pixel budget takes its place.
    """
    said = _PillowLog()
    pil_log = logging.getLogger("PIL")
    pil_log.addHandler(said)
    propagate, pil_log.propagate = pil_log.propagate, False  # not on stderr: in our error message
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            warnings.simplefilter("ignore", Image.DecompressionBombWarning)
            with _PIL_LOCK:
                bound = Image.MAX_IMAGE_PIXELS
                Image.MAX_IMAGE_PIXELS = None
                try:
                    im = Image.open(io.BytesIO(data))
                finally:
                    Image.MAX_IMAGE_PIXELS = bound
            with im:
                yield im
    finally:
        pil_log.removeHandler(said)
        pil_log.propagate = propagate
    if said.messages:
        raise ValueError(said.messages[0])


class _PillowLog(logging.Handler):
    """Pillow's own warnings (it logs some instead of warning), kept as findings."""

    def __init__(self) -> None:
        super().__init__(logging.WARNING)
        self.messages: list[str] = []

    def emit(self, record: logging.LogRecord) -> None:
        self.messages.append(record.getMessage())


@contextlib.contextmanager
def _libtiff_messages() -> Iterator[list[str]]:
    """Collect what C decoders write to the process's stderr meanwhile (libtiff's warnings and errors).

    File descriptor 2 is pointed at a temporary file for the duration, under
    the Pillow lock; another thread's stderr output in that window lands in
    the list too. The list is filled when the block ends.
    """
    lines: list[str] = []
    with _PIL_LOCK, tempfile.TemporaryFile() as sink:
        saved = os.dup(2)
        try:
            os.dup2(sink.fileno(), 2)
            yield lines
        finally:
            os.dup2(saved, 2)
            os.close(saved)
            sink.seek(0)
            lines += [ln for ln in sink.read(8192).decode("utf-8", "replace").splitlines() if ln.strip()]


_PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def _png_chunk_problem(data: bytes) -> str | None:
    """What is wrong with a PNG file's chunk structure, or None.

    Every chunk (length, type, data, CRC-32 of type and data; PNG
    specification, ISO/IEC 15948:2004, section 5.3) must lie inside the file,
    carry a matching CRC, and the file must end with IEND. Decoders differ on
    a chunk whose length runs past the end: one reads on, another stalls for
    seconds.
    """
    at = len(_PNG_SIGNATURE)
    while at + 12 <= len(data):
        length = int.from_bytes(data[at : at + 4], "big")
        kind = data[at + 4 : at + 8]
        end = at + 8 + length
        shown = kind.decode("latin-1").encode("unicode_escape").decode("ascii")
        if end + 4 > len(data):
            return f"chunk {shown} at byte {at} claims {length} bytes, more than the file holds"
        if zlib.crc32(data[at + 4 : end]) != int.from_bytes(data[end : end + 4], "big"):
            return f"chunk {shown} at byte {at} fails its CRC check"
        if kind == b"IEND":
            return None
        at = end + 4
    return "the file ends before its IEND chunk"


def _is_jpeg(data: bytes) -> bool:
    return data[:3] == b"\xff\xd8\xff"


def _declared_size(data: bytes, name: str) -> tuple[int, int]:
    """(width, height) from the file's header, without decoding the pixels."""
    try:
        if _is_jpeg(data):
            height, width, _, _ = simplejpeg.decode_jpeg_header(data)
            return int(width), int(height)
        with _pillow_strict(data) as im:
            return im.size
    except Exception as exc:  # any decoder's complaint about a header is the same finding for the user
        said = re.sub(r" <_io\.BytesIO object at 0x[0-9a-f]+>", "", str(exc))
        raise InputError(
            f"{name}: not a readable image (allowed PNG, TIFF, JPEG, BMP at 8 or 16 bits; the header says: {said})"
        ) from None


def _check_strictly(data: bytes, name: str) -> None:
    """Refuse an image whose header exceeds the pixel budget, or that a strict decoder finds damaged.

    The whole file is decoded once by a decoder that treats every warning as
    an error: libjpeg-turbo (simplejpeg, ``strict=True``, at 1/8 scale: every
    entropy-coded byte is still read) for JPEG, Pillow with truncated images
    refused for the rest. A JPEG cut short and closed with an end-of-image
    marker passes an end-marker check but not this one ("premature end of
    data segment").
    """
    width, height = _declared_size(data, name)
    budget = pixel_budget()
    if width * height > budget:
        raise InputError(
            f"{name}: image too large (header declares {width}x{height} = {width * height / 1e6:.1f} MP, "
            f"allowed at most {budget / 1e6:g} MP; set {MAX_MEGAPIXELS_ENV} to raise the budget)"
        )
    if min(width, height) < MIN_SIDE_PX:
        raise InputError(
            f"{name}: image is too small ({width}x{height} px, allowed at least {MIN_SIDE_PX}x{MIN_SIDE_PX})"
        )
    problem = _png_chunk_problem(data) if data[:8] == _PNG_SIGNATURE else None
    if problem is not None:
        raise InputError(f"{name}: image file is damaged ({problem})")
    try:
        if _is_jpeg(data):
            simplejpeg.decode_jpeg(data, colorspace="GRAY", min_factor=8, strict=True)
        else:
            with _pillow_strict(data) as im, _libtiff_messages() as said:
                im.load()
            pixel_trouble = [line for line in said if "Unknown field with tag" not in line]
            if pixel_trouble:  # libtiff warns on stderr, not to Pillow, when it repairs pixel data
                raise ValueError(pixel_trouble[0])
    except Exception as exc:  # a damaged file: the decoder's words name what is wrong
        raise InputError(f"{name}: image file is damaged or truncated (the decoder reports: {exc})") from None


def _looks_truncated(data: bytes) -> bool:
    # OpenCV fills a truncated PNG or JPEG with grey and only warns; check the end markers.
    if data[:8] == b"\x89PNG\r\n\x1a\n":
        return b"IEND" not in data[-16:]
    if data[:2] == b"\xff\xd8":
        return data.rstrip(b"\x00")[-2:] != b"\xff\xd9"
    return False


def read_image_bytes(path: str | Path, *, follow_symlinks: bool = True) -> bytes:
    """An image file's bytes, read under the input policy (regular file, at most ``SURFINSPECT_MAX_IMAGE_MB``)."""
    max_mb = env_limit(MAX_IMAGE_MB_ENV, DEFAULT_MAX_IMAGE_MB, lo=0.001, hi=1_000_000)
    return read_regular_file(
        Path(path),
        "image file",
        max_bytes=int(max_mb * 1e6),
        follow_symlinks=follow_symlinks,
        limit_hint=f"; set {MAX_IMAGE_MB_ENV} in MB to raise it",
    )


def read_image(path: str | Path, *, follow_symlinks: bool = True) -> LoadedImage:
    """Read an image file for inspection.

    Parameters
    ----------
    path : str or Path
        An 8- or 16-bit PNG or TIFF, a JPEG or a BMP; colour is converted to grey.
    follow_symlinks : bool
        False refuses a symbolic link (a batch reads the files it listed, not where a link points).

    Returns
    -------
    LoadedImage
        ``pixels`` (M, N) float32 in [0, 1] and ``info`` with the SHA-256 of
        the file's bytes, its size and bit depth.

    Raises
    ------
    InputError
        When the file is missing, unreadable, not a regular file, larger than
        ``SURFINSPECT_MAX_IMAGE_MB``, declares more pixels than
        ``SURFINSPECT_MAX_MEGAPIXELS``, is empty, truncated or damaged.
    """
    path = Path(path)
    data = read_image_bytes(path, follow_symlinks=follow_symlinks)
    pixels, bit_depth = decode_image(data, str(path))
    info = ImageInfo(
        path=str(path),
        sha256=hashlib.sha256(data).hexdigest(),
        width=int(pixels.shape[1]),
        height=int(pixels.shape[0]),
        bit_depth=bit_depth,
    )
    return LoadedImage(pixels=pixels, info=info)
