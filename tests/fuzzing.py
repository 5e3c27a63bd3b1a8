"""Mutators for fuzzing recipes and image files, and a child process that runs command-line cases.

Used by tests/cli/test_fuzz.py. Run as a script, it is the child: it runs
every case listed in CASES.json through ``surfinspect.cli.main`` in this one
process (so hundreds of cases fit in seconds), under a memory limit and a
per-case alarm, and writes one JSON line per case: the exit code, the
stderr lines and any traceback. Before each case it writes the case's name,
so that the parent can name a case that hangs past every alarm.
"""

from __future__ import annotations

import random
import struct
import zlib

import cv2
import numpy as np

#: Text a mutation inserts into a recipe: YAML syntax, YAML 1.1 surprises, absurd numbers, hostile characters.
RECIPE_SNIPPETS = [
    "!foo ",
    "!!python/name:os.system ",
    "!!binary ",
    "&a ",
    "*a",
    "[",
    "]",
    "{",
    "}",
    ": ",
    "- ",
    "? ",
    "<<: ",
    "%TAG ! tag:x,2000:\n",
    "---\n",
    "...\n",
    "1:30",
    "yes",
    "off",
    "0o17",
    "017",
    "0x1F",
    "1_000",
    ".inf",
    "-.nan",
    "1e400",
    "1.0e+308",
    "9" * 400,
    "2001-13-45",
    "~",
    "\x00",
    "\x07",
    "\u202e",
    "\ud7ff",
    "\t",
    "'",
    '"',
    "\\",
    "\n  ",
    "\n    - ",
    "\n      ",
    "#",
    "rect: [0, 0, 1.0e+300, 5]",
    "polygon: [[0, 0]]",
    "name: " + "x" * 300,
    "lay: X\n    lay_deg: [0, 1]",
    "&a [*a]",  # a recursive alias
    "[" * 2000,  # deep nesting
    "{a: " * 200,
    "&x [&y [1, 2], *y, *y, *y, *y, *y, *y, *y]",
]

BASE_RECIPE = """\
recipe: fuzz-panel
revision: 3
datum: image
description: a panel for fuzzing
defaults:
  tolerance_deg: 3.0
regions:
  - name: face
    rect: [8, 8, 48, 48]
    lay_deg: 90
    exclude:
      - circle: [20, 20, 4]
  - name: ring
    annulus: [32, 32, 4, 12]
    lay: C
"""


def mutate_text(rng: random.Random, text: str, steps: int) -> str:
    """``steps`` random insertions, deletions, duplications and replacements."""
    for _ in range(steps):
        op = rng.random()
        at = rng.randrange(len(text) + 1)
        if op < 0.45:
            text = text[:at] + rng.choice(RECIPE_SNIPPETS) + text[at:]
        elif op < 0.65 and text:
            end = min(len(text), at + rng.randint(1, 12))
            text = text[:at] + text[end:]
        elif op < 0.75 and text:
            end = min(len(text), at + rng.randint(1, 60))
            text = text[:at] + text[at:end] * rng.randint(2, 30) + text[at:]
        elif text:
            i = min(at, len(text) - 1)
            text = text[:i] + chr(rng.choice([rng.randint(32, 126), rng.randint(0, 0x3000)])) + text[i + 1 :]
    return text


def seed_images() -> dict[str, bytes]:
    """Small valid files of every format read, 64 x 80 px: the starting points of image mutations."""
    rows, cols = 64, 80
    y, x = np.mgrid[0:rows, 0:cols]
    grey = (127 + 100 * np.sin(2 * np.pi * x / 7.0)).astype(np.uint8)
    colour = np.dstack([grey, np.roll(grey, 3, axis=1), 255 - grey])
    out = {}
    for name, image, ext, params in [
        ("grey.png", grey, ".png", []),
        ("deep.png", grey.astype(np.uint16) * 257, ".png", []),
        ("colour.png", colour, ".png", []),
        ("base.jpg", grey, ".jpg", [cv2.IMWRITE_JPEG_QUALITY, 90]),
        ("prog.jpg", colour, ".jpg", [cv2.IMWRITE_JPEG_PROGRESSIVE, 1]),
        ("grey.tif", grey, ".tif", []),
        ("deep.tif", grey.astype(np.uint16) * 257, ".tif", []),
        ("grey.bmp", grey, ".bmp", []),
    ]:
        ok, data = cv2.imencode(ext, image, params)
        assert ok, name
        out[name] = data.tobytes()
    return out


def mutate_bytes(rng: random.Random, data: bytes, steps: int) -> bytes:
    """Byte flips, cuts, inserted runs, header fields set to huge sizes, a closing JPEG marker."""
    b = bytearray(data)
    for _ in range(steps):
        op = rng.random()
        at = rng.randrange(max(1, len(b)))
        if op < 0.35 and b:
            b[at] ^= 1 << rng.randrange(8)
        elif op < 0.5:
            del b[rng.randrange(len(b) // 4 + 1, len(b) + 1) :]
        elif op < 0.6:
            b[at:at] = bytes([rng.choice([0, 0xFF, 0xD9, 0xD8, rng.randrange(256)])]) * rng.randint(1, 64)
        elif op < 0.8 and len(b) > 40:
            # width/height fields sit in the first bytes of every format: make them huge
            pos = rng.randrange(12, 40)
            b[pos : pos + 4] = rng.choice([b"\xff\xff\xff\xff", b"\x00\x00\xea\x60", b"\x7f\xff\x00\x00", b"\x00\x00"])
        elif op < 0.9:
            b += b"\xff\xd9"
        elif b:
            b[at : at + 8] = bytes(rng.randrange(256) for _ in range(8))
    return bytes(b)


def png_chunk(kind: bytes, data: bytes) -> bytes:
    # chunk layout: length, type, data, CRC-32 over type and data (PNG specification, ISO/IEC 15948, section 5.3)
    return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF)


def header_bomb_png(width: int = 60000, height: int = 60000) -> bytes:
    """A valid, 100-byte PNG whose header declares ``width`` x ``height`` pixels (3.6 gigapixels by default)."""
    ihdr = struct.pack(">IIBBBBB", width, height, 8, 0, 0, 0, 0)
    return (
        b"\x89PNG\r\n\x1a\n"
        + png_chunk(b"IHDR", ihdr)
        + png_chunk(b"IDAT", zlib.compress(b"\0" * 64))
        + png_chunk(b"IEND", b"")
    )


def _run_cases(cases_file: str, results_file: str, memory_mb: int, alarm_s: int) -> None:
    import contextlib
    import io
    import json
    import os
    import resource
    import signal
    import tempfile
    import traceback

    resource.setrlimit(resource.RLIMIT_AS, (memory_mb << 20, memory_mb << 20))
    from surfinspect.cli import main

    def on_alarm(signum, frame):
        raise TimeoutError("case took longer than the alarm")

    signal.signal(signal.SIGALRM, on_alarm)
    cases = json.loads(open(cases_file, encoding="utf-8").read())
    with open(results_file, "a", encoding="utf-8") as log:
        for case in cases:
            log.write(json.dumps({"start": case["name"]}) + "\n")
            log.flush()
            out, err = io.StringIO(), io.StringIO()
            code, trace = None, None
            c_level = tempfile.TemporaryFile()  # what C libraries write to file descriptor 2
            saved = os.dup(2)
            os.dup2(c_level.fileno(), 2)
            signal.alarm(alarm_s)
            try:
                with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
                    code = main(case["argv"])
            except BaseException:  # what the command let through: the finding
                trace = traceback.format_exc(limit=8)
            finally:
                signal.alarm(0)
                os.dup2(saved, 2)
                os.close(saved)
            c_level.seek(0)
            err_text = err.getvalue() + c_level.read(4000).decode("utf-8", "replace")
            c_level.close()
            log.write(json.dumps({"name": case["name"], "code": code, "err": err_text, "trace": trace}) + "\n")
            log.flush()


if __name__ == "__main__":
    import sys

    _run_cases(sys.argv[1], sys.argv[2], int(sys.argv[3]), int(sys.argv[4]))
