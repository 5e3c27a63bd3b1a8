"""A plant: four stations recording batches of the demo parts into one PostgreSQL archive at once."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from surfinspect.archive import store as arc
from surfinspect.cli import main

pytestmark = pytest.mark.postgres

PROJECT = Path(__file__).resolve().parents[2]
RECIPE = PROJECT / "recipes" / "lw-220-wall-panel.yaml"


def test_four_stations_write_one_archive_at_once(tmp_path, pg_server, pg_database, capsys):
    parts = sorted((PROJECT / "demo_parts").glob("lw-220-*.png"))
    url = pg_server.archive_url(pg_database, tmp_path / "objects")
    stations = []
    for n in range(4):
        folder = tmp_path / f"station-{n}"
        folder.mkdir()
        for p in parts:
            shutil.copy(p, folder / p.name)
        argv = [sys.executable, "-m", "surfinspect", "-q", "batch", str(RECIPE), str(folder)]
        argv += ["--archive", url, "--batch-id", f"LINE{n}-0601", "--jobs", "1", "--operator", f"STATION {n}"]
        stations.append(subprocess.Popen(argv, stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=dict(os.environ)))
    # communicate() drains both pipes; stdout is kept in the message too, should a station exit 2 once more
    outcomes = [
        (s.returncode, err.decode(), out.decode()) for s in stations for out, err in [s.communicate(timeout=240)]
    ]
    # the demo lot holds rejected parts: exit 1 is the judged outcome, not a failure
    assert [code for code, *_ in outcomes] == [1, 1, 1, 1], outcomes
    with arc.Archive(url) as a:
        assert sorted(b.batch_id for b in a.batches()) == [f"LINE{n}-0601" for n in range(4)]
        assert all(b.is_finished for b in a.batches())
        inspected = [(e.batch_id, e.part_key) for e in a.events() if e.kind == "part inspected"]
        seqs = [e.seq for e in a.events()]
    assert sorted(inspected) == sorted({(f"LINE{n}-0601", p.name) for n in range(4) for p in parts})  # once each
    assert seqs == list(range(1, len(seqs) + 1))
    assert main(["-q", "verify", "--archive", url]) == 0
    # a fifth station reusing a batch id with other images is refused in one line, nothing written
    other = tmp_path / "other"
    other.mkdir()
    shutil.copy(parts[0], other / parts[0].name)
    capsys.readouterr()
    assert main(["-q", "batch", str(RECIPE), str(other), "--archive", url, "--batch-id", "LINE0-0601"]) == 2
    assert "holds other images" in capsys.readouterr().err
    with arc.Archive(url) as a:
        assert [e.seq for e in a.events()][-1] == seqs[-1] + 1  # only the verified event since
