"""HTTP-level tests of every route of the review station (Starlette's test client, no browser)."""

from __future__ import annotations

import re

import pytest
from review_helpers import PASSPHRASE, run_cli
from starlette.testclient import TestClient

from surfinspect.archive import store
from surfinspect.review.app import ReviewConfig, create_app
from surfinspect.review.pages import VERDICT_LOOKS
from surfinspect.review.security import CSRF_FIELD, MAX_BODY_BYTES


def client_for(demo, **kw) -> TestClient:
    config = ReviewConfig(demo.root, key_dir=demo.keys, **kw)
    return TestClient(create_app(config), raise_server_exceptions=False)


def token_of(html: str) -> str:
    return re.search(rf'name="{CSRF_FIELD}" value="([0-9a-f]+)"', html).group(1)


def positions(demo, verdict):
    with store.Archive(demo.root) as arc:
        return [p.position for p in arc.parts(demo.batch_id) if p.verdict == verdict]


@pytest.fixture
def ro(demo_archive):
    with client_for(demo_archive) as c:
        yield c


# ---------------------------------------------------------------- read-only pages


def test_batches_page_lists_the_batch_with_counts_and_sign_off_state(ro, demo_archive):
    r = ro.get("/")
    assert r.status_code == 200
    assert demo_archive.batch_id in r.text and "lw-220-wall-panel rev 3" in r.text
    assert "not signed" in r.text
    # 2 accept, 2 reject, 1 review (the demo scenario; `surfinspect batch` printed the same)
    words = {v: VERDICT_LOOKS[v]["word"] for v in ("accept", "reject", "review")}
    assert f"{words['accept']}</span> 2" in r.text and f"{words['reject']}</span> 2" in r.text
    assert f"{words['review']}</span> 1" in r.text
    assert r.headers["content-security-policy"].startswith("default-src 'self'")


@pytest.mark.parametrize(
    "query, found",
    [
        ("q=lw-220", True),
        ("q=LW-220-demo", True),
        ("q=cp-14", False),
        ("from=2000-01-01", True),
        ("to=2000-01-01", False),
    ],
)
def test_batches_search_by_id_recipe_and_date(ro, demo_archive, query, found):
    r = ro.get(f"/?{query}")
    assert r.status_code == 200
    assert (f'href="/batch/{demo_archive.batch_id}"' in r.text) is found


def test_batch_page_grid_filter_sort_charts_and_downloads(ro, demo_archive):
    b = demo_archive.batch_id
    r = ro.get(f"/batch/{b}")
    assert r.status_code == 200
    assert r.text.count('class="card card-') == 5
    assert "<svg" in r.text and "individuals chart" in r.text and "Cpk" in r.text
    for link in (f"/batch/{b}/report.pdf", f"/batch/{b}/regions.csv"):
        assert link in r.text
    only_rejects = ro.get(f"/batch/{b}?verdict=reject")
    assert only_rejects.text.count('class="card card-reject"') == 2
    assert only_rejects.text.count('class="card card-') == 2
    worst = ro.get(f"/batch/{b}?sort=worst").text
    devs = [float(x) for x in re.findall(r"worst deviation ([0-9.]+) degrees", worst)]
    assert devs == sorted(devs, reverse=True) and len(devs) >= 4


def test_downloads_are_the_archived_objects(ro, demo_archive):
    b = demo_archive.batch_id
    with store.Archive(demo_archive.root) as arc:
        row = arc.batch(b)
        pdf, csv = arc.read_object(row.report_sha256), arc.read_object(row.regions_csv_sha256)
        part = arc.parts(b)[0]
        overlay = arc.read_object(part.overlay_sha256)
    assert ro.get(f"/batch/{b}/report.pdf").content == pdf
    assert ro.get(f"/batch/{b}/regions.csv").content == csv
    assert ro.get(f"/batch/{b}/part/{part.position}/overlay.png").content == overlay
    assert ro.get(f"/batch/{b}/part/{part.position}/result.json").json()["verdict"] == part.verdict
    thumb = ro.get(f"/batch/{b}/part/{part.position}/thumb.png")
    assert thumb.status_code == 200 and thumb.content[:8] == b"\x89PNG\r\n\x1a\n"
    cached = list((demo_archive.root / "review-cache" / "thumbs").rglob(f"{part.overlay_sha256}-w*.png"))
    assert len(cached) == 1 and cached[0].read_bytes() == thumb.content


def test_part_page_shows_regions_rose_patches_and_neighbours(ro, demo_archive):
    b = demo_archive.batch_id
    pos = positions(demo_archive, "reject")[0]
    r = ro.get(f"/batch/{b}/part/{pos}")
    assert r.status_code == 200
    assert 'class="rose"' in r.text and 'class="patch"' in r.text and 'id="patch-mark-1"' in r.text
    assert 'id="prev-part"' in r.text and 'id="next-part"' in r.text
    assert "Record a disposition" in r.text
    accepted = ro.get(f"/batch/{b}/part/{positions(demo_archive, 'accept')[0]}").text
    assert "Record a disposition" not in accepted and "No disposition needed" in accepted


@pytest.mark.parametrize(
    "path",
    [
        "/batch/NO-SUCH-BATCH",
        "/batch/NO-SUCH-BATCH/report.pdf",
        "/batch/LW-220-DEMO/part/999",
        "/batch/LW-220-DEMO/part/999/overlay.png",
        "/batch/LW-220-DEMO/part/-1",
        "/batch/LW-220-DEMO/part/abc",
        "/batch/LW-220-DEMO/signed-1.pdf",
        "/batch/..%2F..%2Fetc%2Fpasswd",
        "/batch/LW-220-DEMO/part/1/..%2F..%2F..%2Findex.sqlite",
        "/static/..%2F..%2Fapp.py",
        "/static/../app.py",
        "/index.sqlite",
        "/objects/",
        "/batch/%00",
    ],
)
def test_unknown_ids_and_traversal_are_404_pages_with_a_sentence(ro, path):
    r = ro.get(path)
    assert r.status_code == 404
    assert "Traceback" not in r.text and '<p class="sentence">' in r.text


def test_a_server_error_is_a_sentence_not_a_traceback(demo_archive, tmp_path):
    demo = demo_archive.copy(tmp_path)
    (demo.root / "index.sqlite").write_bytes(b"not a database at all" * 100)
    with client_for(demo) as c:
        r = c.get("/")
    assert r.status_code == 500
    assert "Traceback" not in r.text and "surfinspect verify" in r.text


# ---------------------------------------------------------------- write actions


def disposition_form(client, demo, pos):
    page = client.get(f"/batch/{demo.batch_id}/part/{pos}").text
    with store.Archive(demo.root) as arc:
        fp = arc.register().entries[-1].key_fingerprint
    return {CSRF_FIELD: token_of(page), "decision": "rework", "comment": "grain runs 8 deg off; rebrush", "key": fp}


def test_disposition_recorded_through_the_archive_and_verify_passes(demo_archive, tmp_path):
    demo = demo_archive.copy(tmp_path)
    pos = positions(demo, "reject")[0]
    with client_for(demo) as c:
        form = disposition_form(c, demo, pos)
        r = c.post(f"/batch/{demo.batch_id}/part/{pos}/disposition", data={**form, "passphrase": PASSPHRASE})
        assert r.status_code == 200 and "Recorded: disposition #1, rework by R. OSTERMANN" in r.text
        assert PASSPHRASE not in r.text
    with store.Archive(demo.root) as arc:
        (d,) = arc.dispositions(demo.batch_id)
    assert (d.decision, d.comment, d.signer_name) == ("rework", "grain runs 8 deg off; rebrush", "R. OSTERMANN")
    assert run_cli(["-q", "verify", "--archive", str(demo.root)]) == 0


@pytest.mark.parametrize(
    "change, message",
    [
        ({"passphrase": "not-the-passphrase"}, "passphrase is wrong"),
        ({"comment": "   "}, "comment: required"),
        ({"decision": "melt-it-down"}, "unknown decision"),
        ({"key": "0" * 64}, "choose a key"),
    ],
)
def test_refused_disposition_records_nothing(demo_archive, tmp_path, change, message):
    demo = demo_archive.copy(tmp_path)
    pos = positions(demo, "reject")[0]
    with store.Archive(demo.root) as arc:
        before = arc.chain_head()
    with client_for(demo) as c:
        form = {**disposition_form(c, demo, pos), "passphrase": PASSPHRASE, **change}
        r = c.post(f"/batch/{demo.batch_id}/part/{pos}/disposition", data=form)
    assert r.status_code == 400 and message in r.text
    assert "not-the-passphrase" not in r.text
    with store.Archive(demo.root) as arc:
        assert arc.chain_head() == before and arc.dispositions(demo.batch_id) == []


def test_an_unenrolled_uploaded_key_is_refused(demo_archive, tmp_path):
    demo = demo_archive.copy(tmp_path)
    pos = positions(demo, "reject")[0]
    stranger = tmp_path / "stranger.key"
    assert run_cli(["-q", "keygen", "--out", str(stranger), "--passphrase-env", "P"], env={"P": "x" * 12}) == 0
    with client_for(demo) as c:
        form = {**disposition_form(c, demo, pos), "key": "", "passphrase": "x" * 12}
        r = c.post(
            f"/batch/{demo.batch_id}/part/{pos}/disposition",
            data=form,
            files={"key_file": ("stranger.key", stranger.read_bytes())},
        )
    assert r.status_code == 400 and "not enrolled" in r.text
    with store.Archive(demo.root) as arc:
        assert arc.dispositions(demo.batch_id) == []


@pytest.mark.parametrize("token", [None, "", "0" * 64, "forged"])
def test_a_post_without_a_valid_csrf_token_is_refused(demo_archive, tmp_path, token):
    demo = demo_archive.copy(tmp_path)
    pos = positions(demo, "reject")[0]
    with store.Archive(demo.root) as arc:
        before = arc.chain_head()
    with client_for(demo) as c:
        form = {**disposition_form(c, demo, pos), "passphrase": PASSPHRASE}
        form.pop(CSRF_FIELD)
        if token is not None:
            form[CSRF_FIELD] = token
        r1 = c.post(f"/batch/{demo.batch_id}/part/{pos}/disposition", data=form)
        r2 = c.post(f"/batch/{demo.batch_id}/signoff", data={**form, "meaning": "released"})
    for r in (r1, r2):
        assert r.status_code == 403 and "did not come from this station" in r.text
    with store.Archive(demo.root) as arc:
        assert arc.chain_head() == before


def test_a_token_from_another_session_is_refused(demo_archive, tmp_path):
    demo = demo_archive.copy(tmp_path)
    pos = positions(demo, "reject")[0]
    with client_for(demo) as a, client_for(demo) as b:
        form = {**disposition_form(a, demo, pos), "passphrase": PASSPHRASE}
        b.get("/")  # b has its own session cookie; a's token does not belong to it
        r = b.post(f"/batch/{demo.batch_id}/part/{pos}/disposition", data=form)
    assert r.status_code == 403


def test_sign_off_from_the_page_is_the_sign_command(demo_archive, tmp_path):
    demo = demo_archive.copy(tmp_path)
    with client_for(demo) as c:
        page = c.get(f"/batch/{demo.batch_id}").text
        fp = re.search(r'<option value="([0-9a-f]{64})"', page).group(1)
        form = {CSRF_FIELD: token_of(page), "meaning": "withheld", "comment": "two rejects to rework", "key": fp}
        wrong = c.post(f"/batch/{demo.batch_id}/signoff", data={**form, "passphrase": "wrong"})
        assert wrong.status_code == 400 and "passphrase is wrong" in wrong.text
        with store.Archive(demo.root) as arc:
            assert arc.signoffs(demo.batch_id) == []
        r = c.post(f"/batch/{demo.batch_id}/signoff", data={**form, "passphrase": PASSPHRASE})
        assert r.status_code == 200 and "Recorded: sign-off #1, withheld by R. OSTERMANN" in r.text
        assert c.get(f"/batch/{demo.batch_id}/signed-1.pdf").content[:5] == b"%PDF-"
        assert "withheld</span> by R. OSTERMANN" in c.get("/").text
    with store.Archive(demo.root) as arc:
        (s,) = arc.signoffs(demo.batch_id)
        assert (s.meaning, s.comment) == ("withheld", "two rejects to rework")


def test_read_only_station_offers_no_forms_and_refuses_posts(demo_archive):
    with client_for(demo_archive, read_only=True) as c:
        pos = positions(demo_archive, "reject")[0]
        page = c.get(f"/batch/{demo_archive.batch_id}/part/{pos}").text
        assert '<form method="post"' not in page
        r = c.post(f"/batch/{demo_archive.batch_id}/part/{pos}/disposition", data={"decision": "scrap"})
    assert r.status_code == 403 and "read-only" in r.text


def test_request_size_limits(ro, demo_archive):
    b = demo_archive.batch_id
    big = ro.post(f"/batch/{b}/signoff", content=b"x" * (MAX_BODY_BYTES + 1), headers={"content-type": "text/plain"})
    assert big.status_code == 413

    def chunks():  # no declared length: cut off while streaming
        for _ in range(MAX_BODY_BYTES // 4096 + 2):
            yield b"y" * 4096

    streamed = ro.post(f"/batch/{b}/signoff", content=chunks(), headers={"content-type": "text/plain"})
    assert streamed.status_code == 413


def test_methods_not_allowed_are_pages(ro, demo_archive):
    r = ro.post(f"/batch/{demo_archive.batch_id}")
    assert r.status_code == 405 and "Traceback" not in r.text


def test_is_loopback():
    from surfinspect.review.server import is_loopback

    assert all(is_loopback(h) for h in ("127.0.0.1", "127.1.2.3", "::1", "localhost"))
    assert not any(is_loopback(h) for h in ("0.0.0.0", "192.168.1.20", "::", "station-7"))


def test_cli_refuses_a_folder_that_is_not_an_archive(tmp_path, capsys):
    from surfinspect.cli.main import main

    assert main(["review", "--archive", str(tmp_path / "none")]) == 2
    assert "not a surfinspect archive" in capsys.readouterr().err
    assert main(["review", "--archive", str(tmp_path), "--port", "0"]) == 2


def test_failed_key_attempts_are_throttled_per_address(demo_archive, tmp_path):
    demo = demo_archive.copy(tmp_path)
    pos = positions(demo, "reject")[0]
    with client_for(demo) as c:
        form = {**disposition_form(c, demo, pos), "passphrase": "guess"}
        codes = [c.post(f"/batch/{demo.batch_id}/part/{pos}/disposition", data=form).status_code for _ in range(6)]
        right = c.post(f"/batch/{demo.batch_id}/part/{pos}/disposition", data={**form, "passphrase": PASSPHRASE})
    assert codes == [400] * 5 + [429]
    assert right.status_code == 429  # even the right passphrase waits out the window
    with store.Archive(demo.root) as arc:
        assert arc.dispositions(demo.batch_id) == []


def test_throttle_window_expires():
    from surfinspect.review.security import FailureThrottle

    now = [0.0]
    t = FailureThrottle(limit=2, window_s=10.0, clock=lambda: now[0])
    t.failed("a")
    t.failed("a")
    assert t.blocked("a") and not t.blocked("b")
    now[0] = 10.5
    assert not t.blocked("a")


def test_on_another_address_the_key_folder_is_not_offered(demo_archive, tmp_path):
    demo = demo_archive.copy(tmp_path)
    pos = positions(demo, "reject")[0]
    with client_for(demo, remote=True) as c:
        page = c.get(f"/batch/{demo.batch_id}/part/{pos}").text
        assert 'name="key_file"' in page and "<select" not in page
        form = {**disposition_form(c, demo, pos), "passphrase": PASSPHRASE}  # a folder key's fingerprint
        r = c.post(f"/batch/{demo.batch_id}/part/{pos}/disposition", data=form)
        assert r.status_code == 400 and "upload your key file" in r.text
        uploaded = c.post(
            f"/batch/{demo.batch_id}/part/{pos}/disposition",
            data={**form, "key": ""},
            files={"key_file": ("inspector.key", (demo.keys / "inspector.key").read_bytes())},
        )
    assert uploaded.status_code == 200 and "Recorded: disposition #1" in uploaded.text


def test_the_review_command_serves_and_stops_on_ctrl_c(demo_archive):
    import os
    import signal
    import subprocess
    import sys
    import time
    import urllib.request

    from browser_helpers import free_port

    port = free_port()
    cmd = [sys.executable, "-m", "surfinspect", "review", "--archive", str(demo_archive.root), "--port", str(port)]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, env={**os.environ})
    try:
        deadline, page = time.monotonic() + 60, None
        while page is None and time.monotonic() < deadline and proc.poll() is None:
            try:
                page = urllib.request.urlopen(f"http://127.0.0.1:{port}/", timeout=5).read().decode()
            except OSError:
                time.sleep(0.2)
        assert page is not None and demo_archive.batch_id in page
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=20)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    assert proc.returncode == 0, err
    assert f"http://127.0.0.1:{port}/" in out.decode()


def test_a_part_that_could_not_be_inspected_is_shown_and_can_be_disposed_of(tmp_path):
    from review_helpers import ROOT

    images = tmp_path / "in"
    images.mkdir()
    (images / "lw-220-0001.png").write_bytes((ROOT / "demo_parts" / "lw-220-0001.png").read_bytes())
    (images / "lw-220-0009.png").write_bytes(b"\x89PNG\r\n\x1a\n not really a picture")
    root = tmp_path / "archive"
    recipe = str(ROOT / "recipes" / "lw-220-wall-panel.yaml")
    assert run_cli(["-q", "batch", recipe, str(images), "--archive", str(root), "--batch-id", "B2", "--jobs", "1"]) == 3
    with TestClient(create_app(ReviewConfig(root)), raise_server_exceptions=False) as c:
        batch = c.get("/batch/B2")
        assert batch.status_code == 200 and 'class="card card-not-inspected"' in batch.text
        assert f"{VERDICT_LOOKS['not-inspected']['word']}</span> 1" in c.get("/").text
        with store.Archive(root) as arc:
            pos = next(p.position for p in arc.parts("B2") if p.image_sha256 and p.overlay_sha256 is None)
        part = c.get(f"/batch/B2/part/{pos}")
        assert part.status_code == 200 and "could not be inspected" in part.text and "Record a disposition" in part.text
        assert c.get(f"/batch/B2/part/{pos}/thumb.png").status_code == 404


@pytest.fixture(scope="module")
def crossed_archive(tmp_path_factory):
    """One cross-brushed part (families at 30 and 120 deg) in an archive made by `surfinspect batch`."""
    import cv2

    from surfinspect.measure import synth

    base = tmp_path_factory.mktemp("crossed")
    (base / "images").mkdir()
    tex = synth.brushed_texture((320, 320), 30.0, seed=1) + synth.brushed_texture((320, 320), 120.0, seed=2)
    cv2.imwrite(str(base / "images" / "xb-0001.png"), synth.to_uint8(synth.shade_and_noise(tex / tex.std(), seed=3)))
    recipe = base / "xb.yaml"
    recipe.write_text(
        "recipe: xb-cross-brushed\nrevision: 1\nregions:\n  - name: face\n    rect: [10, 10, 300, 300]\n"
        "    lay: crossed\n    lay_deg: [30, 120]\n    tolerance_deg: 3\n"
    )
    args = ["-q", "batch", str(recipe), str(base / "images"), "--archive", str(base / "archive"), "--batch-id", "XB"]
    assert run_cli(args) == 0
    return base / "archive"


def test_a_crossed_region_shows_its_angular_spectrum_as_the_report_does(crossed_archive):
    from surfinspect.report.rose import spectrum_caption

    with TestClient(create_app(ReviewConfig(crossed_archive)), raise_server_exceptions=False) as c:
        page = c.get("/batch/XB/part/0")
    assert page.status_code == 200
    assert page.text.count('class="rose"') == 2  # the histogram's rose and the spectrum's
    assert 'class="rose-box spectrum"' in page.text
    with store.Archive(crossed_archive) as arc:
        region = arc.read_result(arc.parts("XB")[0])["regions"][0]
    for line in spectrum_caption(region):  # the report's caption, word for word (HTML-escaped)
        assert line.replace("±", "&#177;") in page.text or line in page.text
    assert page.text.count('class="rose-measured"') == 2  # both directions found
