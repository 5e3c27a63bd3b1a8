"""``batch --retry-errors``: the parts recorded as not inspected, re-inspected into a new report edition."""

from __future__ import annotations

import csv
import json
import os
import shutil
import signal
import sqlite3
import subprocess
import sys
import time

import cv2
import pytest
from pypdf import PdfReader
from recipe_helpers import SMALL_PANEL_RECIPE

from surfinspect.archive import store as arc
from surfinspect.archive.verify import verify_archive
from surfinspect.cli import main
from surfinspect.measure import synth

RECIPE = SMALL_PANEL_RECIPE
BROKEN = "LW-220-002.png"


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    """Three panels, the last one truncated (a copy cut short), and an archive of their batch B1 (made once)."""
    base = tmp_path_factory.mktemp("retry")
    folder = base / "in"
    folder.mkdir()
    for i, lay in enumerate((90.0, 90.4, 98.0)):
        cv2.imwrite(str(folder / f"LW-220-{i:03d}.png"), synth.to_uint8(synth.brushed_panel((96, 96), lay, seed=i)))
    whole = (folder / BROKEN).read_bytes()
    (folder / BROKEN).write_bytes(whole[: len(whole) // 2])
    recipe = base / "lw-220.yaml"
    recipe.write_text(RECIPE)
    assert _run(recipe, folder, base / "archive") == 3  # two accepted, one not inspected
    return base, whole


@pytest.fixture
def line(made, tmp_path):
    """(recipe, folder, the broken file's whole bytes) in this test's own folder, with a copy of the archive."""
    base, whole = made
    for name in ("in", "archive"):
        shutil.copytree(base / name, tmp_path / name)
    shutil.copy(base / "lw-220.yaml", tmp_path / "lw-220.yaml")
    return tmp_path / "lw-220.yaml", tmp_path / "in", whole


def _run(recipe, folder, root, *more):
    return main(
        ["-q", "batch", str(recipe), str(folder), "--archive", str(root), "--batch-id", "B1", "--jobs", "1", *more]
    )


def _signed_archive(tmp_path, recipe, folder):
    root = tmp_path / "archive"  # batch B1 recorded; an owner and an inspector enrolled after it
    keys = {}
    for name in ("owner", "inspector"):
        keys[name] = tmp_path / f"{name}.key"
        assert main(["-q", "keygen", "--out", str(keys[name]), "--no-passphrase"]) == 0
    assert (
        main(["-q", "owner", "init", "--archive", str(root), "--name", "M. QUALITY", "--key", str(keys["owner"])]) == 0
    )
    add = [
        "-q",
        "signers",
        "add",
        "--archive",
        str(root),
        "--pub",
        f"{keys['inspector']}.pub",
        "--name",
        "R. OSTERMANN",
    ]
    assert main([*add, "--role", "inspector", "--by", str(keys["owner"])]) == 0
    return root, keys


def _sign(root, key):
    return main(["-q", "sign", "--archive", str(root), "--batch-id", "B1", "--key", str(key), "--meaning", "released"])


def _station_says_newest_unsigned(root) -> tuple[bool, bool]:
    from starlette.testclient import TestClient

    from surfinspect.review.app import ReviewConfig, create_app

    with TestClient(create_app(ReviewConfig(str(root)))) as c:
        listing, page = c.get("/"), c.get("/batch/B1")
    assert listing.status_code == page.status_code == 200
    return "newest report edition not signed" in listing.text, "the newest edition is not signed off" in page.text


def _events(root):
    with arc.Archive(root) as a:
        return a.events()


def test_retry_re_inspects_only_the_fixed_part_and_the_signed_edition_stays_valid(line, tmp_path, capsys):
    recipe, folder, whole = line
    root, keys = _signed_archive(tmp_path, recipe, folder)
    assert _sign(root, keys["inspector"]) == 0
    with arc.Archive(root) as a:
        before = {p.part_key: p for p in a.parts("B1")}
        first_report = a.batch("B1").report_sha256
    assert before[BROKEN].verdict == arc.ERROR_VERDICT
    capsys.readouterr()

    assert _run(recipe, folder, root, "--retry-errors") == 3  # not fixed yet: still not inspected, nothing recorded
    assert "still not-inspected" in capsys.readouterr().err
    assert [e.kind for e in _events(root)].count("part re-inspected") == 0

    (folder / BROKEN).write_bytes(whole)
    assert main(["batch", str(recipe), str(folder), "--archive", str(root), "--batch-id", "B1", "--retry-errors"]) == 1
    out = capsys.readouterr().out
    assert f"{BROKEN}: re-inspected: reject (was not-inspected)" in out and "report edition 2 written" in out
    events = _events(root)
    retried = [e for e in events if e.kind == "part re-inspected"]
    assert [e.part_key for e in retried] == [BROKEN]  # only the part recorded as not inspected
    details = json.loads(retried[0].details)
    assert details["before"]["result_sha256"] == before[BROKEN].result_sha256
    assert details["before"]["verdict"] == arc.ERROR_VERDICT and details["after"]["verdict"] == "reject"
    assert details["edition"] == 2 and details["station"]
    written = json.loads(events[events.index(retried[0]) + 1].details)
    assert written["edition"] == 2 and written["replaces_report_sha256"] == first_report
    with arc.Archive(root) as a:
        after = {p.part_key: p for p in a.parts("B1")}
        assert after[BROKEN].result_sha256 == details["after"]["result_sha256"] != before[BROKEN].result_sha256
        assert all(after[k] == before[k] for k in after if k != BROKEN)  # the others untouched
        assert a.batch("B1").report_sha256 != first_report

    report = verify_archive(root)
    assert report.problems == []
    assert any("signed report edition 1; the batch has a newer edition 2" in w for w in report.warnings)
    assert main(["-q", "batch", str(recipe), str(folder), "--archive", str(root), "--batch-id", "B1"]) == 1  # finished

    # the new result in show, the CSV and the PDF; the signed edition of edition 1 is still there
    capsys.readouterr()
    out_dir = tmp_path / "copy"
    assert main(["show", "--archive", str(root), "--batch-id", "B1", "--out", str(out_dir)]) == 0
    shown = capsys.readouterr().out
    assert "report edition 2" in shown and f"{BROKEN}" in shown.split("report edition 2")[1]
    assert next(line for line in shown.splitlines() if line.startswith(BROKEN)).split()[1] == "reject"
    rows = list(csv.DictReader((out_dir / "regions.csv").open()))
    assert [r["part_verdict"] for r in rows if r["part"] == BROKEN] == ["reject"]
    text = "".join(page.extract_text() for page in PdfReader(out_dir / "report.pdf").pages)
    assert "B1, edition 2" in text and "LW-220-002" in text and "NOT INSPECTED" not in text.upper()
    assert (out_dir / "report.signed-1.pdf").is_file()
    assert main(["show", "--archive", str(root)]) == 0
    assert "released by R. OSTERMANN" in (listed := capsys.readouterr().out) and "the newest is not signed" in listed

    # the review station says so too, on the batches page and the batch page
    assert _station_says_newest_unsigned(root) == (True, True)

    # a sign-off of the new edition starts a signed PDF of its own; both verify
    assert _sign(root, keys["inspector"]) == 0
    assert _station_says_newest_unsigned(root) == (False, False)
    report = verify_archive(root)
    assert report.problems == []
    assert [w for w in report.warnings if "newer edition" in w] != []  # sign-off 1 still names its older edition


def test_tampering_with_the_re_inspection_event_is_found(line, tmp_path, capsys):
    recipe, folder, whole = line
    root = tmp_path / "archive"
    (folder / BROKEN).write_bytes(whole)
    assert _run(recipe, folder, root, "--retry-errors") == 1
    seq = next(e.seq for e in _events(root) if e.kind == "part re-inspected")
    db = sqlite3.connect(root / "index.sqlite")
    with db:
        details = json.loads(db.execute("SELECT details FROM events WHERE seq = ?", (seq,)).fetchone()[0])
        details["before"]["verdict"] = "accept"  # rewriting what the part was before
        db.execute("UPDATE events SET details = ? WHERE seq = ?", (json.dumps(details), seq))
    db.close()
    problems = verify_archive(root).problems
    assert any(f"event {seq} (part re-inspected) does not match its own hash" in p for p in problems), problems
    capsys.readouterr()
    assert main(["-q", "verify", "--archive", str(root)]) == 1


def test_bad_use_is_one_line_and_nothing_to_retry_keeps_the_batch_verdict(line, tmp_path, capsys):
    recipe, folder, whole = line
    root = tmp_path / "archive"
    capsys.readouterr()
    retry = ["batch", str(recipe), str(folder), "--archive", str(root), "--retry-errors"]
    assert main([*retry, "--batch-id", "NOPE"]) == 2
    err = capsys.readouterr().err
    assert "--batch-id: no batch 'NOPE' in this archive" in err and len(err.strip().splitlines()) == 1
    other = tmp_path / "other.yaml"
    other.write_text(RECIPE.replace("tolerance_deg: 3.0", "tolerance_deg: 2.0"))
    assert main(["batch", str(other), str(folder), "--archive", str(root), "--batch-id", "B1", "--retry-errors"]) == 2
    assert "a retry uses the batch's own recipe" in capsys.readouterr().err
    assert (
        main(
            [
                "batch",
                str(recipe),
                str(tmp_path / "nowhere"),
                "--archive",
                str(root),
                "--batch-id",
                "B1",
                "--retry-errors",
            ]
        )
        == 2
    )
    assert "nowhere: not a folder of images" in capsys.readouterr().err
    (folder / BROKEN).write_bytes(whole)
    assert main([*retry, "--batch-id", "B1", "--jobs", "1"]) == 1
    head = _events(root)[-1]
    capsys.readouterr()
    assert main([*retry, "--batch-id", "B1"]) == 1  # the batch's verdict: one part rejected
    assert "batch B1: nothing to retry: no part is recorded as not-inspected" in capsys.readouterr().out
    assert _events(root)[-1] == head  # nothing written


def test_a_retry_killed_before_it_is_recorded_leaves_the_archive_as_it_was(line, tmp_path):
    recipe, folder, whole = line
    root = tmp_path / "archive"
    (folder / BROKEN).write_bytes(whole)
    before = _events(root)
    argv = [sys.executable, "-m", "surfinspect", "-q", "batch", str(recipe), str(folder), "--archive", str(root)]
    env = {**os.environ, "SURFINSPECT_TEST_HOLD_FROM_PART": "1"}  # the worker waits: the kill comes mid-retry
    proc = subprocess.Popen([*argv, "--batch-id", "B1", "--jobs", "1", "--retry-errors"], env=env)
    time.sleep(2.0)
    proc.send_signal(signal.SIGKILL)
    proc.wait(timeout=30)
    assert _events(root) == before and verify_archive(root).problems == []
    assert _run(recipe, folder, root, "--retry-errors") == 1  # run again: recorded now
    assert [e.kind for e in _events(root)][len(before) :] == ["part re-inspected", "report written"]
