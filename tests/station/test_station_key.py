"""An unattended station signs the chain head at every batch close with its enrolled key."""

from __future__ import annotations

import json

import cv2
import pytest
from recipe_helpers import SMALL_PANEL_RECIPE

from surfinspect.archive import store as arc
from surfinspect.archive.verify import verify_archive
from surfinspect.cli import main
from surfinspect.measure import synth

RECIPE = SMALL_PANEL_RECIPE


@pytest.fixture
def line(tmp_path):
    folder = tmp_path / "in"
    folder.mkdir()
    for i, lay in enumerate((90.0, 90.0, 98.0)):
        cv2.imwrite(str(folder / f"LW-220-{i:03d}.png"), synth.to_uint8(synth.brushed_panel((96, 96), lay, seed=i)))
    recipe = tmp_path / "lw-220.yaml"
    recipe.write_text(RECIPE)
    return recipe, folder


def _key(tmp_path, name):
    path = tmp_path / f"{name}.key"
    assert main(["-q", "keygen", "--out", str(path), "--no-passphrase"]) == 0
    return path


def test_batch_close_is_signed_by_the_station_key(line, tmp_path, capsys):
    recipe, folder = line
    root = tmp_path / "archive"
    owner, station, stranger = _key(tmp_path, "owner"), _key(tmp_path, "station"), _key(tmp_path, "stranger")
    assert main(["-q", "owner", "init", "--archive", str(root), "--name", "M. QUALITY", "--key", str(owner)]) == 0
    add = ["signers", "add", "--archive", str(root), "--pub", f"{station}.pub", "--name", "LINE 2", "--role", "station"]
    assert main(["-q", *add, "--by", str(owner)]) == 0
    run = ["-q", "batch", str(recipe), str(folder), "--archive", str(root), "--jobs", "1"]
    capsys.readouterr()
    assert main([*run, "--batch-id", "B0", "--station-key", str(stranger)]) == 2
    assert "--station-key: this key" in capsys.readouterr().err
    with arc.Archive(root) as a:
        assert a.batches() == []  # refused before anything was recorded
    assert main([*run, "--batch-id", "B1", "--station-key", str(station)]) == 1
    with arc.Archive(root) as a:
        events = a.events()
    closed = next(e for e in events if e.kind == "report written")
    after = next(e for e in events if e.seq == closed.seq + 1)
    assert after.kind == "head signed" and json.loads(after.details)["record"]["events"] == closed.seq
    report = verify_archive(root)
    assert report.problems == [] and report.warnings == []


def test_batch_into_a_new_folder_needs_no_key_and_verify_says_the_head_is_unsigned(line, tmp_path, capsys):
    recipe, folder = line
    root = tmp_path / "new-archive"
    assert (
        main(["-q", "batch", str(recipe), str(folder), "--archive", str(root), "--batch-id", "B1", "--jobs", "1"]) == 1
    )
    capsys.readouterr()
    assert main(["verify", "--archive", str(root)]) == 0
    out = capsys.readouterr()
    assert "intact" in out.out
    assert "batch 'B1' was closed (audit event" in out.err and "without a station key" in out.err
