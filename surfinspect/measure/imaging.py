"""Reading images: 8/16-bit PNG and TIFF, JPEG, BMP; colour to grey; file hashes.

One policy for every image that enters the engine: a 2-D float32 array of grey
values scaled to [0, 1] by the file's own bit depth, rows growing downward.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path

import cv2
import numpy as np

from ..errors import InputError
from ..results import ImageInfo

__all__ = ["LoadedImage", "read_image", "decode_image", "as_grey_float", "IMAGE_SUFFIXES"]

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

    Raises
    ------
    InputError
        When the bytes are empty, truncated or not an image this tool reads.
    """
    if not data:
        raise InputError(f"{name}: image file is empty")
    if _looks_truncated(data):  # checked first: the decoder would print its own complaint
        raise InputError(f"{name}: image file is truncated (its end marker is missing)")
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


def _looks_truncated(data: bytes) -> bool:
    # OpenCV fills a truncated PNG or JPEG with grey and only warns; check the end markers.
    if data[:8] == b"\x89PNG\r\n\x1a\n":
        return b"IEND" not in data[-16:]
    if data[:2] == b"\xff\xd8":
        return data.rstrip(b"\x00")[-2:] != b"\xff\xd9"
    return False


def read_image(path: str | Path) -> LoadedImage:
    """Read an image file for inspection.

    Parameters
    ----------
    path : str or Path
        An 8- or 16-bit PNG or TIFF, a JPEG or a BMP; colour is converted to grey.

    Returns
    -------
    LoadedImage
        ``pixels`` (M, N) float32 in [0, 1] and ``info`` with the SHA-256 of
        the file's bytes, its size and bit depth.

    Raises
    ------
    InputError
        When the file is missing, unreadable, empty or truncated.
    """
    path = Path(path)
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise InputError(f"{path}: image file not found") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot read image ({exc.strerror or exc})") from None
    pixels, bit_depth = decode_image(data, str(path))
    info = ImageInfo(
        path=str(path),
        sha256=hashlib.sha256(data).hexdigest(),
        width=int(pixels.shape[1]),
        height=int(pixels.shape[0]),
        bit_depth=bit_depth,
    )
    return LoadedImage(pixels=pixels, info=info)
