"""Image reading: bit depths, formats, colour, bad files."""

from __future__ import annotations

import hashlib
from pathlib import Path

import cv2
import numpy as np
import pytest

from surfinspect import InputError, read_image
from surfinspect.measure import synth
from surfinspect.measure.imaging import as_grey_float


@pytest.fixture
def grey():
    return synth.brushed_panel((64, 80), 30.0, seed=1)


@pytest.mark.parametrize("suffix", [".png", ".tif", ".bmp", ".jpg"])
def test_8_bit_formats_read_back(tmp_path: Path, grey, suffix):
    p = tmp_path / f"part{suffix}"
    assert cv2.imwrite(str(p), synth.to_uint8(grey))
    loaded = read_image(p)
    assert loaded.pixels.dtype == np.float32 and loaded.pixels.shape == (64, 80)
    assert loaded.info.bit_depth == 8
    assert loaded.info.sha256 == hashlib.sha256(p.read_bytes()).hexdigest()
    tol = 0.06 if suffix == ".jpg" else 0.5 / 255 + 1e-6
    assert np.abs(loaded.pixels - grey).max() <= tol


@pytest.mark.parametrize("suffix", [".png", ".tif"])
def test_16_bit_keeps_its_precision(tmp_path: Path, grey, suffix):
    p = tmp_path / f"part{suffix}"
    assert cv2.imwrite(str(p), synth.to_uint16(grey))
    loaded = read_image(p)
    assert loaded.info.bit_depth == 16
    assert np.abs(loaded.pixels - grey).max() <= 0.5 / 65535 + 1e-6


def test_colour_is_converted_with_luma_weights(tmp_path: Path):
    # ITU-R BT.601 luma: Y = 0.299 R + 0.587 G + 0.114 B (OpenCV cvtColor documentation)
    rgb = np.zeros((20, 20, 3), np.uint8)
    rgb[..., 0], rgb[..., 1], rgb[..., 2] = 200, 100, 50
    p = tmp_path / "c.png"
    cv2.imwrite(str(p), cv2.cvtColor(rgb, cv2.COLOR_RGB2BGR))
    y = read_image(p).pixels[0, 0] * 255
    assert y == pytest.approx(0.299 * 200 + 0.587 * 100 + 0.114 * 50, abs=1.0)
    assert as_grey_float(rgb)[0, 0] * 255 == pytest.approx(y, abs=1.0)


def test_bad_files_are_input_errors(tmp_path: Path, grey):
    empty = tmp_path / "empty.png"
    empty.write_bytes(b"")
    with pytest.raises(InputError, match=r"empty.png: image file is empty"):
        read_image(empty)
    junk = tmp_path / "junk.png"
    junk.write_bytes(b"not an image at all" * 10)
    with pytest.raises(InputError, match=r"junk.png: not a readable image"):
        read_image(junk)
    good = tmp_path / "good.png"
    cv2.imwrite(str(good), synth.to_uint8(grey))
    cut = tmp_path / "cut.png"
    cut.write_bytes(good.read_bytes()[: len(good.read_bytes()) // 2])
    with pytest.raises(InputError, match=r"cut.png: (image file is truncated|not a readable image)"):
        read_image(cut)
    jpg = tmp_path / "good.jpg"
    cv2.imwrite(str(jpg), synth.to_uint8(grey))
    cutj = tmp_path / "cut.jpg"
    cutj.write_bytes(jpg.read_bytes()[:-200])
    with pytest.raises(InputError, match=r"cut.jpg: (image file is truncated|not a readable image)"):
        read_image(cutj)
    with pytest.raises(InputError, match=r"missing.png: image file not found"):
        read_image(tmp_path / "missing.png")


def test_array_policy_names_bad_shapes_and_dtypes():
    with pytest.raises(ValueError, match=r"got shape \(2, 3, 5\)"):
        as_grey_float(np.zeros((2, 3, 5)))
    with pytest.raises(ValueError, match=r"got int64"):
        as_grey_float(np.zeros((4, 4), np.int64))


def test_jpeg_exif_orientation_is_applied(tmp_path: Path):
    # A camera stores a portrait shot as landscape pixels plus EXIF Orientation = 6 (rotate 90 deg
    # clockwise to view). Reference: Pillow's ImageOps.exif_transpose of the same file.
    from PIL import Image, ImageOps

    stored = synth.to_uint8(synth.brushed_panel((60, 90), 0.0, seed=3))  # horizontal grain as stored
    p = tmp_path / "portrait.jpg"
    exif = Image.Exif()
    exif[0x0112] = 6
    Image.fromarray(stored, mode="L").save(p, quality=95, exif=exif)
    seen = np.asarray(ImageOps.exif_transpose(Image.open(p))).astype(np.float32) / 255
    loaded = read_image(p).pixels
    assert loaded.shape == seen.shape == (90, 60)
    assert np.abs(loaded - seen).max() < 2 / 255
