"""The review station over a PostgreSQL archive: a disposition and a sign-off through HTTP, then verify."""

from __future__ import annotations

import re

import pytest
from review_helpers import PASSPHRASE, run_cli
from starlette.testclient import TestClient

from surfinspect.archive.location import open_archive
from surfinspect.review.app import ReviewConfig, create_app
from surfinspect.review.security import CSRF_FIELD

pytestmark = pytest.mark.postgres


def _token(html: str) -> str:
    return re.search(rf'name="{CSRF_FIELD}" value="([0-9a-f]+)"', html).group(1)


def test_station_records_a_disposition_and_a_sign_off_in_a_postgresql_archive(
    demo_archive, tmp_path, pg_server, pg_database
):
    url = pg_server.archive_url(pg_database, tmp_path / "objects")
    assert run_cli(["-q", "archive", "copy", "--from", str(demo_archive.root), "--to", url]) == 0
    with open_archive(url) as arc:
        pos = next(p.position for p in arc.parts(demo_archive.batch_id) if p.verdict == "reject")
        fp = arc.register().entries[-1].key_fingerprint
    batch = f"/batch/{demo_archive.batch_id}"
    with TestClient(create_app(ReviewConfig(url, key_dir=demo_archive.keys)), raise_server_exceptions=False) as c:
        assert c.get("/").status_code == 200 and demo_archive.batch_id in c.get("/").text
        page = c.get(f"{batch}/part/{pos}").text
        form = {CSRF_FIELD: _token(page), "key": fp, "passphrase": PASSPHRASE}
        r = c.post(f"{batch}/part/{pos}/disposition", data={**form, "decision": "scrap", "comment": "dent at the edge"})
        assert r.status_code == 200 and "Recorded: disposition #1, scrap by R. OSTERMANN" in r.text
        form[CSRF_FIELD] = _token(c.get(batch).text)
        r = c.post(f"{batch}/signoff", data={**form, "meaning": "released", "comment": "one part scrapped"})
        assert r.status_code == 200 and "Recorded: sign-off #1, released by R. OSTERMANN" in r.text
        assert c.get(f"{batch}/signed-1.pdf").content[:5] == b"%PDF-"
    with open_archive(url) as arc:
        (d,) = arc.dispositions(demo_archive.batch_id)
        (s,) = arc.signoffs(demo_archive.batch_id)
    assert (d.decision, d.comment, s.meaning) == ("scrap", "dent at the edge", "released")
    assert run_cli(["-q", "verify", "--archive", url]) == 0
