"""Tests for surfinspect.station.arrivals (when a file in the watched folder is complete) and the journal."""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import time

import pytest

from surfinspect.errors import InputError
from surfinspect.station import arrivals as arr
from surfinspect.station import spool

TIMEOUT_S = 10.0


@pytest.fixture(params=["inotify", "polling"])
def watched(request, tmp_path):
    folder = tmp_path / "camera"
    folder.mkdir()
    arrivals = arr.Arrivals(folder, settle_s=0.4)
    observer, method = arr.start_observer(arrivals, poll=request.param == "polling")
    assert method == request.param
    yield folder, arrivals
    observer.stop()
    observer.join(TIMEOUT_S)


def _take_until(arrivals, count: int, timeout: float = TIMEOUT_S):
    got, end = [], time.monotonic() + timeout
    while len(got) < count and time.monotonic() < end:
        got += arrivals.take(0.05)
    return got


def test_renamed_file_is_complete_at_once_and_a_slow_write_only_when_finished(watched, tmp_path):
    folder, arrivals = watched
    (tmp_path / "staged.png").write_bytes(b"x" * 1000)
    os.rename(tmp_path / "staged.png", folder / "renamed.png")
    slow = folder / "slow.png"
    got = []
    with open(slow, "wb") as fh:  # written in pieces for longer than the settle time, through one handle
        for _ in range(8):
            fh.write(b"y" * 500)
            fh.flush()
            time.sleep(0.1)
            got += arrivals.take(0)
            assert all(a.path != slow for a in got), "taken while still being written"
    finished_at = time.monotonic()
    got += _take_until(arrivals, 2 - len(got))
    assert sorted(a.path.name for a in got) == ["renamed.png", "slow.png"]
    by_name = {a.path.name: a for a in got}
    assert by_name["slow.png"].completed_at >= finished_at - 0.05
    assert slow.stat().st_size == 4000


def test_temporary_and_foreign_names_are_never_parts(watched):
    folder, arrivals = watched
    for name in (".hidden.png", "notes.txt", "p.overlay.png", "part.png.tmp"):
        (folder / name).write_bytes(b"z")
    (folder / "sub").mkdir()
    (folder / "sub" / "deep.png").write_bytes(b"z")
    time.sleep(0.8)
    assert arrivals.take(0.2) == []


def test_file_deleted_before_it_is_complete_is_forgotten(tmp_path):
    arrivals = arr.Arrivals(tmp_path, settle_s=0.1)
    (tmp_path / "a.png").write_bytes(b"1")
    arrivals.note(tmp_path / "a.png", "changed")
    (tmp_path / "a.png").unlink()
    assert arrivals.take(0.3) == [] and arrivals.pending_count() == 0


def test_journal_drops_a_torn_last_line_and_refuses_another_recipe(tmp_path):
    journal = spool.Spool(tmp_path, "B1", "r" * 64)
    image = tmp_path / "img.png"
    image.write_bytes(b"pixels")
    staged = journal.stage(image)
    sha = hashlib.sha256(b"pixels").hexdigest()
    journal.record("img.png", image=staged, image_sha256=sha, verdict="accept", result_json=b"{}", overlay_png=b"o")
    with open(journal.journal, "ab") as fh:  # a crash in the middle of appending the next line
        fh.write(b'{"part_key": "next.png", "verd')
    reopened = spool.Spool(tmp_path, "B1", "r" * 64)
    assert [p.part_key for p in reopened.parts()] == ["img.png"]
    assert reopened.image_path(reopened.parts()[0]).read_bytes() == b"pixels"
    lines = journal.journal.read_bytes().decode().splitlines()
    assert len(lines) == 2 and json.loads(lines[1])["part_key"] == "img.png"
    with pytest.raises(InputError, match="open batch 'B1' was started with another recipe"):
        spool.Spool(tmp_path, "B1", "s" * 64)


def test_journal_notices_an_image_rewritten_in_place_while_judged(tmp_path):
    journal = spool.Spool(tmp_path, "B1", "r" * 64)
    image = tmp_path / "img.png"
    image.write_bytes(b"first")
    staged = journal.stage(image)  # a hard link: the same bytes as the camera's file
    with open(image, "r+b") as fh:
        fh.write(b"THIRD")
    with pytest.raises(spool.ImageChanged, match="changed while it was judged"):
        sha = hashlib.sha256(b"first").hexdigest()
        journal.record("img.png", image=staged, image_sha256=sha, verdict="accept", result_json=b"{}", overlay_png=b"")
    assert len(journal) == 0


def test_journal_cut_at_any_byte_after_its_header_reopens_as_a_prefix(tmp_path):
    """A crash may cut the journal anywhere while a line is appended: what remains is whole records."""
    journal = spool.Spool(tmp_path / "a", "B1", "r" * 64)
    keys = [f"p{i}.png" for i in range(3)]
    for key in keys:
        journal.record(key, image=None, image_sha256=None, verdict="error", error=f"{key}: unreadable")
    data = journal.journal.read_bytes()
    header_end = data.index(b"\n") + 1
    for cut in range(header_end, len(data) + 1):
        root = tmp_path / f"cut{cut}"
        shutil.copytree(journal.root, spool.spool_dir(root, "B1"))
        (spool.spool_dir(root, "B1") / spool.JOURNAL_NAME).write_bytes(data[:cut])
        again = spool.Spool(root, "B1", "r" * 64)
        whole = data[:cut].count(b"\n") - 1 + data[:cut].endswith(b"}")  # a last record may lack its newline
        assert [p.part_key for p in again.parts()] == keys[:whole]
        again.record("next.png", image=None, image_sha256=None, verdict="error", error="x")  # appends cleanly
        assert [p.part_key for p in spool.Spool(root, "B1", "r" * 64).parts()] == keys[:whole] + ["next.png"]
