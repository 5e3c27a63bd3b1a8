"""Tests for surfinspect.archive: storage, audit chain, sign-off, and tamper detection."""

from __future__ import annotations

import hashlib
import json
import multiprocessing
import os
import sqlite3
import stat

import numpy as np
import pytest

from surfinspect import results
from surfinspect.archive import signing
from surfinspect.archive import store as arc
from surfinspect.errors import InputError

RECIPE_TEXT = "recipe: lw-220-wall-panel\nrevision: 3\nregions: []\n"


def _region(name: str, verdict: results.RegionVerdict, lay: float | None) -> results.RegionResult:
    return results.RegionResult(
        name=name,
        expected_lay_deg=90.0,
        tolerance_deg=3.0,
        lay_deg=lay,
        deviation_deg=None if lay is None else lay - 90.0,
        uncertainty_deg=None if lay is None else 0.2,
        coherence=0.61 if lay is not None else 0.01,
        deviating_area_fraction=0.0,
        patches=(),
        histogram=results.Histogram((0.0, 90.0, 180.0), (0.25, 0.75)),
        verdict=verdict,
        reasons=() if verdict is results.RegionVerdict.PASS else ("made by hand for the test",),
    )


def _result_json(image_path, recipe_sha: str, regions) -> bytes:
    data = image_path.read_bytes()
    part = results.PartResult(
        name=image_path.stem,
        image=results.ImageInfo(str(image_path), hashlib.sha256(data).hexdigest(), 32, 32, 8),
        recipe=results.RecipeInfo("lw-220-wall-panel", 3, recipe_sha),
        verdict=results.part_verdict([r.verdict for r in regions]),
        regions=tuple(regions),
        inspected_at="2024-05-06T07:08:09Z",
        engine_version="0.1.0",
    )
    return results.dumps(part).encode("utf-8")


def _write_images(folder, names, seed=0):
    import cv2

    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for name in names:
        path = folder / name
        cv2.imwrite(str(path), rng.integers(0, 256, (32, 32), dtype=np.uint8))
        paths.append(path)
    return paths


def _fill_batch(root, batch_id, images, recipe_path, *, finish=True):
    """Record a batch of hand-made results: part 0 passes, part 1 fails, the last is an unreadable file."""
    recipe_sha = hashlib.sha256(recipe_path.read_bytes()).hexdigest()
    with arc.Archive(root, create=True) as a:
        plan = a.start_batch(
            batch_id,
            recipe_name="lw-220-wall-panel",
            recipe_revision=3,
            recipe_path=recipe_path,
            recipe_sha256=recipe_sha,
            parts=[(p.name, hashlib.sha256(p.read_bytes()).hexdigest()) for p in images],
            operator="K. LINDQVIST",
            station="line-2",
        )
        for i, path in enumerate(images):
            if path.name not in plan.pending:
                continue
            if i == len(images) - 1 and len(images) > 2:
                body = arc.error_record_json(
                    path.name, hashlib.sha256(path.read_bytes()).hexdigest(), f"{path}: not a readable image"
                )
                a.record_part(batch_id, path.name, result_json=body, image_path=path)
                continue
            verdict = results.RegionVerdict.PASS if i % 2 == 0 else results.RegionVerdict.FAIL
            regions = [
                _region("face", verdict, 90.4 if i % 2 == 0 else 97.9),
                _region("edge", results.RegionVerdict.PASS, 89.8),
            ]
            a.record_part(
                batch_id,
                path.name,
                result_json=_result_json(path, recipe_sha, regions),
                image_path=path,
                overlay_png=b"png of " + path.name.encode(),
            )
        if finish:
            a.finish_batch(
                batch_id,
                report_pdf=b"%PDF report " + batch_id.encode(),
                regions_csv=b"csv\n",
                report_generated_at="2024-05-06T08:00:00Z",
            )


@pytest.fixture
def signed_archive(tmp_path):
    """An archive with one finished batch of 3 parts (accept, reject, error) and one sign-off."""
    recipe_path = tmp_path / "lw-220.yaml"
    recipe_path.write_text(RECIPE_TEXT)
    images = _write_images(tmp_path / "in", ["LW-220-001.png", "LW-220-002.png", "LW-220-003.png"])
    root = tmp_path / "archive"
    _fill_batch(root, "LW220-0506", images, recipe_path)
    key = signing.SigningKey.generate("R. OSTERMANN")
    seen = []

    def render(signoff: results.SignOff) -> bytes:
        seen.append(signoff)
        return f"%PDF signed by {signoff.signer_name} {signoff.meaning}".encode()

    with arc.Archive(root) as a:
        arc.sign_batch(a, "LW220-0506", key, meaning="released", comment="released", render_edition=render)
        # the sign-off block names the unsigned report the signature covers: the bytes stored for the batch report
        assert seen and seen[0].key_fingerprint == key.fingerprint
        assert seen[0].report_sha256 == hashlib.sha256(b"%PDF report LW220-0506").hexdigest()
    return root


def _sql(root, statement, params=()):
    db = sqlite3.connect(root / arc.INDEX_NAME)
    with db:
        db.execute(statement, params)
    db.close()


def test_untouched_archive_verifies(signed_archive):
    assert arc.verify(signed_archive) == []
    assert arc.verify(signed_archive, "LW220-0506") == []
    with arc.Archive(signed_archive) as a:
        counts = arc.verdict_counts(a.parts("LW220-0506"))
        assert counts == {"accept": 1, "reject": 1, "review": 0, "not-inspected": 1, "pending": 0}
        kinds = [row[0] for row in a._db.execute("SELECT kind FROM events ORDER BY seq")]
        assert kinds == [
            "batch started",
            "part inspected",
            "part inspected",
            "part inspected",
            "report written",
            "signed",
        ]
        (signoff,) = a.signoffs("LW220-0506")
        assert signoff.meaning == "released" and signoff.signer_name == "R. OSTERMANN"
        assert a.read_object(signoff.signed_report_sha256).startswith(b"%PDF signed by R. OSTERMANN released")
        # the unsigned report stays as it was, beside the signed edition
        assert a.read_object(a.batch("LW220-0506").report_sha256) == b"%PDF report LW220-0506"
        record = json.loads(signoff.record_json)
        assert set(record["results_sha256"]) == {"LW-220-001.png", "LW-220-002.png", "LW-220-003.png"}


def test_objects_are_content_addressed_and_read_only(signed_archive):
    with arc.Archive(signed_archive) as a:
        for (sha,) in a._db.execute("SELECT sha256 FROM files"):
            path = a.object_path(sha)
            assert path.parent.name == sha[:2] and path.name == sha[2:]
            assert hashlib.sha256(path.read_bytes()).hexdigest() == sha
            assert not stat.S_IMODE(path.stat().st_mode) & 0o222


def _object_of(root, column, table="parts", where="part_key = 'LW-220-002.png'"):
    db = sqlite3.connect(root / arc.INDEX_NAME)
    (sha,) = db.execute(f"SELECT {column} FROM {table} WHERE {where}").fetchone()
    db.close()
    return root / arc.OBJECTS_DIR / sha[:2] / sha[2:]


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
    failures = arc.verify(signed_archive)
    assert any(f"({what} in batch 'LW220-0506')" in f or f"({what})" in f for f in failures), failures
    assert any("has changed" in f and str(path.relative_to(signed_archive)) in f for f in failures), failures


def test_removed_stored_file_is_named(signed_archive):
    path = _object_of(signed_archive, "overlay_sha256")
    path.unlink()
    failures = arc.verify(signed_archive)
    assert any("overlay of part 'LW-220-002.png'" in f and "is missing" in f for f in failures), failures


def test_verdict_edited_in_index_is_named(signed_archive):
    _sql(
        signed_archive, "UPDATE regions SET verdict = 'pass' WHERE part_key = 'LW-220-002.png' AND region_name = 'face'"
    )
    failures = arc.verify(signed_archive)
    assert failures == [
        "region 'face' of part 'LW-220-002.png' in batch 'LW220-0506': the index says verdict 'pass', "
        "the stored (signed) result says 'fail'"
    ]


def test_part_verdict_edited_in_index_is_named(signed_archive):
    _sql(signed_archive, "UPDATE parts SET verdict = 'accept' WHERE part_key = 'LW-220-002.png'")
    failures = arc.verify(signed_archive)
    assert any("the index says verdict 'accept', the stored result says 'reject'" in f for f in failures), failures
    assert any("the audit trail recorded" in f for f in failures), failures


def test_result_swapped_in_index_breaks_the_signature_link(signed_archive):
    db = sqlite3.connect(signed_archive / arc.INDEX_NAME)
    (good,) = db.execute("SELECT result_sha256 FROM parts WHERE part_key = 'LW-220-001.png'").fetchone()
    db.close()
    _sql(signed_archive, "UPDATE parts SET result_sha256 = ? WHERE part_key = 'LW-220-002.png'", (good,))
    failures = arc.verify(signed_archive)
    assert any(
        "the results in the index are not the ones that were signed (parts: LW-220-002.png)" in f for f in failures
    ), failures
    assert any("its result names image" in f for f in failures), failures


def test_deleted_signoff_row_is_named(signed_archive):
    _sql(signed_archive, "DELETE FROM signatures")
    failures = arc.verify(signed_archive)
    assert any(
        "sign-off #1 of batch 'LW220-0506' by R. OSTERMANN (released), recorded in audit event 6, "
        "is missing from the index (its sign-off row was deleted)" == f
        for f in failures
    ), failures
    assert "batch 'LW220-0506': the index holds 0 sign-off(s), the audit trail recorded 1" in failures


def test_edited_signoff_meaning_is_named(signed_archive):
    _sql(signed_archive, "UPDATE signatures SET meaning = 'withheld'")
    failures = arc.verify(signed_archive)
    assert any("the index shows meaning 'withheld', the signed record says 'released'" in f for f in failures), failures


def test_forged_record_fails_the_signature(signed_archive):
    db = sqlite3.connect(signed_archive / arc.INDEX_NAME)
    (text,) = db.execute("SELECT record_json FROM signatures").fetchone()
    db.close()
    record = json.loads(text)
    record["meaning"] = "withheld"
    forged = signing.canonical_record_bytes(record).decode()
    _sql(signed_archive, "UPDATE signatures SET record_json = ?, meaning = 'withheld'", (forged,))
    failures = arc.verify(signed_archive)
    assert any("the signature does not hold over its record" in f for f in failures), failures


def test_removed_audit_event_is_named(signed_archive):
    _sql(signed_archive, "DELETE FROM events WHERE seq = 3")
    failures = arc.verify(signed_archive)
    assert "audit trail: event(s) 3–3 are missing (the trail jumps from event 2 to event 4)" in failures
    assert any("'LW-220-002.png' in batch 'LW220-0506' has no 'part inspected' event" in f for f in failures), failures


def test_reordered_audit_events_are_named(signed_archive):
    # swap events 2 and 3, keeping the sequence numbers gap-free
    _sql(signed_archive, "UPDATE events SET seq = -2 WHERE seq = 2")
    _sql(signed_archive, "UPDATE events SET seq = 2 WHERE seq = 3")
    _sql(signed_archive, "UPDATE events SET seq = 3 WHERE seq = -2")
    failures = arc.verify(signed_archive)
    assert any(f.startswith("audit trail: event 2 (part inspected) does not follow event 1") for f in failures), (
        failures
    )
    assert (
        "audit trail: the event at position 2 (part inspected) was recorded as event 3: events were reordered"
        in failures
    )
    assert (
        "audit trail: the event at position 3 (part inspected) was recorded as event 2: events were reordered"
        in failures
    )


def test_audit_events_truncated_from_the_end_are_named(signed_archive):
    _sql(signed_archive, "DELETE FROM events WHERE seq >= 5")
    failures = arc.verify(signed_archive)
    assert (
        "audit trail: it ends at event 4 but the index records 6 events: event(s) 5–6 were removed from the end"
        in failures
    )


def test_truncation_stays_visible_after_new_events(signed_archive):
    _sql(signed_archive, "DELETE FROM events WHERE seq = 6")
    with arc.Archive(signed_archive) as a:
        a.record_verification(None, ["something"])
    failures = arc.verify(signed_archive)
    assert "audit trail: event(s) 6–6 are missing (the trail jumps from event 5 to event 7)" in failures


def test_rewritten_event_is_named(signed_archive):
    _sql(signed_archive, "UPDATE events SET details = replace(details, '\"reject\"', '\"accept\"') WHERE seq = 3")
    failures = arc.verify(signed_archive)
    assert "audit trail: event 3 (part inspected) does not match its own hash: its content was altered" in failures


def test_rewritten_history_before_a_signature_breaks_it(signed_archive):
    # rebuild the whole trail without event 3, with fresh hashes and head: only the signed record still knows
    db = sqlite3.connect(signed_archive / arc.INDEX_NAME)
    rows = db.execute(
        "SELECT seq, recorded_at, kind, batch_id, part_key, details FROM events WHERE seq != 3 ORDER BY seq"
    ).fetchall()
    with db:
        db.execute("DELETE FROM events")
        prev = arc.GENESIS_SHA256
        for new_seq, (_, at, kind, b, p, details) in enumerate(rows, start=1):
            sha = arc._event_sha256(new_seq, at, kind, b, p, details, prev)
            db.execute(
                "INSERT INTO events VALUES (?, ?, ?, ?, ?, ?, ?, ?)", (new_seq, at, kind, b, p, details, prev, sha)
            )
            prev = sha
        db.execute("UPDATE meta SET value = ? WHERE key = 'chain_length'", (str(len(rows)),))
        db.execute("UPDATE meta SET value = ? WHERE key = 'chain_head_sha256'", (prev,))
    db.close()
    failures = arc.verify(signed_archive)
    assert any("the trail's head when it was signed, is missing or was rewritten" in f for f in failures), failures


def test_signing_unknown_or_unfinished_batch_is_an_input_error(tmp_path):
    recipe_path = tmp_path / "r.yaml"
    recipe_path.write_text(RECIPE_TEXT)
    images = _write_images(tmp_path / "in", ["a.png", "b.png"])
    _fill_batch(tmp_path / "ar", "B1", images, recipe_path, finish=False)
    key = signing.SigningKey.generate("R. OSTERMANN")
    with arc.Archive(tmp_path / "ar") as a:
        with pytest.raises(InputError, match=r"--batch-id: no batch 'NOPE' in this archive \(latest: B1\)"):
            arc.sign_batch(a, "NOPE", key, meaning="released", render_edition=lambda s: b"")
        with pytest.raises(InputError, match="batch 'B1' is not finished"):
            arc.sign_batch(a, "B1", key, meaning="released", render_edition=lambda s: b"")
    with pytest.raises(InputError, match="not a surfinspect archive"):
        arc.Archive(tmp_path / "elsewhere")


def test_resume_records_each_part_once_and_refuses_other_images(tmp_path):
    recipe_path = tmp_path / "r.yaml"
    recipe_path.write_text(RECIPE_TEXT)
    images = _write_images(tmp_path / "in", ["a.png", "b.png", "c.png"])
    root = tmp_path / "ar"
    sha = hashlib.sha256(recipe_path.read_bytes()).hexdigest()
    planned = [(p.name, hashlib.sha256(p.read_bytes()).hexdigest()) for p in images]
    with arc.Archive(root, create=True) as a:
        a.start_batch(
            "B1", recipe_name="r", recipe_revision=3, recipe_path=recipe_path, recipe_sha256=sha, parts=planned
        )
        regions = [_region("face", results.RegionVerdict.PASS, 90.1)]
        assert a.record_part("B1", "a.png", result_json=_result_json(images[0], sha, regions), image_path=images[0])
        plan = a.start_batch(
            "B1", recipe_name="r", recipe_revision=3, recipe_path=recipe_path, recipe_sha256=sha, parts=planned
        )
        assert plan.resumed and plan.pending == ("b.png", "c.png")
        # recording a finished part again changes nothing
        assert not a.record_part("B1", "a.png", result_json=_result_json(images[0], sha, regions), image_path=images[0])
        other = _write_images(tmp_path / "in", ["c.png"], seed=9)
        changed = [(p.name, hashlib.sha256(p.read_bytes()).hexdigest()) for p in images[:2] + other]
        with pytest.raises(InputError, match=r"unfinished batch 'B1' holds other images \(changed: c.png\)"):
            a.start_batch(
                "B1", recipe_name="r", recipe_revision=3, recipe_path=recipe_path, recipe_sha256=sha, parts=changed
            )
    assert arc.verify(root) == []


def _writer_process(root, recipe_path, image_dir, batch_id, count):
    import pathlib

    images = sorted(pathlib.Path(image_dir).glob("*.png"))[:count]
    _fill_batch(pathlib.Path(root), batch_id, images, pathlib.Path(recipe_path))


def test_two_processes_writing_one_archive(tmp_path):
    recipe_path = tmp_path / "r.yaml"
    recipe_path.write_text(RECIPE_TEXT)
    _write_images(tmp_path / "in", [f"p{i:02d}.png" for i in range(12)])
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
    assert arc.verify(root) == []
    with arc.Archive(root) as a:
        assert sorted(b.batch_id for b in a.batches() if b.is_finished) == ["B0", "B1"]
        (length, _), n_events = a.chain_head(), a._db.execute("SELECT COUNT(*) FROM events").fetchone()[0]
        # per batch: started + 12 parts + report written
        assert length == n_events == 2 * 14


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
