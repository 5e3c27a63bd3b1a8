"""Tests for surfinspect.station.batch and the batch, sign, verify and show commands."""

from __future__ import annotations

import csv
import hashlib
import io
import json
import os
import select
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import cv2
import pytest

from surfinspect.archive import PartRow, signing
from surfinspect.archive import store as arc
from surfinspect.archive.verify import verify
from surfinspect.cli import main
from surfinspect.errors import InputError
from surfinspect.measure import synth
from surfinspect.station import batch

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
    "LW-220-broken.png": "not-inspected",
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
    ((key, message),) = outcome.errors
    assert key == "LW-220-broken.png" and ("not a readable image" in message or "truncated" in message)
    out = tmp_path / "out"
    assert (out / "report.pdf").read_bytes()[:5] == b"%PDF-"
    assert json.loads((out / "LW-220-broken.json").read_text())["schema"] == arc.ERROR_SCHEMA
    assert (out / "LW-220-002.overlay.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not (out / "LW-220-broken.overlay.png").exists()
    assert verify(tmp_path / "archive") == []

    # the CSV holds every region as the part JSON holds it (same rounding), and the error part
    rows = list(csv.DictReader(io.StringIO((out / "regions.csv").read_text())))
    assert [r["part"] for r in rows] == sorted(EXPECTED)
    for row in rows:
        result = json.loads((out / f"{row['part'][:-4]}.json").read_text())
        if row["part_verdict"] == "not-inspected":
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
    assert "Parts not-inspected: 1 of 7" in text
    assert "NOT-INSPECTED" in text.split("\n", 60)[-1] or "NOT-INSPECTED" in text  # counted on the summary
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
    assert verify(tmp_path / "archive") == []
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
        (["accept", "not-inspected"], 3),  # an unreadable image is never "all accepted"
        (["accept", None], 3),  # nor is a part not yet inspected
        (["review", "not-inspected", "reject"], 1),
    ],
)
def test_batch_exit_code(verdicts, code):
    assert batch.batch_exit_code([_row(v) for v in verdicts]) == code


def test_sign_verify_show_commands(panels, tmp_path, capsys, monkeypatch):
    recipe, folder = panels
    root = tmp_path / "archive"
    assert (
        main(
            [
                "-q",
                "batch",
                str(recipe),
                str(folder),
                "--archive",
                str(root),
                "--batch-id",
                "B1",
                "--operator",
                "K. LINDQVIST",
            ]
        )
        == 1
    )
    key = tmp_path / "lindqvist.key"
    monkeypatch.setenv("SIGN_PASS", "grain runs up")
    assert main(["-q", "keygen", "--name", "Kari Lindqvist", "--out", str(key), "--passphrase-env", "SIGN_PASS"]) == 0
    _enrol(root, tmp_path, key, "Kari Lindqvist")
    assert main(["sign", "--archive", str(root), "--batch-id", "NOPE", "--key", str(key), "--meaning", "released"]) == 2
    assert "no batch 'NOPE' in this archive" in capsys.readouterr().err
    signed_pdf = tmp_path / "signed.pdf"
    assert (
        main(
            [
                "-q",
                "sign",
                "--archive",
                str(root),
                "--batch-id",
                "B1",
                "--key",
                str(key),
                "--meaning",
                "withheld",
                "--comment",
                "two panels off grain",
                "--passphrase-env",
                "SIGN_PASS",
                "--out",
                str(signed_pdf),
            ]
        )
        == 0
    )
    with arc.Archive(root) as a:
        b = a.batch("B1")
        (s,) = a.signoffs("B1")
        unsigned = a.read_object(b.report_sha256)
        assert a.read_object(s.signed_report_sha256) == signed_pdf.read_bytes() != unsigned
    fingerprint = signing.load_signing_key(key, passphrase=b"grain runs up").fingerprint
    pypdf = pytest.importorskip("pypdf")
    signed_text = pypdf.PdfReader(signed_pdf).pages[0].extract_text()
    for shown in ("Kari Lindqvist", "WITHHELD", fingerprint, s.signed_at_utc):
        assert shown in signed_text
    assert "NOT SIGNED" in pypdf.PdfReader(io.BytesIO(unsigned)).pages[0].extract_text()

    capsys.readouterr()
    assert main(["verify", "--archive", str(root)]) == 0
    assert "intact" in capsys.readouterr().out
    assert main(["show", "--archive", str(root)]) == 0
    listing = capsys.readouterr().out
    assert "B1" in listing and "withheld by Kari Lindqvist" in listing
    assert main(["show", "--archive", str(root), "--batch-id", "B1"]) == 0
    assert "LW-220-broken.png  not-inspected" in capsys.readouterr().out

    db = sqlite3.connect(root / arc.INDEX_NAME)
    with db:
        db.execute("UPDATE regions SET verdict = 'pass' WHERE part_key = 'LW-220-002.png'")
    db.close()
    assert main(["verify", "--archive", str(root), "--batch-id", "B1"]) == 1
    out = capsys.readouterr().out
    assert "region 'face' of part 'LW-220-002.png' in batch 'B1': the index says verdict 'pass'" in out


def test_progress_lines_when_not_a_terminal(panels, tmp_path):
    from surfinspect.cli import batch as batch_command
    from surfinspect.cli.console import Console

    out = io.StringIO()
    progress = batch_command._Progress(Console(out, io.StringIO()))
    progress(batch.PartDone("LW-220-001.png", "accept", 1, 7))
    progress(batch.PartDone("LW-220-broken.png", "not-inspected", 2, 7, "not a readable image"))
    assert out.getvalue().splitlines() == [
        "[1/7] LW-220-001.png: accept",
        "[2/7] LW-220-broken.png: not-inspected (not a readable image)",
    ]


# ------------------------------------------------ outputs, input errors, interruption


def _one_error_line(capsys) -> str:
    err = capsys.readouterr().err
    assert "Traceback" not in err
    (line,) = err.strip().splitlines()
    assert line.startswith("surfinspect: error: ")
    return line


def _batch_args(panels, archive, batch_id, *more):
    recipe, folder = panels
    return ["batch", str(recipe), str(folder), "--archive", str(archive), "--batch-id", batch_id, "--jobs", "2", *more]


def test_recursive_rerun_takes_no_output_or_archive_file_as_a_part(tmp_path, capsys):
    folder = tmp_path / "panels"
    (folder / "line-2").mkdir(parents=True)
    for i, sub in enumerate(["", "", "line-2"]):
        cv2.imwrite(str(folder / sub / f"LW-220-{i:03d}.png"), synth.to_uint8(synth.brushed_panel(SIZE, 90.0, seed=i)))
    recipe = tmp_path / "lw-220.yaml"
    recipe.write_text(RECIPE)
    out, archive = folder / "out", folder / "archive"
    args = [
        "batch",
        str(recipe),
        str(folder),
        "--recursive",
        "--archive",
        str(archive),
        "--out",
        str(out),
        "--jobs",
        "2",
    ]
    assert main(["-q", *args, "--batch-id", "R1"]) == 0
    # an image someone left in the output folder is not a part either: the whole folder is the batch's own
    (out / "copy.png").write_bytes((folder / "LW-220-000.png").read_bytes())
    assert sorted(p.name for p in out.glob("*.overlay.png")) == [
        "LW-220-000.overlay.png",
        "LW-220-001.overlay.png",
        "LW-220-002.overlay.png",
    ]
    # the output folder now holds a file the batch did not write: refused without --overwrite (README)
    assert main(["-q", *args, "--batch-id", "R1"]) == 2
    # the same id again: the same three images (more would be refused as "holds other images", exit 2)
    assert main(["-q", *args, "--batch-id", "R1", "--overwrite"]) == 0
    assert main(["-q", *args, "--batch-id", "R2", "--overwrite"]) == 0
    assert (out / "copy.png").exists()  # --overwrite removes only what surfinspect wrote
    with arc.Archive(archive) as a:
        assert [p.part_key for p in a.parts("R2")] == ["LW-220-000.png", "LW-220-001.png", "line-2/LW-220-002.png"]
    assert verify(archive) == []


def test_discover_images_ignores_exclusions_that_are_not_below_the_folder(tmp_path):
    (tmp_path / "in" / "out").mkdir(parents=True)
    for rel in ["in/a.png", "in/out/b.png"]:
        (tmp_path / rel).write_bytes(b"x")

    def keys(*exclude):
        return [k for k, _ in batch.discover_images(tmp_path / "in", recursive=True, exclude=exclude)]

    assert keys(tmp_path / "in" / "out") == ["a.png"]
    # outputs written into the image folder itself, or beside it, exclude nothing
    assert keys(tmp_path / "in", tmp_path / "elsewhere") == ["a.png", "out/b.png"]


def test_archive_or_out_that_cannot_be_used_exits_2_and_writes_nothing(panels, tmp_path, capsys):
    good = tmp_path / "archive"
    assert main(["-q", *_batch_args(panels, good, "B1")]) == 1
    before = sorted(p.relative_to(good) for p in good.rglob("*"))
    plain = tmp_path / "afile"
    plain.write_text("not a folder")
    capsys.readouterr()  # the good run's warning about its unreadable image

    assert main(_batch_args(panels, plain, "B2")) == 2
    line = _one_error_line(capsys)
    assert "--archive" in line and "afile: not a folder" in line and "allowed: an archive folder" in line

    junk = tmp_path / "D"
    junk.mkdir()
    (junk / arc.INDEX_NAME).write_bytes(b"\x00garbage, not SQLite" * 50)
    assert main(_batch_args(panels, junk, "B2")) == 2
    line = _one_error_line(capsys)
    assert "D/index.sqlite: not a surfinspect archive index" in line and "allowed:" in line
    assert sorted(p.name for p in junk.iterdir()) == [arc.INDEX_NAME]  # no objects folder beside the junk

    assert main(_batch_args(panels, good, "B2", "--out", str(plain))) == 2
    line = _one_error_line(capsys)
    assert "--out" in line and "afile: not a folder" in line and "allowed: a folder or a new name" in line
    # the failed run recorded nothing: no batch B2, no new file, and the archive still verifies
    with arc.Archive(good) as a:
        assert [b.batch_id for b in a.batches()] == ["B1"]
    assert sorted(p.relative_to(good) for p in good.rglob("*")) == before
    assert main(["-q", "verify", "--archive", str(good)]) == 0


def _enrol(root, tmp_path, key, name, *passphrase):
    """Give the archive an owner and enrol ``key``'s public half under ``name`` (the owner key is unencrypted)."""
    owner = tmp_path / "owner.key"
    if not owner.exists():
        assert main(["-q", "keygen", "--out", str(owner), "--no-passphrase"]) == 0
        assert main(["-q", "owner", "init", "--archive", str(root), "--name", "M. QUALITY", "--key", str(owner)]) == 0
    add = ["signers", "add", "--archive", str(root), "--pub", f"{key}.pub", "--name", name, "--role", "inspector"]
    assert main(["-q", *add, "--by", str(owner)]) == 0


def _signed_setup(panels, tmp_path, monkeypatch):
    root = tmp_path / "archive"
    assert main(["-q", *_batch_args(panels, root, "B1")]) == 1
    key = tmp_path / "berg.key"
    assert main(["-q", "keygen", "--name", "Anna Berg", "--out", str(key), "--no-passphrase"]) == 0
    _enrol(root, tmp_path, key, "Anna Berg")
    return root, key


def test_sign_checks_out_before_signing(panels, tmp_path, capsys, monkeypatch):
    root, key = _signed_setup(panels, tmp_path, monkeypatch)
    (tmp_path / "adir").mkdir()
    sign = ["sign", "--archive", str(root), "--batch-id", "B1", "--key", str(key), "--meaning", "released"]
    with arc.Archive(root) as a:
        events_before = a.chain_head()
    for out, says in [
        (tmp_path / "adir", "adir is a folder (allowed: a file name)"),
        (tmp_path / "signed.txt", "signed.txt: the name must end in .pdf"),
        (tmp_path / "missing" / "s.pdf", "s.pdf: the folder " + str(tmp_path / "missing") + " does not exist"),
    ]:
        capsys.readouterr()
        assert main([*sign, "--out", str(out)]) == 2
        line = _one_error_line(capsys)
        assert line.startswith("surfinspect: error: --out: ") and says in line
    assert not (tmp_path / "signed.txt").exists() and not (tmp_path / "missing").exists()
    with arc.Archive(root) as a:
        assert a.signoffs("B1") == [] and a.chain_head() == events_before  # no sign-off, no event
    assert main(["-q", "verify", "--archive", str(root)]) == 0


def test_console_says_where_the_report_is_and_how_to_copy_it_out(panels, tmp_path, capsys, monkeypatch):
    root, key = _signed_setup(panels, tmp_path, monkeypatch)
    capsys.readouterr()
    assert main(_batch_args(panels, root, "B1")) == 1  # a finished batch run again inspects nothing
    out = capsys.readouterr().out
    with arc.Archive(root) as a:
        report = a.object_path(a.batch("B1").report_sha256)
    assert f"report (a PDF stored under its hash, without a suffix): {report}" in out
    assert f"surfinspect show --archive {root} --batch-id B1 --out DIR" in out

    comment = "検査済み 2 panels\noff grain"  # invented; CJK the report's font lacks, and a newline that is folded
    assert (
        main(
            [
                "sign",
                "--archive",
                str(root),
                "--batch-id",
                "B1",
                "--key",
                str(key),
                "--meaning",
                "withheld",
                "--comment",
                comment,
            ]
        )
        == 0
    )
    out = capsys.readouterr().out
    with arc.Archive(root) as a:
        (s,) = a.signoffs("B1")
        edition = a.object_path(s.signed_report_sha256)
        report_sha = a.batch("B1").report_sha256
    assert f"signed report (a PDF stored under its hash, without a suffix): {edition}" in out
    assert "readable copy (report.signed-1.pdf)" in out
    # the signed record keeps the exact text (whitespace folded), the PDF shows '?' for what its font lacks
    assert json.loads(s.record_json)["comment"] == "検査済み 2 panels off grain" == s.comment

    copies = tmp_path / "copies"
    assert main(["show", "--archive", str(root), "--batch-id", "B1", "--out", str(copies)]) == 0
    assert "copied to" in capsys.readouterr().out
    assert (copies / "report.signed-1.pdf").read_bytes() == edition.read_bytes()
    assert hashlib.sha256((copies / "report.pdf").read_bytes()).hexdigest() == report_sha  # reference: hashlib
    pypdf = pytest.importorskip("pypdf")
    text = " ".join(pypdf.PdfReader(copies / "report.signed-1.pdf").pages[0].extract_text().split())
    assert "???? 2 panels off grain" in text and "characters the report's font lacks shown as ?" in text
    assert f"Covers report SHA-256 {report_sha}" in text
    record = json.loads(s.record_json)  # the signed record's chain head, printed: an anchor on paper
    assert f"Audit chain head event {record['audit_events']} {record['audit_head_sha256']}" in text
    from pdfa_checks import assert_pdfa_2b

    assert_pdfa_2b((copies / "report.pdf").read_bytes())  # the batch's report and its signed edition as archived
    assert_pdfa_2b(edition.read_bytes())
    assert main(["show", "--archive", str(root), "--out", str(copies)]) == 2
    assert "--out: needs --batch-id" in _one_error_line(capsys)
    assert main(["-q", "verify", "--archive", str(root)]) == 0


# ---------------------------------------------------------------- stop signals

_PROC = Path("/proc")


def _process_tree(pid: int) -> set[tuple[int, str]]:
    """(pid, start time) of ``pid``'s descendants, from /proc (proc(5): stat fields 4 ppid, 22 starttime)."""
    parents: dict[int, list[tuple[int, str]]] = {}
    for stat in _PROC.glob("[0-9]*/stat"):
        try:
            text = stat.read_text()
        except OSError:
            continue
        fields = text[text.rindex(")") + 2 :].split()  # the command name in (...) may hold spaces
        parents.setdefault(int(fields[1]), []).append((int(stat.parent.name), fields[19]))
    found, todo = set(), [pid]
    while todo:
        for child in parents.get(todo.pop(), []):
            found.add(child)
            todo.append(child[0])
    return found


def _alive(process: tuple[int, str]) -> bool:
    try:
        text = (_PROC / str(process[0]) / "stat").read_text()
    except OSError:
        return False
    fields = text[text.rindex(")") + 2 :].split()
    return fields[19] == process[1] and fields[0] != "Z"  # same process (not a reused pid), not a zombie


@pytest.fixture(scope="module")
def ten_panels(tmp_path_factory):
    root = tmp_path_factory.mktemp("ten")
    folder = root / "in"
    folder.mkdir()
    for i in range(10):
        cv2.imwrite(str(folder / f"LW-220-{i:03d}.png"), synth.to_uint8(synth.brushed_panel((128, 128), 90.0, seed=i)))
    recipe = root / "lw-220.yaml"
    recipe.write_text(RECIPE.replace("[16, 16, 160, 160]", "[16, 16, 96, 96]"))
    return recipe, folder


@pytest.mark.skipif(not (_PROC / "self" / "stat").exists(), reason="needs /proc to list the batch's processes")
@pytest.mark.parametrize("stop", [signal.SIGTERM, signal.SIGKILL])
def test_stopped_batch_leaves_no_process_and_a_rerun_finishes_each_part_once(ten_panels, tmp_path, stop):
    recipe, folder = ten_panels
    root = tmp_path / "archive"
    args = ["batch", str(recipe), str(folder), "--archive", str(root), "--batch-id", "S1", "--jobs", "2"]
    env = dict(os.environ, **{batch.TEST_HOLD_FROM_PART_ENV: "2"})  # part 1 is recorded, the others wait
    env["PYTHONPATH"] = os.pathsep.join([str(Path(batch.__file__).parents[1]), env.get("PYTHONPATH", "")])
    proc = subprocess.Popen(
        [sys.executable, "-m", "surfinspect", *args], env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True
    )
    try:
        ready, _, _ = select.select([proc.stdout], [], [], 60)
        assert ready, "the batch recorded no part within a minute"
        assert proc.stdout.readline().startswith("[1/10] LW-220-000.png: accept")
        tree = _process_tree(proc.pid)
        assert len(tree) >= 3  # the fork server and two workers (and the resource tracker)
        proc.send_signal(stop)
        started = time.monotonic()
        # communicate() waits for end-of-file too: a leftover worker holding stdout would stall it
        out, err = proc.communicate(timeout=10)
        assert time.monotonic() - started < 5
    finally:
        if proc.poll() is None:
            proc.kill()
    deadline = time.monotonic() + 5
    while any(_alive(p) for p in tree) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert not [p for p in tree if _alive(p)]
    if stop == signal.SIGTERM:
        # 128 + signal number, as a shell reports it (SIGTERM 15 -> 143; signal(7))
        assert proc.returncode == 143
        assert "Traceback" not in err
        (line,) = err.strip().splitlines()
        assert line == (
            "surfinspect: error: batch S1: interrupted (SIGTERM); 1 of 10 part(s) recorded; "
            "run again with the same --batch-id to finish"
        )
    else:
        assert proc.returncode == -signal.SIGKILL
    assert main(["-q", *args]) == 0
    assert sorted(_inspected_events(root)) == sorted(p.name for p in folder.glob("*.png"))  # each exactly once
    assert verify(root) == []
