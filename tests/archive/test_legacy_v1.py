"""Archives of the first format stay checkable, read-only, by that format's rules.

``data/format-1`` holds what the first release's archive code wrote (a batch of two parts and
one sign-off meaning "approved"), rebuilt deterministically by ``data/make_format_1.py``; the tests
copy it before changing anything.
"""

from __future__ import annotations

import json
import shutil
import sqlite3
from pathlib import Path

import pytest

from surfinspect.archive import store
from surfinspect.archive.legacy_v1 import FORMAT_1, format_of
from surfinspect.archive.verify import verify_archive
from surfinspect.cli import main
from surfinspect.errors import InputError

DATA = Path(__file__).parent / "data" / "format-1"


@pytest.fixture
def old(tmp_path):
    root = tmp_path / "format-1"
    shutil.copytree(DATA, root)
    return root


def _tree(root):
    return sorted((str(p.relative_to(root)), p.read_bytes()) for p in root.rglob("*") if p.is_file())


def test_first_format_archive_verifies_read_only_with_a_warning(old, capsys):
    assert format_of(old) == FORMAT_1
    before = _tree(old)
    report = verify_archive(old)
    assert report.problems == [] and "archive of the first format" in report.warnings[0]
    assert main(["verify", "--archive", str(old)]) == 0
    out = capsys.readouterr()
    assert "intact (every batch; first format, read only)" in out.out and "no signer register" in out.err
    assert _tree(old) == before  # nothing written, not even a 'verified' event
    assert main(["verify", "--archive", str(old), "--export-anchor", str(old.parent / "a.json")]) == 2


@pytest.mark.parametrize(
    "statement, says",
    [
        (
            "UPDATE parts SET verdict = 'accept' WHERE part_key = 'LW-220-002.png'",
            "is not the one the audit trail recorded",
        ),
        ("UPDATE regions SET verdict = 'pass'", "the index differs from the stored (signed) result"),
        (
            "UPDATE signatures SET meaning = 'rejected'",
            "the index shows meaning 'rejected', the signed record says 'approved'",
        ),
        ("DELETE FROM events WHERE seq = 2", "audit trail: event(s) 2–2 are missing"),
        ("DELETE FROM signatures", "is missing from the index"),
    ],
)
def test_first_format_tampering_is_named(old, statement, says):
    db = sqlite3.connect(old / "index.sqlite")
    with db:
        db.execute(statement)
    db.close()
    problems = verify_archive(old).problems
    assert any(says in p for p in problems), problems
    assert main(["-q", "verify", "--archive", str(old)]) == 1


def test_nothing_new_is_written_into_a_first_format_archive(old):
    with pytest.raises(
        InputError, match=r"meta\.format: an archive of the first format .* reads 'surfinspect\.archive/2' only"
    ):
        store.Archive(old)
    assert main(["-q", "signers", "list", "--archive", str(old)]) == 2


def test_the_fixture_is_what_its_generator_writes_and_holds_no_absolute_path(tmp_path):
    # data/make_format_1.py rebuilds data/format-1 from fixed values; compared row by row (the SQLite file's
    # bytes may differ between SQLite versions) and object by object
    import importlib.util

    spec = importlib.util.spec_from_file_location("make_format_1", DATA.parent / "make_format_1.py")
    maker = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(maker)
    maker.build(tmp_path / "rebuilt")

    def content(root):
        db = sqlite3.connect(root / "index.sqlite")
        tables = [r[0] for r in db.execute("SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name")]
        rows = {t: sorted(db.execute(f"SELECT * FROM {t}").fetchall(), key=repr) for t in tables}
        db.close()
        return rows, [(p, b) for p, b in _tree(root) if p.startswith("objects")]

    assert content(tmp_path / "rebuilt") == content(DATA)
    stored = [json.loads(b) for p, b in _tree(DATA) if b.startswith(b"{")]
    paths = [doc["image"]["path"] for doc in stored if "image" in doc]
    assert len(paths) == 2 and all(not p.startswith("/") for p in paths), paths
