"""A batch folder fed by an attacker, and a batch whose disk fills up: the batch always finishes or exits 2."""

from __future__ import annotations

import contextlib
import os
import resource
import shutil
import signal
import subprocess
import sys
import time
import uuid
from pathlib import Path

import cv2
import pytest
from fuzzing import header_bomb_png

from surfinspect.archive import store as arc
from surfinspect.archive.objects import OBJECTS_DIR
from surfinspect.cli import main
from surfinspect.errors import InputError
from surfinspect.measure import synth
from surfinspect.station import batch

RECIPE = """\
recipe: lw-220-wall-panel
revision: 3
regions:
  - name: face
    rect: [16, 16, 96, 96]
    lay_deg: 90
    tolerance_deg: 3.0
"""
SIZE = (128, 128)


def cut_and_closed_jpeg(image) -> bytes:
    """A JPEG cut to a quarter of its bytes and closed with an end-of-image marker (passes an end-marker check)."""
    ok, data = cv2.imencode(".jpg", image)
    assert ok
    data = data.tobytes()
    return data[: len(data) // 4] + b"\xff\xd9"


@pytest.fixture
def hostile_folder(tmp_path):
    folder = tmp_path / "in"
    folder.mkdir()
    good = synth.to_uint8(synth.brushed_panel(SIZE, 90.0, seed=3))
    cv2.imwrite(str(folder / "good.png"), good)
    png = (folder / "good.png").read_bytes()
    (folder / "bomb.png").write_bytes(header_bomb_png())
    (folder / "corrupt.jpg").write_bytes(
        cut_and_closed_jpeg(synth.to_uint8(synth.brushed_panel((480, 640), 90, seed=4)))
    )
    (folder / ("L" * 245 + ".png")).write_bytes(png)  # 249 characters
    (folder / os.fsdecode(b"odd\xff\xfename.png")).write_bytes(png)  # not UTF-8
    (folder / "two\nlines.png").write_bytes(png)
    secret = tmp_path / "secret.txt"
    secret.write_text("not for the archive")
    os.symlink(secret, folder / "shadow.png")
    os.symlink("/dev/zero", folder / "zero.png")
    os.mkfifo(folder / "fifo.png")
    recipe = tmp_path / "lw-220.yaml"
    recipe.write_text(RECIPE)
    return recipe, folder, secret


def test_hostile_batch_judges_the_good_part_and_records_the_rest(hostile_folder, tmp_path, capsys):
    recipe, folder, secret = hostile_folder
    root = tmp_path / "archive"
    code = main(["batch", str(recipe), str(folder), "--archive", str(root), "--batch-id", "H1", "--jobs", "2"])
    out, err = capsys.readouterr()
    assert code == 3  # nothing rejected; the refused parts need review (fixed exit codes: never 1 for input)
    with arc.Archive(root) as a:
        parts = {p.part_key: p for p in a.parts("H1")}
        assert a.batch("H1").is_finished
    assert parts["good.png"].verdict == "accept"
    reasons = {k: p.error for k, p in parts.items() if p.verdict == arc.ERROR_VERDICT}
    expected = {
        "bomb.png": "image too large (header declares 60000x60000",
        "corrupt.jpg": "damaged or truncated",
        "L" * 245 + ".png": "file name is too long (got 249 bytes",
        "odd\\xff\\xfename.png": "not valid UTF-8",
        "two\\nlines.png": "control character",
        "shadow.png": "outside the batch folder; not followed",
        "zero.png": "outside the batch folder; not followed",
        "fifo.png": "a FIFO (named pipe), not a regular file",
    }
    assert set(reasons) == set(expected)
    for key, words in expected.items():
        assert words in reasons[key], (key, reasons[key])
    # nothing the links point at went into the archive, and stored files are not world-readable
    stored = [p for p in (root / OBJECTS_DIR).rglob("*") if p.is_file()]
    assert stored and all(p.read_bytes() != secret.read_bytes() for p in stored)
    assert all(not p.stat().st_mode & 0o004 for p in stored)
    # one line per part on the console: a newline in a name does not start a line of its own
    assert "two\\nlines.png" in err and not any(line.startswith("lines.png") for line in (out + err).splitlines())
    assert main(["verify", "--archive", str(root)]) == 0


def test_a_link_inside_the_folder_is_read_as_its_target(tmp_path):
    folder = tmp_path / "in"
    folder.mkdir()
    cv2.imwrite(str(folder / "a.png"), synth.to_uint8(synth.brushed_panel(SIZE, 90.0, seed=3)))
    os.symlink("a.png", folder / "b.png")
    found = {f.key: f for f in batch.discover_images(folder)}
    assert found["b.png"].refusal is None and found["b.png"].path == (folder / "a.png").resolve()


# ------------------------------------------------------------------ a full disk


def _small_disk(path: Path, size_kb: int) -> bool:
    """Mount a tmpfs of ``size_kb`` at ``path``; False where mounting is not allowed."""
    path.mkdir()
    if not hasattr(os, "geteuid") or os.geteuid() != 0 or shutil.which("mount") is None:
        return False
    done = subprocess.run(
        ["mount", "-t", "tmpfs", "-o", f"size={size_kb}k", "tmpfs", str(path)], capture_output=True, timeout=10
    )
    return done.returncode == 0


def _limit_file_size(limit_bytes: int):
    def apply() -> None:  # in the child: a write past the limit fails with EFBIG instead of killing it
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit_bytes, limit_bytes))

    return apply


@pytest.fixture(scope="module")
def full_disk_batch(tmp_path_factory):
    root = tmp_path_factory.mktemp("diskfull")
    folder = root / "in"
    folder.mkdir()
    for i in range(8):  # noisy panels compress badly: ~17 kB per image in the archive, plus its overlay
        cv2.imwrite(str(folder / f"p{i}.png"), synth.to_uint8(synth.brushed_panel(SIZE, 90.0, seed=20 + i, noise=0.2)))
    recipe = root / "lw-220.yaml"
    recipe.write_text(RECIPE)
    disk = root / "disk"
    mounted = _small_disk(disk, 384)
    yield recipe, folder, disk, mounted
    if mounted:
        subprocess.run(["umount", "-l", str(disk)], capture_output=True, timeout=10)


@pytest.mark.slow
def test_full_disk_exits_2_every_time_within_bounded_time(full_disk_batch):
    recipe, folder, disk, mounted = full_disk_batch
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}
    durations = []
    for run in range(10):
        archive = disk / f"archive-{run}-{uuid.uuid4().hex[:6]}"
        start = time.monotonic()
        done = subprocess.run(
            [sys.executable, "-m", "surfinspect", "batch", str(recipe), str(folder), "--archive", str(archive)]
            + ["--batch-id", f"D{run}", "--jobs", "1"],
            capture_output=True,
            text=True,
            timeout=60,  # a parent left blocked would fail here
            env=env,
            preexec_fn=None if mounted else _limit_file_size(120_000),
        )
        durations.append(time.monotonic() - start)
        assert done.returncode == 2, (run, done.returncode, done.stderr[-2000:])
        assert "Traceback" not in done.stderr
        errors = [line for line in done.stderr.splitlines() if line.startswith("surfinspect: error:")]
        assert len(errors) == 1 and "stopped: cannot write" in errors[0], done.stderr[-2000:]
        assert "No space left" in errors[0] or "full" in errors[0] or "too large" in errors[0]
        if mounted:
            with contextlib.suppress(OSError):
                subprocess.run(["rm", "-rf", str(archive)], timeout=10)
    assert max(durations) < 30, durations


def test_inspect_goes_on_past_a_name_too_long_for_its_outputs(hostile_folder, tmp_path, capsys):
    recipe, folder, _ = hostile_folder
    out = tmp_path / "out"
    long_name = folder / ("L" * 245 + ".png")
    assert main(["inspect", str(recipe), str(folder / "good.png"), str(long_name), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "the file name is too long for its outputs (got 245 bytes, allowed at most 200)" in err
    assert (out / "good.json").exists() and (out / "report.pdf").exists()


def test_folders_nested_without_end_are_refused_not_recursed_into(tmp_path):
    deep = tmp_path.joinpath(*["d"] * 40)
    deep.mkdir(parents=True)
    (deep / "a.png").write_bytes(b"x")
    with pytest.raises(
        InputError, match=r"folders nested too deep \(allowed at most 32 levels below the batch folder\)"
    ):
        batch.discover_images(tmp_path, recursive=True)
    assert [f.key for f in batch.discover_images(tmp_path.joinpath(*["d"] * 10), recursive=True)] == [
        "/".join(["d"] * 30 + ["a.png"])
    ]
