"""The tamper suite: every change to an archive is named by ``verify`` (exit 1), never a traceback."""

from __future__ import annotations

import json
import os
import shutil
import sqlite3

import pytest
from archive_helpers import BACKENDS, BATCH, PARTS, Site, full_archive, query, render, site_for, sql

from surfinspect.archive import chain, signatures, signing
from surfinspect.archive import store as arc
from surfinspect.archive import verify as ver
from surfinspect.archive.schema import CHAINED_TABLES, TABLE_BY_NAME
from surfinspect.cli import main

# Every tamper runs against both index backends (BACKENDS); PostgreSQL's tests skip, saying why, without a server.
_site = site_for


@pytest.fixture(scope="module", params=BACKENDS)
def _template(request, tmp_path_factory):
    folder = tmp_path_factory.mktemp("template")
    return full_archive(folder, root=_site(request, folder / "archive", request.param))


def _copy(request, template: Site, folder) -> Site:
    """A copy of the template archive: its files, and its index (a file, or a database made from it)."""
    shutil.copytree(template.folder, folder)
    if not template.is_postgres:
        return Site(folder)
    name = template.server.create_database(template=template.dbname)
    request.addfinalizer(lambda: template.server.drop_database(name))
    return Site(folder, template.server, name)


@pytest.fixture
def archive(request, _template, tmp_path):
    """A fresh copy of one full archive (register, batch closed by a station, sign-off, disposition)."""
    return _copy(request, _template[0], tmp_path / "archive")


@pytest.fixture(params=BACKENDS)
def new_site(request, tmp_path):
    """An empty archive location, on each backend."""
    return _site(request, tmp_path / "archive", request.param)


@pytest.fixture
def world(tmp_path, new_site):
    return full_archive(tmp_path, root=new_site)


def _no_table(site: Site, name: str) -> str:
    """How the backend's database words a missing table."""
    return f'relation "{name}" does not exist' if site.is_postgres else f"no such table: {name}"


def _verify(root, **kw):
    return ver.verify_archive(root, **kw)


def test_untouched_archive_verifies_without_warnings(archive):
    report = _verify(archive)
    assert report.problems == [] and report.warnings == []
    with arc.Archive(archive) as a:
        kinds = [e.kind for e in a.events()]
    assert kinds[:3] == ["archive created", "register entry", "head signed"]
    # every batch close, sign-off and disposition is followed by a signed head
    for i, kind in enumerate(kinds):
        if kind in ("report written", "signed", "disposition", "register entry"):
            assert kinds[i + 1] == "head signed", (i, kinds)


def test_unsigned_batch_close_is_a_warning_not_a_problem(tmp_path, new_site):
    root, _ = full_archive(tmp_path, station=False, signoff=False, disposition=False, root=new_site)
    report = _verify(root)
    assert report.problems == []
    assert any("was closed (audit event" in w and "without a station key" in w for w in report.warnings)
    assert any("after the last signed head" in w for w in report.warnings)
    assert main(["-q", "verify", "--archive", str(root)]) == 0
    assert main(["-q", "verify", "--archive", str(root), "--strict"]) == 1


# ----------------------------------------------------- every field of the index


def _schema_columns():
    """(table, column) for every chained table, read from the database the archive writes."""
    import tempfile
    from pathlib import Path

    with tempfile.TemporaryDirectory() as tmp:
        with arc.Archive(Path(tmp) / "a", create=True):
            pass
        db = sqlite3.connect(Path(tmp) / "a" / arc.INDEX_NAME)
        found = [
            (t, r[1])
            for (t,) in db.execute("SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name")
            for r in db.execute(f"PRAGMA table_info({t})")
        ]
        db.close()
    return found


def _changed(value):
    if isinstance(value, int):
        return value + 1
    if isinstance(value, float):
        return value + 0.5
    if value is None:
        return "set-by-hand"
    return value + "x" if not value.endswith("x") else value[:-1] + "y"


@pytest.mark.parametrize("table, column", _schema_columns(), ids=lambda v: str(v))
def test_every_field_edited_is_named(archive, table, column):
    keys = TABLE_BY_NAME[table].primary_key
    *key, value = query(archive, f"SELECT {', '.join(keys)}, {column} FROM {table} ORDER BY {keys[0]} DESC LIMIT 1")[0]
    match = " AND ".join(f"{k} = ?" for k in keys)
    sql(archive, f"UPDATE {table} SET {column} = ? WHERE {match}", (_changed(value), *key))
    problems = _verify(archive).problems
    assert problems, f"{table}.{column} edited, yet verify found nothing"
    chained = {t.name for t in CHAINED_TABLES}
    if table in chained:
        named = f"{table} row (" in " ".join(problems)
        assert named and any(f": {column} is " in p or "in the index but never recorded" in p for p in problems), (
            problems
        )
    assert main(["-q", "verify", "--archive", str(archive)]) == 1


@pytest.mark.parametrize("key", ["format", "archive_id", "created_at", "chain_length", "chain_head_sha256", "extra"])
def test_every_meta_entry_edited_or_added_is_named(archive, key):
    if key == "extra":
        sql(archive, "INSERT INTO meta VALUES ('extra', 'x')")
    else:
        sql(archive, "UPDATE meta SET value = value || '0' WHERE key = ?", (key,))
    report = _verify(archive)
    assert report.problems, key
    if key in ("created_at", "extra"):
        assert any(p.startswith(f"index: meta {key} is ") for p in report.problems), report.problems


def test_every_chained_table_is_covered_by_the_parametrisation():
    tables = {t for t, _ in _schema_columns()}
    assert {t.name for t in CHAINED_TABLES} | {"meta", "events"} == tables


def test_reordered_parts_are_named(archive):
    sql(archive, "UPDATE parts SET position = 2 - position")
    problems = _verify(archive).problems
    assert any("parts row (batch_id='LW220-0506', part_key='LW-220-001.png'): position is 2" in p for p in problems)
    assert any("the batch's index content (batch, parts, regions) is not what was signed" in p for p in problems)


def test_deleted_and_added_rows_are_named(archive):
    sql(archive, "DELETE FROM regions WHERE part_key = ?", (PARTS[0],))
    sql(archive, "INSERT INTO files VALUES (?, 3, 'text/plain', '2024-01-01T00:00:00Z')", ("f" * 64,))
    problems = _verify(archive).problems
    assert any(
        "regions row (batch_id='LW220-0506', part_key='LW-220-001.png', region_name='edge'): recorded in audit event"
        in p
        for p in problems
    )
    assert any("files row (sha256='" + "f" * 64 + "'): in the index but never recorded" in p for p in problems)


def test_edited_file_catalogue_is_named(archive):
    sql(archive, "UPDATE files SET media_type = 'image/png' WHERE media_type = 'application/pdf'")
    problems = _verify(archive).problems
    assert any(": media_type is 'image/png' in the index, audit event" in p for p in problems)


# ----------------------------------------------------------- the audit chain


def test_removed_audit_event_is_named(archive):
    sql(archive, "DELETE FROM events WHERE seq = 9")
    problems = _verify(archive).problems
    assert "audit trail: event(s) 9–9 are missing (the trail jumps from event 8 to event 10)" in problems


def test_rewritten_event_is_named(archive):
    sql(
        archive,
        "UPDATE events SET details = replace(details, '\"reject\"', '\"accept\"') WHERE kind = 'part inspected'",
    )
    problems = _verify(archive).problems
    assert any("(part inspected) does not match its own hash: its content was altered" in p for p in problems)


def test_reordered_events_are_named(archive):
    sql(archive, "UPDATE events SET seq = -9 WHERE seq = 9")
    sql(archive, "UPDATE events SET seq = 9 WHERE seq = 10")
    sql(archive, "UPDATE events SET seq = 10 WHERE seq = -9")
    problems = _verify(archive).problems
    assert (
        "audit trail: the event at position 9 (part inspected) was recorded as event 10: events were reordered"
        in problems
    )


def test_truncated_trail_end_is_named(archive):
    (n,) = query(archive, "SELECT MAX(seq) FROM events")[0]
    sql(archive, "DELETE FROM events WHERE seq >= ?", (n - 1,))
    problems = _verify(archive).problems
    assert (
        f"audit trail: it ends at event {n - 2} but the index records {n} events: event(s) {n - 1}–{n} were removed from the end"
        in problems
    )


def test_fake_event_time_is_named(archive):
    # a time rewritten in the trail breaks its hash; a trail rebuilt with it cannot keep its signed heads
    sql(archive, "UPDATE events SET recorded_at = 'not a time at all' WHERE seq = 8")
    problems = _verify(archive).problems
    assert "audit trail: event 8 (batch started) has no real UTC time ('not a time at all')" in problems


def _rechain(root, keep):
    """Rebuild the whole trail from the events ``keep`` accepts, with fresh links, hashes and head."""
    rows = query(root, "SELECT seq, recorded_at, kind, batch_id, part_key, details FROM events ORDER BY seq")
    rows = [r for r in rows if keep(r)]
    sql(root, "DELETE FROM events")
    prev = chain.GENESIS_SHA256
    for new_seq, (_, at, kind, b, p, details) in enumerate(rows, start=1):
        sha = chain.event_sha256(new_seq, at, kind, b, p, details, prev)
        sql(root, "INSERT INTO events VALUES (?, ?, ?, ?, ?, ?, ?, ?)", (new_seq, at, kind, b, p, details, prev, sha))
        prev = sha
    sql(root, "UPDATE meta SET value = ? WHERE key = 'chain_length'", (str(len(rows)),))
    sql(root, "UPDATE meta SET value = ? WHERE key = 'chain_head_sha256'", (prev,))


def test_rechaining_from_scratch_is_named(archive):
    # drop the 'verified' and one 'part inspected' event and rebuild every link: the signed heads no longer hold
    _rechain(archive, lambda r: not (r[2] == "part inspected" and r[4] == PARTS[0]))
    problems = _verify(archive).problems
    assert any(
        p.startswith("signed head at audit event") and "which is not the event before it or was rewritten" in p
        for p in problems
    )
    assert any("the trail's head when it was signed, is missing or was rewritten" in p for p in problems)


def test_removal_of_the_trailing_signoff_is_named(world):
    root, _ = world
    with arc.Archive(root) as a:
        ver.export_anchor(a, root.parent / "anchor.json")
        first_signed = next(e.seq for e in a.events() if e.kind == "signed")
        edition = a.signoffs(BATCH)[0].signed_report_sha256
    # remove the sign-off and the disposition with every trace: rows, events, count and head
    sql(root, "DELETE FROM dispositions")
    sql(root, "DELETE FROM signatures")
    sql(root, "DELETE FROM files WHERE sha256 = ?", (edition,))
    _rechain(root, lambda r: r[0] < first_signed)
    problems = _verify(root, anchor=ver.read_anchor(root.parent / "anchor.json")).problems
    assert any(
        p.startswith("anchor: the trail ends at event") and "records were removed from the end" in p for p in problems
    )
    # without the anchor, the signed report edition left behind still tells (a warning: crashes leave such files too)
    report = _verify(root)
    assert report.problems == [] and any(f"{edition[2:]} is not in the file catalogue" in w for w in report.warnings)


def test_removal_of_a_trailing_batch_is_named_by_the_anchor(tmp_path, new_site):
    root, _ = full_archive(tmp_path, signoff=False, disposition=False, root=new_site)
    with arc.Archive(root) as a:
        ver.export_anchor(a, tmp_path / "anchor.json")
        before_batch = next(e.seq for e in a.events() if e.kind == "batch started")
    with arc.Archive(root) as a:  # the register's certificates were stored before the batch: they stay
        keep = {r["sha256"] for r in a.index.select("files", {"media_type": "application/pkix-cert"})}
    for table in ("regions", "parts", "batches"):
        sql(root, f"DELETE FROM {table}")
    sql(root, "DELETE FROM files WHERE media_type != 'application/pkix-cert'")
    _rechain(root, lambda r: r[0] < before_batch)
    for path in [p for p in (root / "objects").rglob("*") if p.is_file()]:
        if path.parent.name + path.name not in keep:
            path.unlink()
    assert _verify(root).problems == []  # a consistent earlier archive: only an anchor kept outside can tell
    problems = _verify(root, anchor=ver.read_anchor(tmp_path / "anchor.json")).problems
    assert any("records were removed from the end" in p for p in problems), problems
    assert main(["-q", "verify", "--archive", str(root), "--anchor", str(tmp_path / "anchor.json")]) == 1


def test_anchor_round_trip_and_rewrite(tmp_path, capsys, new_site):
    root, _ = full_archive(tmp_path, root=new_site)
    anchor = tmp_path / "anchor.json"
    assert main(["verify", "--archive", str(root), "--export-anchor", str(anchor)]) == 0
    doc = json.loads(anchor.read_text())
    assert doc["format"] == "surfinspect.anchor/1" and len(doc["head_sha256"]) == 64
    assert main(["-q", "verify", "--archive", str(root), "--anchor", str(anchor)]) == 0
    sql(root, "UPDATE events SET recorded_at = '2024-01-01T00:00:00.000Z' WHERE seq = 2")
    _rechain(root, lambda r: True)
    capsys.readouterr()
    assert main(["verify", "--archive", str(root), "--anchor", str(anchor)]) == 1
    assert f"anchor: audit event {doc['events']} is not the one anchored" in capsys.readouterr().out
    other = dict(doc, archive_id="another")
    anchor.write_text(json.dumps(other))
    assert main(["verify", "--archive", str(root), "--anchor", str(anchor)]) == 1
    assert "anchor: it belongs to archive 'another'" in capsys.readouterr().out


# ---------------------------------------------------- signatures and the register


def test_rewrite_and_resign_with_a_new_key_is_named(world):
    """Change a rejected part to accept everywhere and re-sign under the same printed name with a fresh key."""
    root, keys = world
    intruder = signing.SigningKey.generate("R. OSTERMANN")
    (text,) = query(root, "SELECT record_json FROM signatures")[0]
    record = json.loads(text)
    record["key_fingerprint"] = intruder.fingerprint
    record["meaning"] = "withheld"
    forged = chain.canonical_bytes(record).decode()
    sql(
        root,
        "UPDATE signatures SET record_json = ?, record_sha256 = ?, signature_hex = ?, key_fingerprint = ?, meaning = 'withheld'",
        (forged, chain.canonical_sha256(record), signing.sign_record(intruder, record).hex(), intruder.fingerprint),
    )
    sql(root, "UPDATE parts SET verdict = 'accept' WHERE part_key = ?", (PARTS[1],))
    problems = _verify(root).problems
    assert any(f"key {intruder.fingerprint[:16]}… is not in the archive's signer register" in p for p in problems)
    assert any(
        "parts row (batch_id='LW220-0506', part_key='LW-220-002.png'): verdict is 'accept'" in p for p in problems
    )


def test_register_enrolment_forged_by_hand_is_named(world):
    root, _ = world
    intruder = signing.SigningKey.generate()
    sql(root, "UPDATE register SET printed_name = 'SOMEONE ELSE' WHERE action = 'enrol' AND role != 'station'")
    sql(root, "UPDATE register SET public_key_hex = ? WHERE role = 'station'", (intruder.public_key_raw.hex(),))
    problems = _verify(root).problems
    assert any(
        "the index shows printed_name 'SOMEONE ELSE', the signed record says 'R. OSTERMANN'" in p for p in problems
    )
    assert any(
        "the printed name 'R. OSTERMANN' is not the register's name for the key ('SOMEONE ELSE')" in p for p in problems
    )
    assert any("the enrolled public key does not have the fingerprint recorded with it" in p for p in problems)


def test_fake_signing_time_is_named(world):
    root, keys = world
    with arc.Archive(root) as a:
        batch = a.batch(BATCH)
    for fake, says in [
        ("2001-01-01T00:00:00Z", "is before"),
        ("not a time at all", "is not a UTC time"),
        ("2999-01-01T00:00:00Z", "lies in the future"),
    ]:
        assert signatures.time_problem(fake, not_before=batch.finished_at) is not None
        (text,) = query(root, "SELECT record_json FROM signatures")[0]
        record = dict(json.loads(text), signed_at_utc=fake)
        sql(
            root,
            "UPDATE signatures SET record_json = ?, record_sha256 = ?, signature_hex = ?, signed_at_utc = ?",
            (
                chain.canonical_bytes(record).decode(),
                chain.canonical_sha256(record),
                signing.sign_record(keys.person, record).hex(),
                fake,
            ),
        )
        problems = _verify(root).problems
        assert any("signed_at_utc" in p and says in p for p in problems), (fake, problems)


def test_deleted_signoff_row_is_named(archive):
    sql(archive, "DELETE FROM signatures")
    problems = _verify(archive).problems
    assert any(
        p.startswith("signatures row (batch_id='LW220-0506', signoff_no=1): recorded in audit event") for p in problems
    )


# ------------------------------------------------ damage: never a traceback


def test_dropped_table_is_a_finding(archive, capsys):
    sql(archive, "DROP TABLE parts")
    problems = _verify(archive).problems
    assert "index: table 'parts' is missing (dropped?); its records cannot be checked" in problems
    capsys.readouterr()
    assert main(["verify", "--archive", str(archive)]) == 1
    assert "Traceback" not in capsys.readouterr().err


@pytest.mark.parametrize("command", ["show", "sign", "disposition"])
def test_other_commands_on_a_dropped_table_exit_2_in_one_line(archive, tmp_path, capsys, command):
    sql(archive, "DROP TABLE parts")
    key = tmp_path / "k.key"
    signing.write_key_pair(key, "", passphrase=None)
    argv = {
        "show": ["show", "--archive", str(archive), "--batch-id", BATCH],
        "sign": ["sign", "--archive", str(archive), "--batch-id", BATCH, "--key", str(key), "--meaning", "released"],
        "disposition": [
            *("disposition", "--archive", str(archive), "--batch-id", BATCH, "--part", PARTS[1]),
            *("--decision", "scrap", "--key", str(key)),
        ],
    }[command]
    capsys.readouterr()
    assert main(argv) == 2
    err = capsys.readouterr().err
    errors = [line for line in err.splitlines() if not line.startswith("surfinspect: warning: ")]
    assert len(errors) == 1 and errors[0].startswith("surfinspect: error: ") and "Traceback" not in err, err
    if command == "show":
        assert _no_table(archive, "parts") in errors[0]


@pytest.mark.parametrize(
    "statement, says",
    [
        ("ALTER TABLE regions DROP COLUMN coherence", "index: table 'regions' lacks column(s) coherence"),
        (
            "ALTER TABLE signatures RENAME TO signatures_old",
            "index: table 'signatures_old' is not one an archive writes",
        ),
        ("ALTER TABLE files ADD COLUMN note TEXT", "index: table 'files' has column(s) no archive writes: note"),
    ],
)
def test_changed_table_structure_is_a_finding(archive, statement, says):
    sql(archive, statement)
    assert any(p.startswith(says) for p in _verify(archive).problems)


def test_dropped_meta_table_is_a_finding(archive):
    sql(archive, "DROP TABLE meta")
    problems = _verify(archive).problems
    assert len(problems) == 1 and _no_table(archive, "meta") in problems[0]
    assert problems[0].startswith("index: ") and problems[0].endswith("; nothing recorded in it can be checked")
    assert main(["-q", "verify", "--archive", str(archive)]) == 1


def _scribble(data: bytearray, start: int, end: int) -> bytes:
    for offset in range(start, end):
        data[offset] = 0xA5
    return bytes(data)


@pytest.mark.parametrize(
    "damage",
    [
        lambda d: _scribble(d, 2 * 4096 + 16, 3 * 4096 - 16),  # a whole page past the schema
        lambda d: _scribble(d, 0, 100),  # the file header
        lambda d: bytes(d[: len(d) // 2]),  # cut in half
        lambda d: _scribble(d, len(d) - 4096, len(d)),  # the last page
    ],
    ids=["page", "header", "truncated", "last-page"],
)
def test_damaged_index_is_a_finding(archive, capsys, damage):
    if archive.is_postgres:
        pytest.skip("bytes of a file: the server's own pages are not the tool's to scribble on (see the key tests)")
    index = archive / arc.INDEX_NAME
    data = bytearray(index.read_bytes())
    assert len(data) > 4 * 4096
    index.write_bytes(damage(data))
    problems = _verify(archive).problems
    assert problems and any(p.startswith("index:") or "could not be completed" in p for p in problems), problems
    capsys.readouterr()
    assert main(["verify", "--archive", str(archive)]) == 1
    err = capsys.readouterr().err
    assert "Traceback" not in err


def test_unreadable_object_is_a_finding(archive, monkeypatch):
    (sha,) = query(archive, "SELECT report_sha256 FROM batches")[0]
    from surfinspect.archive import objects

    real = objects.sha256_file

    def refuse(path, *a):  # as a file without read permission behaves (root reads any file, so it is simulated)
        if str(path).endswith(sha[2:]):
            raise PermissionError(13, "Permission denied", str(path))
        return real(path, *a)

    monkeypatch.setattr(objects, "sha256_file", refuse)
    problems = _verify(archive).problems
    assert any(
        "batch report of batch 'LW220-0506'" in p and "cannot be read (Permission denied)" in p for p in problems
    )


def test_object_replaced_by_a_folder_is_a_finding(archive):
    (sha,) = query(archive, "SELECT regions_csv_sha256 FROM batches")[0]
    path = archive / "objects" / sha[:2] / sha[2:]
    path.unlink()
    path.mkdir()
    problems = _verify(archive).problems
    assert any("region CSV of batch 'LW220-0506'" in p and "is not a regular file" in p for p in problems), problems


def test_uncatalogued_object_is_named(archive):
    extra = archive / "objects" / "ab" / ("c" * 62)
    extra.parent.mkdir(exist_ok=True)
    extra.write_bytes(b"left behind")
    warnings = _verify(archive).warnings
    assert any(f"objects/ab/{'c' * 62} is not in the file catalogue" in w for w in warnings)


def test_signing_after_the_render_is_bound_by_the_next_head(world):
    root, keys = world
    with arc.Archive(root) as a:
        row = signatures.sign_batch(a, BATCH, keys.person, meaning="examined", render_edition=render)
        events = a.events()
    signed = next(e for e in events if e.kind == "signed" and json.loads(e.details)["signoff_no"] == row.signoff_no)
    after = next(e for e in events if e.seq == signed.seq + 1)
    record = json.loads(after.details)["record"]
    assert (
        after.kind == "head signed"
        and record["events"] == signed.seq
        and record["key_fingerprint"] == keys.person.fingerprint
    )


def test_a_revoked_key_signing_with_a_backdated_time_is_named(world, monkeypatch):
    """A client that ignores the register (simulated) signs after the revocation, dating it before."""
    root, keys = world
    from surfinspect.archive.register import Register

    with arc.Archive(root) as a:
        signatures.revoke_signer(a, keys.owner, keys.person.fingerprint, "key lost")
        enrolled_at = a.register().signers[keys.person.fingerprint].enrolled_at_utc
        monkeypatch.setattr(Register, "require_signer", lambda self, fp, *a, **k: self.signers[fp])
        monkeypatch.setattr(signatures, "time_problem", lambda *a, **k: None)
        monkeypatch.setattr(signatures, "_require_intact", lambda *a: None)
        signatures.sign_batch(
            a, BATCH, keys.person, meaning="released", render_edition=render, signed_at_utc=enrolled_at
        )
    problems = _verify(root).problems
    assert any("sign-off #2" in p and "was not enrolled, or was already revoked, at audit event" in p for p in problems)
    assert any(p.startswith("signed head at audit event") and "or revoked)" in p for p in problems)
    assert any("sign-off #2" in p and "signed_at_utc" in p and "is before" in p for p in problems)


def _dump(index):
    """Every row of every table, as raw values (text as bytes, so damaged text still compares)."""
    db = sqlite3.connect(index)
    db.text_factory = bytes
    try:
        names = [n.decode() for (n,) in db.execute("SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name")]
        return [(n, sorted(db.execute(f"SELECT * FROM {n}").fetchall())) for n in names]
    finally:
        db.close()


def test_random_damage_to_the_index_is_named_or_changes_nothing(_template, tmp_path):
    """A seeded mutator overwrites bytes of the index at random: verify never raises, and whenever it
    finds nothing, every row of every table is still what it was (the bytes hit free space)."""
    import random

    if _template[0].is_postgres:
        pytest.skip("bytes of the SQLite file; on PostgreSQL the server owns the pages")
    rng = random.Random(20261201)
    source = (_template[0] / arc.INDEX_NAME).read_bytes()
    reference = _dump(_template[0] / arc.INDEX_NAME)
    named = 0
    for trial in range(40):
        root = tmp_path / f"t{trial}"
        shutil.copytree(_template[0], root)
        data = bytearray(source)
        for _ in range(rng.choice((1, 8, 64))):
            data[rng.randrange(len(data))] = rng.randrange(256)
        (root / arc.INDEX_NAME).write_bytes(bytes(data))
        report = _verify(root)  # must not raise
        if report.problems:
            named += 1
        else:
            assert _dump(root / arc.INDEX_NAME) == reference, f"trial {trial}: a change verify did not name"
        shutil.rmtree(root)
    assert named > 20  # the mutator does reach the data, not only free space


def test_any_changed_byte_of_a_stored_file_is_named(request, _template, tmp_path):
    import random

    rng = random.Random(7)
    root = _copy(request, _template[0], tmp_path / "a")
    objects = sorted(p for p in (root / "objects").rglob("*") if p.is_file())
    for path in rng.sample(objects, 6):
        data = bytearray(path.read_bytes())
        data[rng.randrange(len(data))] ^= 1 << rng.randrange(8)
        os.chmod(path, 0o644)
        path.write_bytes(bytes(data))
        problems = _verify(root).problems
        rel = str(path.relative_to(root.folder))
        assert any(rel in p and "has changed" in p for p in problems), (rel, problems)
