"""``rejudge``: archived images re-inspected under another recipe revision, locally and on a Dask cluster."""

from __future__ import annotations

import io
import json
import os
import shutil
import signal
import threading
import time
from pathlib import Path

import pytest
from pdfa_checks import assert_pdfa_2b
from pypdf import PdfReader

from surfinspect.archive import store as arc
from surfinspect.archive.schema import TABLES
from surfinspect.cli import main
from surfinspect.station import batch
from surfinspect.station.rejudge import RejudgeConfig, rejudge

PROJECT = Path(__file__).resolve().parents[2]
RECIPE = PROJECT / "recipes" / "lw-220-wall-panel.yaml"
BATCHES = ("LW220-0601", "LW220-0602", "LW220-0603")


@pytest.fixture(scope="module")
def plant(tmp_path_factory):
    """An archive of three batches of the LW-220 demo parts, and a revision 4 of the recipe at 1° tolerance."""
    root = tmp_path_factory.mktemp("plant")
    for n, batch_id in enumerate(BATCHES):
        folder = root / f"in{n}"
        folder.mkdir()
        for p in sorted((PROJECT / "demo_parts").glob("lw-220-*.png")):
            shutil.copy(p, folder / f"{n}-{p.name}")
        config = batch.BatchConfig(recipe_path=RECIPE, folder=folder, archive_dir=root / "archive", batch_id=batch_id)
        batch.run_batch(config)
    tight = root / "lw-220-rev4.yaml"
    text = RECIPE.read_text().replace("revision: 3", "revision: 4").replace("tolerance_deg: 3.0", "tolerance_deg: 1.0")
    tight.write_text(text)
    return root / "archive", tight


@pytest.fixture(scope="module")
def reference(plant, tmp_path_factory):
    """The in-process re-judgement under revision 4 (``--jobs 1``) every other way of running is compared to."""
    root, tight = plant
    out = tmp_path_factory.mktemp("reference")
    code = main(["-q", "rejudge", "--archive", str(root), "--recipe", str(tight), "--jobs", "1", "--out", str(out)])
    return out, code


def _same_as(reference, out) -> None:
    for name in ("rejudge.json", "rejudge.csv"):
        assert (reference[0] / name).read_bytes() == (out / name).read_bytes(), name


def _snapshot(location):
    with arc.Archive(location) as a:
        return {t.name: a.index.select(t.name, order_by=t.primary_key) for t in TABLES}


def _run(plant, out, **kw):
    root, recipe = plant
    return rejudge(RejudgeConfig(archive=str(root), recipe_path=kw.pop("recipe", recipe), out_dir=out, **kw))


def test_the_recorded_recipe_reproduces_every_recorded_result(plant, tmp_path):
    root, _ = plant
    before = _snapshot(root)
    outcome = _run(plant, tmp_path / "same", recipe=RECIPE, jobs=1)
    assert len(outcome.parts) == 15 and outcome.changed == 0
    with arc.Archive(root) as a:
        for p in outcome.parts:
            recorded = a.read_result(a.part(p["batch_id"], p["part_key"]))
            for old, new in zip(recorded["regions"], p["new"]["regions"], strict=True):
                assert (old["name"], old["verdict"], old["lay_deg"]) == (new["name"], new["verdict"], new["lay_deg"])
    assert _snapshot(root) == before  # nothing in the archive changed, not even an event


def test_a_tighter_tolerance_lists_the_parts_that_now_fail(reference):
    out, code = reference
    assert code == 1  # rejected parts under the new recipe
    doc = json.loads((out / "rejudge.json").read_text())
    changed = [(p["batch_id"], p["part_key"]) for p in doc["parts"] if p["changed"]]
    # the demo's accepted panel 0002 lies between 1° and 3° off vertical: it is accepted at 3°, rejected at 1°
    assert changed == [(b, f"{n}-lw-220-0002.png") for n, b in enumerate(BATCHES)]
    assert doc["recipe"]["revision"] == 4
    rows = (out / "rejudge.csv").read_text().splitlines()
    assert len(rows) == 16 and rows[0].startswith("batch_id,part_key,image_sha256,recorded_recipe,recorded_verdict")
    text = "".join(page.extract_text() for page in PdfReader(io.BytesIO((out / "rejudge.pdf").read_bytes())).pages)
    assert "3 change verdict" in text and "0-lw-220-0002.png" in text and "lw-220-wall-panel rev 4" in text
    assert "does not replace" in text.replace("\n", " ")  # the caution
    assert_pdfa_2b((out / "rejudge.pdf").read_bytes())  # archival, as every document the tool writes


def test_batches_are_chosen_by_id_and_date(plant, tmp_path, capsys):
    outcome = _run(plant, tmp_path / "one", batch_ids=(BATCHES[1],), jobs=1)
    assert {p["batch_id"] for p in outcome.parts} == {BATCHES[1]}
    assert _run(plant, tmp_path / "late", batch_ids=(BATCHES[2],), since="2000-01-01", jobs=1).parts
    root, tight = plant
    argv = ["rejudge", "--archive", str(root), "--recipe", str(tight), "--out", str(tmp_path / "x")]
    assert main([*argv, "--since", "2999-01-01"]) == 2
    assert "no inspected part in the batches chosen" in capsys.readouterr().err
    assert main([*argv, "--since", "last tuesday"]) == 2
    assert "--since 'last tuesday': not a date (allowed: YYYY-MM-DD" in capsys.readouterr().err
    assert main([*argv, "--batch-id", "NOPE"]) == 2
    assert "no batch 'NOPE'" in capsys.readouterr().err
    assert not (tmp_path / "x" / "rejudge.json").exists()


def test_two_local_processes_give_the_in_process_result(plant, reference, tmp_path):
    _run(plant, tmp_path / "j2", jobs=2)
    _same_as(reference, tmp_path / "j2")


# ---------------------------------------------------------------------------- on a cluster


@pytest.fixture(scope="module")
def cluster():
    distributed = pytest.importorskip(
        "distributed", reason="Dask distributed is not installed (pip install -e '.[test]')"
    )
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None
    ) as c:
        yield c


@pytest.mark.cluster
def test_a_cluster_gives_the_in_process_result(plant, reference, tmp_path, cluster):
    _run(plant, tmp_path / "dask", scheduler=cluster.scheduler_address)
    _same_as(reference, tmp_path / "dask")


@pytest.mark.cluster
def test_a_worker_killed_mid_run_loses_nothing(plant, reference, tmp_path, cluster):
    from distributed import Client

    done: dict = {}

    def go():
        try:
            done["outcome"] = _run(plant, tmp_path / "dask", scheduler=cluster.scheduler_address)
        except BaseException as exc:  # noqa: BLE001 - reported by the assertion below
            done["error"] = exc

    runner = threading.Thread(target=go)
    with Client(cluster.scheduler_address) as watch:
        pids = watch.run(os.getpid)
        runner.start()
        deadline = time.monotonic() + 60
        busy = []
        while not busy and time.monotonic() < deadline:
            busy = [w for w, tasks in watch.processing().items() if any("rejudge-" in str(k) for k in tasks)]
            time.sleep(0.02)
        assert busy, "no re-judging task ever ran"
        os.kill(pids[busy[0]], signal.SIGKILL)  # the worker process holding a running task
        runner.join(180)
        assert pids[busy[0]] not in watch.run(os.getpid).values()  # the killed worker is gone (its nanny restarts one)
    assert "error" not in done, done.get("error")
    assert len(done["outcome"].parts) == 15
    _same_as(reference, tmp_path / "dask")


@pytest.mark.cluster
def test_a_batch_on_the_cluster_records_what_a_local_batch_records(plant, tmp_path, cluster):
    local = plant[0]  # the plant's batches were run on a local process pool
    folder = local.parent / "in0"
    argv = ["-q", "batch", str(RECIPE), str(folder), "--batch-id", BATCHES[0]]
    assert main([*argv, "--archive", str(tmp_path / "dask"), "--scheduler", cluster.scheduler_address]) == 1
    with arc.Archive(local) as a, arc.Archive(tmp_path / "dask") as b:
        for p, q in zip(a.parts(BATCHES[0]), b.parts(BATCHES[0]), strict=True):
            assert (p.part_key, p.verdict, p.image_sha256) == (q.part_key, q.verdict, q.image_sha256)
            old, new = a.read_result(p), b.read_result(q)
            old.pop("inspected_at"), new.pop("inspected_at")
            assert old == new  # the same result, the station's image path included
    assert main(["-q", "verify", "--archive", str(tmp_path / "dask")]) == 0
