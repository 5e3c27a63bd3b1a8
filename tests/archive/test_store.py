"""Tests for surfinspect.archive.store: storage, content addressing, resuming, concurrent writers."""

from __future__ import annotations

import hashlib
import multiprocessing
import os
import sqlite3
import stat

import pytest
from archive_helpers import RECIPE_TEXT, full_archive, region, render, result_json, write_images
from archive_helpers import fill_batch as _fill_batch

from surfinspect import results
from surfinspect.archive import signatures, signing
from surfinspect.archive import store as arc
from surfinspect.archive.verify import verify
from surfinspect.errors import InputError


@pytest.fixture
def signed_archive(tmp_path):
    return full_archive(tmp_path)[0]


def test_objects_are_content_addressed_and_read_only(signed_archive):
    with arc.Archive(signed_archive) as a:
        for sha in [r["sha256"] for r in a.index.select("files")]:
            path = a.object_path(sha)
            assert path.parent.name == sha[:2] and path.name == sha[2:]
            assert hashlib.sha256(path.read_bytes()).hexdigest() == sha
            assert not stat.S_IMODE(path.stat().st_mode) & 0o222


def _object_of(root, column, table="parts", where="part_key = 'LW-220-002.png'"):
    db = sqlite3.connect(root / arc.INDEX_NAME)
    (sha,) = db.execute(f"SELECT {column} FROM {table} WHERE {where}").fetchone()
    db.close()
    return root / "objects" / sha[:2] / sha[2:]


@pytest.mark.parametrize(
    "column, table, where, what",
    [
        ("image_sha256", "parts", "part_key = 'LW-220-002.png'", "image of part 'LW-220-002.png'"),
        ("result_sha256", "parts", "part_key = 'LW-220-002.png'", "result of part 'LW-220-002.png'"),
        ("report_sha256", "batches", "1", "batch report of batch 'LW220-0506'"),
    ],
)
def test_changed_stored_file_is_named(signed_archive, column, table, where, what):
    path = _object_of(signed_archive, column, table, where)
    os.chmod(path, 0o644)
    path.write_bytes(path.read_bytes() + b" ")
    failures = verify(signed_archive)
    assert any(f"({what} in batch 'LW220-0506')" in f or f"({what})" in f for f in failures), failures
    assert any("has changed" in f and str(path.relative_to(signed_archive)) in f for f in failures), failures


def test_removed_stored_file_is_named(signed_archive):
    path = _object_of(signed_archive, "overlay_sha256")
    path.unlink()
    failures = verify(signed_archive)
    assert any("overlay of part 'LW-220-002.png'" in f and "is missing" in f for f in failures), failures


def test_resume_records_each_part_once_and_refuses_other_images(tmp_path):
    recipe_path = tmp_path / "r.yaml"
    recipe_path.write_text(RECIPE_TEXT)
    images = write_images(tmp_path / "in", ["a.png", "b.png", "c.png"])
    root = tmp_path / "ar"
    sha = hashlib.sha256(recipe_path.read_bytes()).hexdigest()
    planned = [(p.name, hashlib.sha256(p.read_bytes()).hexdigest()) for p in images]
    with arc.Archive(root, create=True) as a:
        a.start_batch(
            "B1", recipe_name="r", recipe_revision=3, recipe_path=recipe_path, recipe_sha256=sha, parts=planned
        )
        regions = [region("face", results.RegionVerdict.PASS, 90.1)]
        assert a.record_part("B1", "a.png", result_json=result_json(images[0], sha, regions), image_path=images[0])
        plan = a.start_batch(
            "B1", recipe_name="r", recipe_revision=3, recipe_path=recipe_path, recipe_sha256=sha, parts=planned
        )
        assert plan.resumed and plan.pending == ("b.png", "c.png")
        # recording a finished part again changes nothing
        assert not a.record_part("B1", "a.png", result_json=result_json(images[0], sha, regions), image_path=images[0])
        other = write_images(tmp_path / "in", ["c.png"], seed=9)
        changed = [(p.name, hashlib.sha256(p.read_bytes()).hexdigest()) for p in images[:2] + other]
        with pytest.raises(InputError, match=r"unfinished batch 'B1' holds other images \(changed: c.png\)"):
            a.start_batch(
                "B1", recipe_name="r", recipe_revision=3, recipe_path=recipe_path, recipe_sha256=sha, parts=changed
            )
    assert verify(root) == []


def _writer_process(root, recipe_path, image_dir, batch_id, count):
    import pathlib

    images = sorted(pathlib.Path(image_dir).glob("*.png"))[:count]
    _fill_batch(pathlib.Path(root), batch_id, images, pathlib.Path(recipe_path))


def test_two_processes_writing_one_archive(tmp_path):
    recipe_path = tmp_path / "r.yaml"
    recipe_path.write_text(RECIPE_TEXT)
    write_images(tmp_path / "in", [f"p{i:02d}.png" for i in range(12)])
    root = tmp_path / "ar"
    arc.Archive(root, create=True).close()
    ctx = multiprocessing.get_context("fork" if "fork" in multiprocessing.get_all_start_methods() else "spawn")
    procs = [
        ctx.Process(target=_writer_process, args=(str(root), str(recipe_path), str(tmp_path / "in"), f"B{k}", 12))
        for k in range(2)
    ]
    for p in procs:
        p.start()
    for p in procs:
        p.join(60)
        assert p.exitcode == 0
    assert verify(root) == []
    with arc.Archive(root) as a:
        assert sorted(b.batch_id for b in a.batches() if b.is_finished) == ["B0", "B1"]
        (length, _), n_events = a.chain_head(), len(a.events())
        # archive created, then per batch: started + 12 parts + report written
        assert length == n_events == 1 + 2 * 14


def test_batch_id_is_checked():
    with pytest.raises(InputError, match=r"--batch-id: 'a b' is not a valid batch id"):
        arc.check_batch_id("a b")
    assert arc.check_batch_id("LW220-2024.05_06") == "LW220-2024.05_06"


def _tree(root):
    return sorted((str(p.relative_to(root)), p.read_bytes() if p.is_file() else None) for p in root.rglob("*"))


def test_archive_that_is_a_file_is_an_input_error(tmp_path):
    plain = tmp_path / "afile"
    plain.write_text("notes")
    for create in (False, True):
        with pytest.raises(
            InputError,
            match=r"^--archive .*afile: not a folder \(a file of that name exists; allowed: an archive folder",
        ):
            arc.Archive(plain, create=create)
    assert plain.read_text() == "notes"


@pytest.mark.parametrize("junk", [b"this is not a database\n" * 20, "sqlite-of-another-program"])
def test_index_that_is_not_an_archive_index_is_left_alone(tmp_path, junk):
    root = tmp_path / "D"
    root.mkdir()
    index = root / arc.INDEX_NAME
    if junk == "sqlite-of-another-program":
        other = sqlite3.connect(index)
        with other:
            other.execute("CREATE TABLE stock (item TEXT)")
        other.close()
    else:
        index.write_bytes(junk)
    before = _tree(root)
    for create in (False, True):
        with pytest.raises(InputError, match=r"index\.sqlite: not a surfinspect archive index \(.*\); allowed: "):
            arc.Archive(root, create=create)
    # nothing was created in or beside a file that is not ours (no tables, no objects folder)
    assert _tree(root) == before


def test_signing_unknown_or_unfinished_batch_is_an_input_error(tmp_path):
    recipe_path = tmp_path / "r.yaml"
    recipe_path.write_text(RECIPE_TEXT)
    images = write_images(tmp_path / "in", ["a.png", "b.png"])
    _fill_batch(tmp_path / "ar", "B1", images, recipe_path, finish=False)
    key = signing.SigningKey.generate()
    with arc.Archive(tmp_path / "ar") as a:
        with pytest.raises(InputError, match=r"--batch-id: no batch 'NOPE' in this archive \(latest: B1\)"):
            signatures.sign_batch(a, "NOPE", key, meaning="released", render_edition=render)
        with pytest.raises(InputError, match="batch 'B1' is not finished"):
            signatures.sign_batch(a, "B1", key, meaning="released", render_edition=render)
    with pytest.raises(InputError, match="not a surfinspect archive"):
        arc.Archive(tmp_path / "elsewhere")
