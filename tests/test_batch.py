"""Tests for surfinspect.batch and the batch, sign, verify and show commands."""

from __future__ import annotations

import csv
import io
import json
import sqlite3

import cv2
import pytest

from surfinspect import archive as arc
from surfinspect import batch, signing, synth
from surfinspect.archive import PartRow
from surfinspect.cli import main
from surfinspect.errors import InputError

RECIPE = """\
recipe: lw-220-wall-panel
revision: 3
regions:
  - name: face
    rect: [16, 16, 160, 160]
    lay_deg: 90
    tolerance_deg: 3.0
"""

SIZE = (192, 192)
# invented demo batch: good panels, two brushed 8 deg off, a polished blank, an unreadable file
EXPECTED = {
    "LW-220-001.png": "accept",
    "LW-220-002.png": "reject",
    "LW-220-003.png": "accept",
    "LW-220-004.png": "reject",
    "LW-220-005.png": "accept",
    "LW-220-blank.png": "review",
    "LW-220-broken.png": "error",
}


@pytest.fixture(scope="module")
def panels(tmp_path_factory):
    root = tmp_path_factory.mktemp("panels")
    folder = root / "in"
    folder.mkdir()
    for i in range(1, 6):
        lay = 98.0 if i % 2 == 0 else 90.0
        cv2.imwrite(str(folder / f"LW-220-{i:03d}.png"), synth.to_uint8(synth.brushed_panel(SIZE, lay, seed=i)))
    cv2.imwrite(str(folder / "LW-220-blank.png"), synth.to_uint8(synth.polished_blank(SIZE, seed=7)))
    (folder / "LW-220-broken.png").write_bytes(b"\x89PNG\r\n\x1a\n" + b"\x00" * 40)
    (folder / "notes.txt").write_text("not an image")
    recipe = root / "lw-220.yaml"
    recipe.write_text(RECIPE)
    return recipe, folder


def _config(panels, tmp_path, **changes):
    recipe, folder = panels
    fields = dict(recipe_path=recipe, folder=folder, archive_dir=tmp_path / "archive", batch_id="LW220-0506", jobs=2)
    fields.update(changes)
    return batch.BatchConfig(**fields)


def _inspected_events(root):
    db = sqlite3.connect(root / arc.INDEX_NAME)
    rows = db.execute("SELECT part_key FROM events WHERE kind = 'part inspected'").fetchall()
    db.close()
    return [r[0] for r in rows]


def test_batch_end_to_end(panels, tmp_path):
    seen = []
    outcome = batch.run_batch(_config(panels, tmp_path, out_dir=tmp_path / "out"), on_part=seen.append)
    verdicts = {p.part_key: p.verdict for p in outcome.parts}
    assert verdicts == EXPECTED
    assert outcome.finished and outcome.interruption is None
    assert outcome.exit_code == 1  # a reject outranks the review and the error (fixed exit codes)
    assert sorted(n.part_key for n in seen) == sorted(EXPECTED) and max(n.done for n in seen) == len(EXPECTED)
    (key, message), = outcome.errors
    assert key == "LW-220-broken.png" and ("not a readable image" in message or "truncated" in message)
    out = tmp_path / "out"
    assert (out / "report.pdf").read_bytes()[:5] == b"%PDF-"
    assert json.loads((out / "LW-220-broken.json").read_text())["schema"] == arc.ERROR_SCHEMA
    assert (out / "LW-220-002.overlay.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not (out / "LW-220-broken.overlay.png").exists()
    assert arc.verify(tmp_path / "archive") == []

    # the CSV holds every region as the part JSON holds it (same rounding), and the error part
    rows = list(csv.DictReader(io.StringIO((out / "regions.csv").read_text())))
    assert [r["part"] for r in rows] == sorted(EXPECTED)
    for row in rows:
        result = json.loads((out / f"{row['part'][:-4]}.json").read_text())
        if row["part_verdict"] == "error":
            assert row["region"] == "" and ("not a readable image" in row["reasons"] or "truncated" in row["reasons"])
            continue
        (region,) = result["regions"]
        assert row["lay_deg"] == ("" if region["lay_deg"] is None else str(region["lay_deg"]))
        assert row["region_verdict"] == region["verdict"] and row["part_verdict"] == result["verdict"]

    # the report names every inspected part and lists the unreadable one
    pypdf = pytest.importorskip("pypdf")
    text = "\n".join(page.extract_text() for page in pypdf.PdfReader(out / "report.pdf").pages)
    for key in EXPECTED:
        assert key[:-4] in text
    assert "Parts not inspected: 1 of 7" in text
    assert "NOT INSPECTED" in text.split("\n", 60)[-1] or "NOT INSPECTED" in text  # counted on the summary
    # the station's own folders stay out of the customer's report: parts are named within the batch
    assert str(tmp_path) not in text


def test_killed_worker_then_rerun_records_every_part_once(panels, tmp_path, monkeypatch):
    monkeypatch.setenv(batch.TEST_EXIT_AT_PART_ENV, "3")
    first = batch.run_batch(_config(panels, tmp_path, jobs=1))
    assert not first.finished and "worker process ended abruptly" in first.interruption
    assert first.counts["pending"] > 0 and first.exit_code != 0
    done_first = {p.part_key for p in first.parts if p.is_done}
    assert done_first and "LW-220-003.png" not in done_first
    with arc.Archive(tmp_path / "archive") as a:
        assert a.batch("LW220-0506").report_sha256 is None
    monkeypatch.delenv(batch.TEST_EXIT_AT_PART_ENV)
    second = batch.run_batch(_config(panels, tmp_path, jobs=2))
    assert second.resumed and second.finished
    assert second.inspected_now == len(EXPECTED) - len(done_first)
    assert {p.part_key: p.verdict for p in second.parts} == EXPECTED
    inspected = _inspected_events(tmp_path / "archive")
    assert sorted(inspected) == sorted(EXPECTED)  # every part exactly once
    assert arc.verify(tmp_path / "archive") == []
    # a finished batch run again inspects nothing
    third = batch.run_batch(_config(panels, tmp_path))
    assert third.was_finished and third.inspected_now == 0 and third.exit_code == 1
    assert sorted(_inspected_events(tmp_path / "archive")) == sorted(EXPECTED)


def test_finished_batch_id_with_other_images_is_refused(panels, tmp_path, capsys):
    recipe, folder = panels
    args = [str(recipe), str(folder), "--archive", str(tmp_path / "archive"), "--batch-id", "B7", "--jobs", "2"]
    assert main(["-q", "batch", *args]) == 1
    other = tmp_path / "other"
    other.mkdir()
    (other / "LW-220-001.png").write_bytes((folder / "LW-220-001.png").read_bytes())
    capsys.readouterr()
    assert main(["batch", str(recipe), str(other), *args[2:]]) == 2
    err = capsys.readouterr().err
    assert "finished batch 'B7' holds other images (missing: LW-220-002.png, LW-220-003.png, LW-220-004.png …)" in err
    assert "Traceback" not in err


def test_batch_input_errors(panels, tmp_path):
    with pytest.raises(InputError, match=r"missing: not a folder of images"):
        batch.run_batch(_config(panels, tmp_path, folder=tmp_path / "missing"))
    with pytest.raises(InputError, match=r"--jobs: must be at least 1 \(got 0\)"):
        batch.run_batch(_config(panels, tmp_path, jobs=0))
    with pytest.raises(InputError, match=r"--batch-id: 'a/b' is not a valid batch id"):
        batch.run_batch(_config(panels, tmp_path, batch_id="a/b"))
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError, match=r"empty: no images found \(allowed suffixes .png"):
        batch.discover_images(tmp_path / "empty")


def test_discover_images_keys_are_paths_below_the_folder(tmp_path):
    for rel in ["b.png", "a.TIF", "sub/a.png", "c.txt"]:
        (tmp_path / rel).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / rel).write_bytes(b"x")
    assert [k for k, _ in batch.discover_images(tmp_path)] == ["a.TIF", "b.png"]
    found = batch.discover_images(tmp_path, recursive=True)
    assert [k for k, _ in found] == ["a.TIF", "b.png", "sub/a.png"]
    assert found[2][1] == tmp_path / "sub" / "a.png"


def _row(verdict):
    return PartRow("B", "p", 0, None, None, None, verdict, None, None)


@pytest.mark.parametrize(
    "verdicts, code",
    [
        (["accept", "accept"], 0),
        (["accept", "review"], 3),
        (["accept", "error"], 3),  # an unreadable image is never "all accepted"
        (["accept", None], 3),  # nor is a part not yet inspected
        (["review", "error", "reject"], 1),
    ],
)
def test_batch_exit_code(verdicts, code):
    assert batch.batch_exit_code([_row(v) for v in verdicts]) == code


def test_sign_verify_show_commands(panels, tmp_path, capsys, monkeypatch):
    recipe, folder = panels
    root = tmp_path / "archive"
    assert main(["-q", "batch", str(recipe), str(folder), "--archive", str(root), "--batch-id", "B1", "--operator", "K. LINDQVIST"]) == 1
    key = tmp_path / "lindqvist.key"
    monkeypatch.setenv("SIGN_PASS", "grain runs up")
    assert main(["-q", "keygen", "--name", "Kari Lindqvist", "--out", str(key), "--passphrase-env", "SIGN_PASS"]) == 0
    assert main(["sign", "--archive", str(root), "--batch-id", "NOPE", "--key", str(key), "--meaning", "approved"]) == 2
    assert "no batch 'NOPE' in this archive" in capsys.readouterr().err
    signed_pdf = tmp_path / "signed.pdf"
    assert main(["-q", "sign", "--archive", str(root), "--batch-id", "B1", "--key", str(key), "--meaning", "rejected",
                 "--comment", "two panels off grain", "--passphrase-env", "SIGN_PASS", "--out", str(signed_pdf)]) == 0
    with arc.Archive(root) as a:
        b = a.batch("B1")
        (s,) = a.signoffs("B1")
        unsigned = a.read_object(b.report_sha256)
        assert a.read_object(s.signed_report_sha256) == signed_pdf.read_bytes() != unsigned
    fingerprint = signing.load_signing_key(key, passphrase=b"grain runs up").fingerprint
    pypdf = pytest.importorskip("pypdf")
    signed_text = pypdf.PdfReader(signed_pdf).pages[0].extract_text()
    for shown in ("Kari Lindqvist", "rejected", fingerprint, s.signed_at_utc):
        assert shown in signed_text
    assert "NOT SIGNED" in pypdf.PdfReader(io.BytesIO(unsigned)).pages[0].extract_text()

    capsys.readouterr()
    assert main(["verify", "--archive", str(root)]) == 0
    assert "intact" in capsys.readouterr().out
    assert main(["show", "--archive", str(root)]) == 0
    listing = capsys.readouterr().out
    assert "B1" in listing and "rejected by Kari Lindqvist" in listing
    assert main(["show", "--archive", str(root), "--batch-id", "B1"]) == 0
    assert "LW-220-broken.png  error" in capsys.readouterr().out

    db = sqlite3.connect(root / arc.INDEX_NAME)
    with db:
        db.execute("UPDATE regions SET verdict = 'pass' WHERE part_key = 'LW-220-002.png'")
    db.close()
    assert main(["verify", "--archive", str(root), "--batch-id", "B1"]) == 1
    out = capsys.readouterr().out
    assert "region 'face' of part 'LW-220-002.png' in batch 'B1': the index says verdict 'pass'" in out


def test_progress_lines_when_not_a_terminal(panels, tmp_path):
    from surfinspect.commands import batch as batch_command
    from surfinspect.console import Console

    out = io.StringIO()
    progress = batch_command._Progress(Console(out, io.StringIO()))
    progress(batch.PartDone("LW-220-001.png", "accept", 1, 7))
    progress(batch.PartDone("LW-220-broken.png", "error", 2, 7, "not a readable image"))
    assert out.getvalue().splitlines() == [
        "[1/7] LW-220-001.png: accept",
        "[2/7] LW-220-broken.png: error (not a readable image)",
    ]
