"""Report editions in the archive: re-inspected parts recorded at once, earlier signed acts checked as they were."""

from __future__ import annotations

import hashlib

import pytest
from archive_helpers import BACKENDS, BATCH, PARTS, full_archive, region, result_json, site_for, sql

from surfinspect import results
from surfinspect.archive import signatures
from surfinspect.archive import store as arc
from surfinspect.archive.editions import Retried, batch_state_at, edition_events
from surfinspect.archive.verify import verify_archive
from surfinspect.errors import InputError

PASS = results.RegionVerdict.PASS


def _retried(tmp_path) -> Retried:
    """The batch's last part (recorded as not inspected) with a hand-made accepted result for the same image."""
    image = tmp_path / "in" / PARTS[-1]
    recipe_sha = hashlib.sha256((tmp_path / "lw-220.yaml").read_bytes()).hexdigest()
    body = result_json(image, recipe_sha, [region("face", PASS, 90.2), region("edge", PASS, 89.9)])
    return Retried(PARTS[-1], image, hashlib.sha256(image.read_bytes()).hexdigest(), body, b"png of retried part")


def _retry(root, part, station_key=None):
    with arc.Archive(root) as a:
        return a.retry_parts(
            BATCH,
            [part],
            report_pdf=b"%PDF report, edition 2",
            regions_csv=b"csv, edition 2\n",
            report_generated_at=arc.utc_now(),
            station_key=station_key,
        )


@pytest.mark.parametrize("backend", BACKENDS)
def test_earlier_sign_off_and_disposition_stay_valid_for_what_they_were_made_for(request, tmp_path, backend):
    root, keys = full_archive(tmp_path, root=site_for(request, tmp_path / "archive", backend))
    with arc.Archive(root) as a:  # a disposition for the part not inspected, before it is re-inspected
        signatures.record_disposition(a, BATCH, PARTS[-1], keys.person, decision="re-inspect", comment="copy again")
        first = a.batch(BATCH)
        content_then = a.batch_content_sha256(BATCH)
        seq_then = a.chain_head()[0] + 1
    batch = _retry(root, _retried(tmp_path), station_key=keys.station)
    assert batch.report_sha256 != first.report_sha256 and batch.is_finished
    with arc.Archive(root) as a:
        events = a.events()
        assert a.part(BATCH, PARTS[-1]).verdict == "accept"
        assert a.regions(BATCH, PARTS[-1]) != []
        then = batch_state_at(events, BATCH, seq_then)
        assert len(edition_events(events, BATCH)) == 2
    # the replay gives the batch as the first edition had it: the hash its sign-off signed
    assert then.content_sha256 == content_then and then.batch["report_sha256"] == first.report_sha256
    report = verify_archive(root)
    assert report.problems == []
    assert any("signed report edition 1; the batch has a newer edition 2" in w for w in report.warnings)
    assert any("made for the part's earlier result; the part was re-inspected since" in w for w in report.warnings)
    assert not any("without a station key" in w for w in report.warnings)  # the edition's head is signed


def test_an_edited_earlier_edition_is_named(tmp_path):
    root, _ = full_archive(tmp_path, disposition=False)
    _retry(root, _retried(tmp_path))
    # the batch row of edition 1, as its event recorded it, changed behind the chain's back
    sql(root, "UPDATE events SET details = replace(details, 'K. LINDQVIST', 'X') WHERE kind = 'batch started'")
    problems = verify_archive(root).problems
    assert any("(batch started) does not match its own hash" in p for p in problems), problems


def test_only_parts_recorded_as_not_inspected_are_re_inspected(tmp_path):
    root, _ = full_archive(tmp_path, signoff=False, disposition=False)
    part = _retried(tmp_path)
    _retry(root, part)
    with arc.Archive(root) as a:
        head = a.chain_head()
    with pytest.raises(InputError, match=r"is recorded as 'accept', not as not inspected"):
        _retry(root, part)
    with arc.Archive(root) as a:
        assert a.chain_head() == head  # the refused retry wrote nothing
