"""Tests for the line station (surfinspect.station.watch and ``surfinspect watch``).

Parts come from the bundled demo images (demo_parts/, made by surfinspect.measure.synth with fixed
seeds). Every process, observer and server a test starts is stopped by that test; every wait is
bounded.
"""

from __future__ import annotations

import asyncio
import errno
import hashlib
import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import threading
import time
from datetime import datetime, timezone
from pathlib import Path

import pytest

from surfinspect.archive import store as arc
from surfinspect.archive.verify import verify, verify_archive
from surfinspect.cli import main
from surfinspect.errors import InputError
from surfinspect.station import batch, spool, watch
from surfinspect.station.opcua import NAMESPACE_URI

ROOT = Path(__file__).resolve().parents[2]
RECIPE = ROOT / "recipes" / "lw-220-wall-panel.yaml"
DEMO = sorted((ROOT / "demo_parts").glob("lw-220-*.png"))
VERDICTS = {"lw-220-0001": "accept", "lw-220-0002": "accept", "lw-220-0003": "reject"}
VERDICTS |= {"lw-220-0004": "reject", "lw-220-0005": "review"}
TIMEOUT_S = 60.0

pytestmark = pytest.mark.line


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _console_script() -> list[str]:
    script = Path(sys.executable).with_name("surfinspect")
    return [str(script)] if script.exists() else [sys.executable, "-m", "surfinspect"]


def drop_parts(folder: Path, names_sources, *, interval_s: float = 0.5, chunked=lambda i: i % 3 == 1):
    """Write each (name, source) into ``folder`` every ``interval_s``: renamed in, or slowly in chunks.

    A chunked part is written through one open handle in 4 pieces 60 ms apart (flushed each time),
    so that it sits in the folder incomplete for a while; the others are written under a hidden
    name and renamed in (the usual camera hand-over).
    """
    for i, (name, source) in enumerate(names_sources):
        data = source.read_bytes()
        target = folder / name
        if chunked(i):
            with open(target, "wb") as fh:
                step = len(data) // 4 + 1
                for k in range(0, len(data), step):
                    fh.write(data[k : k + step])
                    fh.flush()
                    time.sleep(0.06)
        else:
            tmp = folder / f".{name}.part"
            tmp.write_bytes(data)
            os.rename(tmp, target)
        time.sleep(interval_s)


def _parts_plan(count: int):
    return [(f"P{i:03d}-{DEMO[i % len(DEMO)].stem}.png", DEMO[i % len(DEMO)]) for i in range(count)]


def _expected_verdict(name: str) -> str:
    return VERDICTS[name.split("-", 1)[1].removesuffix(".png")]


class StationProcess:
    """``surfinspect watch`` as a subprocess; stdout lines collected by a thread."""

    def __init__(self, args: list[str]):
        self.proc = subprocess.Popen(
            _console_script() + ["watch", *args],
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        self.lines: list[dict] = []
        self._reader = threading.Thread(target=self._read, daemon=True)
        self._reader.start()

    def _read(self) -> None:
        for line in self.proc.stdout:
            self.lines.append(json.loads(line))

    def wait_for_lines(self, n: int, timeout: float = TIMEOUT_S) -> None:
        end = time.monotonic() + timeout
        while len(self.lines) < n:
            assert self.proc.poll() is None or len(self.lines) >= n, self.proc.stderr.read()
            assert time.monotonic() < end, f"only {len(self.lines)} of {n} parts judged in {timeout} s"
            time.sleep(0.05)

    def finish(self, timeout: float = TIMEOUT_S) -> tuple[int, str]:
        rc = self.proc.wait(timeout)
        self._reader.join(5)
        return rc, self.proc.stderr.read()

    def kill(self) -> None:
        if self.proc.poll() is None:
            self.proc.kill()
        self.proc.wait(10)
        self._reader.join(5)
        self.proc.stdout.close()
        self.proc.stderr.close()


@pytest.fixture
def station_processes():
    started: list[StationProcess] = []

    def start(args):
        started.append(StationProcess([str(a) for a in args]))
        return started[-1]

    yield start
    for p in started:
        p.kill()


class VerdictClient:
    """An asyncua client in its own thread, subscribed to LastPart.Verdict and Heartbeat."""

    def __init__(self, url: str):
        self.url = url
        self.verdicts: list[str] = []
        self.heartbeats: list[int] = []
        self.written_at: list = []  # server-side source timestamps of the verdict writes
        self.states: list[str] = []
        self.ready = threading.Event()
        self._stop = threading.Event()
        self.error: BaseException | None = None
        self._thread = threading.Thread(target=lambda: asyncio.run(self._main()), daemon=True)

    async def _main(self) -> None:
        from asyncua import Client, ua

        client = self

        class Handler:
            def datachange_notification(self, node, value, data):
                name = node.nodeid.Identifier.rsplit(".", 1)[-1]
                if name == "Verdict" and value:
                    client.verdicts.append(value)
                    client.written_at.append(data.monitored_item.Value.SourceTimestamp)
                elif name == "Heartbeat":
                    client.heartbeats.append(value)
                elif name == "State":
                    client.states.append(value)

        try:
            deadline = time.monotonic() + TIMEOUT_S
            while True:  # the station needs a few seconds to bring its server up
                try:
                    async with Client(self.url, timeout=5) as c:
                        ns = await c.get_namespace_index(NAMESPACE_URI)
                        verdict = c.get_node(ua.NodeId("LayStation.LastPart.Verdict", ns))
                        beat = c.get_node(ua.NodeId("LayStation.Heartbeat", ns))
                        state = c.get_node(ua.NodeId("LayStation.State", ns))
                        sub = await c.create_subscription(10, Handler())
                        # every write counts, also the same verdict twice in a row (trigger on the timestamp)
                        trigger = ua.DataChangeFilter(Trigger=ua.DataChangeTrigger.StatusValueTimestamp)
                        await sub._subscribe([verdict], mfilter=trigger, queuesize=100)
                        await sub.subscribe_data_change([beat, state])
                        self.ready.set()
                        while not self._stop.is_set():
                            await asyncio.sleep(0.05)
                        return
                except Exception:
                    if self._stop.is_set():
                        return  # the station stopped its server first
                    if time.monotonic() > deadline or self.ready.is_set():
                        raise
                    await asyncio.sleep(0.2)
        except BaseException as exc:  # reported by the test
            self.error = exc
            self.ready.set()

    def start(self) -> None:
        self._thread.start()
        assert self.ready.wait(TIMEOUT_S), "no OPC UA connection"
        assert self.error is None, self.error

    def stop(self) -> None:
        self._stop.set()
        self._thread.join(15)


def test_line_run_publishes_every_part_once_in_order_and_archives_it_as_batch_would(tmp_path, station_processes):
    folder, archive = tmp_path / "camera", tmp_path / "archive"
    folder.mkdir()
    port = _free_port()
    plan = _parts_plan(8)
    station = station_processes(
        [RECIPE, folder, "--archive", archive, "--batch-id", "LINE-1", "--opcua", f"tcp://127.0.0.1:{port}"]
    )
    client = VerdictClient(f"opc.tcp://127.0.0.1:{port}/surfinspect/")
    client.start()
    try:
        writer = threading.Thread(target=drop_parts, args=(folder, plan))  # 2 parts/s
        writer.start()
        writer.join(TIMEOUT_S)
        station.wait_for_lines(len(plan))
        time.sleep(0.3)  # the last notification's publishing interval
        station.proc.send_signal(signal.SIGTERM)
        rc, err = station.finish()
    finally:
        client.stop()
    assert client.error is None
    assert client.states[0] == "watching" and client.states[-1] == "closing"
    assert rc == 1, err  # the batch holds rejects: the exit code of `batch`
    assert not (archive / "watch").exists()  # the journal went once the archive held the batch
    lines = station.lines
    # every image judged exactly once, never while incomplete: the hash is the finished file's
    assert sorted(line["part"] for line in lines) == sorted(name for name, _ in plan)
    for line in lines:
        assert line["image_sha256"] == _sha(folder / line["part"])
        assert line["verdict"] == _expected_verdict(line["part"])
        assert line["code"] == {"accept": 0, "reject": 1, "review": 3}[line["verdict"]]
        assert line["latency_ms"] > 0
    # the controller saw each part's verdict, in the order the station judged them
    assert client.verdicts == [line["verdict"] for line in lines]
    for line, written in zip(lines, client.written_at):  # the OPC UA value is set within 100 ms of the verdict
        judged = datetime.fromisoformat(line["judged_at"].replace("Z", "+00:00"))
        assert 0 <= (written.replace(tzinfo=timezone.utc) - judged).total_seconds() < 0.1
    assert len(client.heartbeats) >= 2 and client.heartbeats == sorted(client.heartbeats)
    with arc.Archive(archive) as a:
        rows = a.parts("LINE-1")
        assert [(p.part_key, p.image_sha256, p.verdict) for p in rows] == [
            (line["part"], line["image_sha256"], line["verdict"]) for line in lines
        ]
        stored = {p.part_key: a.read_result(p) for p in rows}
        assert a.batch("LINE-1").report_sha256 and a.batch("LINE-1").regions_csv_sha256
    for line in lines:
        regions = [
            {k: r[k] for k in ("name", "lay_deg", "deviation_deg", "verdict")} for r in stored[line["part"]]["regions"]
        ]
        assert line["regions"] == regions
    verify = subprocess.run(_console_script() + ["verify", "--archive", str(archive)], capture_output=True, timeout=60)
    assert verify.returncode == 0, verify.stdout
    # `batch` over the same files puts the same results and overlays into its archive
    other = tmp_path / "batch-archive"
    assert batch.run_batch(batch.BatchConfig(RECIPE, folder, other, "LINE-1", jobs=1)).exit_code == 1
    with arc.Archive(archive) as a, arc.Archive(other) as b:
        ours = {p.part_key: p for p in a.parts("LINE-1")}
        for p in b.parts("LINE-1"):
            mine, theirs = a.read_result(ours[p.part_key]), b.read_result(p)
            mine.pop("inspected_at"), theirs.pop("inspected_at")
            assert mine == theirs
            assert a.read_object(ours[p.part_key].overlay_sha256) == b.read_object(p.overlay_sha256)


def test_killed_station_restarts_without_losing_or_repeating_a_part(tmp_path, station_processes):
    folder, archive = tmp_path / "camera", tmp_path / "archive"
    folder.mkdir()
    plan = _parts_plan(8)
    args = [RECIPE, folder, "--archive", archive, "--batch-id", "LINE-2", "--settle", "0.3"]
    first = station_processes(args)
    drop_parts(folder, plan[:4], interval_s=0.3)
    first.wait_for_lines(2)
    first.proc.send_signal(signal.SIGKILL)
    first.kill()
    recorded_before = {p.part_key for p in spool.Spool(archive, "LINE-2", _recipe_sha()).parts()}
    drop_parts(folder, plan[4:], interval_s=0.1)  # while the station is down
    second = station_processes(args + ["--stop-after", len(plan)])
    rc, err = second.finish()
    assert rc == 1, err
    with arc.Archive(archive) as a:
        keys = [p.part_key for p in a.parts("LINE-2")]
        assert a.batch("LINE-2").is_finished
    assert sorted(keys) == sorted(name for name, _ in plan)  # nothing lost, nothing twice
    # the restart judges exactly what was not recorded before the kill: the parts dropped while it was
    # down, and those whose verdict was out but whose record was not yet on disk (published again)
    again = [line["part"] for line in second.lines]
    assert len(again) == len(set(again)) and set(again) == set(keys) - recorded_before
    assert {line["part"] for line in first.lines} >= recorded_before
    assert verify(archive) == []


def _in_process(tmp_path, **changes) -> tuple[watch.Station, list, list]:
    folder = tmp_path / "camera"
    folder.mkdir(exist_ok=True)
    fields = dict(recipe_path=RECIPE, folder=folder, archive_dir=tmp_path / "archive", batch_id="LINE-3", settle_s=0.2)
    fields.update(changes)
    judged, warnings = [], []
    station = watch.Station(
        watch.WatchConfig(**fields), on_judged=lambda p, s: judged.append(p), on_warning=warnings.append
    )
    return station, judged, warnings


def _run_bounded(station: watch.Station, timeout: float = TIMEOUT_S):
    timer = threading.Timer(timeout, station.request_stop, args=("test timeout",))
    timer.start()
    try:
        return station.run()
    finally:
        timer.cancel()


def test_unreadable_file_is_recorded_as_not_inspected_with_its_reason(tmp_path):
    station, judged, warnings = _in_process(tmp_path, idle_timeout_s=1.5)
    folder = tmp_path / "camera"
    shutil.copy(DEMO[0], folder / "good.png")
    (folder / "broken.png").write_bytes(b"\x89PNG\r\n\x1a\n" + b"\x00" * 64)  # a PNG signature and nothing
    outcome = _run_bounded(station)
    assert outcome.closed and outcome.exit_code == 3  # a part not inspected needs a person, as in `batch`
    by_part = {p.part: p for p in judged}
    assert by_part["broken.png"].verdict == arc.ERROR_VERDICT and by_part["broken.png"].code == 2
    assert "image file is truncated" in by_part["broken.png"].error
    with arc.Archive(tmp_path / "archive") as a:
        rows = {p.part_key: p for p in a.parts("LINE-3")}
    assert rows["broken.png"].verdict == arc.ERROR_VERDICT and "image file is truncated" in rows["broken.png"].error
    assert rows["good.png"].verdict == "accept"
    assert not warnings


def test_file_that_vanishes_before_it_is_judged_is_skipped_with_a_warning(tmp_path, monkeypatch):
    station, judged, warnings = _in_process(tmp_path, idle_timeout_s=1.0)
    folder = tmp_path / "camera"
    shutil.copy(DEMO[0], folder / "good.png")
    shutil.copy(DEMO[1], folder / "gone.png")
    real_stage = spool.Spool.stage

    def vanish_first(self, image):
        if image.name == "gone.png":
            image.unlink()  # the camera's clean-up took it between "complete" and judging
        return real_stage(self, image)

    monkeypatch.setattr(spool.Spool, "stage", vanish_first)
    outcome = _run_bounded(station)
    assert [p.part for p in judged] == ["good.png"]
    assert [p.part_key for p in outcome.parts] == ["good.png"]
    assert len(warnings) == 1 and "gone.png: the file vanished" in warnings[0]


def test_full_disk_stops_the_station_with_exit_2_and_keeps_every_recorded_part(tmp_path, monkeypatch, capsys):
    folder = tmp_path / "camera"
    folder.mkdir()
    for name, source in _parts_plan(4):
        shutil.copy(source, folder / name)
    real_record = spool.Spool.record
    calls = []

    def disk_full_at_third(self, key, **kw):
        calls.append(key)
        if len(calls) == 3:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(self.journal))
        return real_record(self, key, **kw)

    monkeypatch.setattr(spool.Spool, "record", disk_full_at_third)
    args = [str(RECIPE), str(folder), "--archive", str(tmp_path / "archive"), "--batch-id", "LINE-4"]

    assert main(["watch", *args, "--stop-after", "4"]) == 2
    err = capsys.readouterr().err
    assert "No space left on device" in err and "parts recorded before are kept" in err
    assert len(spool.Spool(tmp_path / "archive", "LINE-4", _recipe_sha())) == 2
    monkeypatch.setattr(spool.Spool, "record", real_record)
    assert main(["watch", *args, "--stop-after", "4"]) == 1
    with arc.Archive(tmp_path / "archive") as a:
        assert sorted(p.part_key for p in a.parts("LINE-4")) == sorted(n for n, _ in _parts_plan(4))
    assert verify(tmp_path / "archive") == []


def _recipe_sha() -> str:
    from surfinspect.recipe import load_recipe

    return load_recipe(RECIPE).sha256


def test_closed_batch_id_is_refused_and_bad_flags_exit_2(tmp_path, capsys):
    assert watch.DEFAULT_SETTLE_S == 1.0  # `watch --help` states it without importing the station
    station, judged, _ = _in_process(tmp_path, stop_after=1)
    shutil.copy(DEMO[0], tmp_path / "camera" / "one.png")
    assert _run_bounded(station).exit_code == 0
    again, _, _ = _in_process(tmp_path)
    with pytest.raises(InputError, match="batch 'LINE-3' was closed at .*use a new batch id"):
        again.run()

    base = [str(RECIPE), str(tmp_path / "camera"), "--archive", str(tmp_path / "a2"), "--batch-id", "X"]
    for extra, message in (
        (["--opcua", "http://127.0.0.1:1"], "--opcua: 'http://127.0.0.1:1' is not an OPC UA endpoint"),
        (["--jobs", "0"], "--jobs: must be at least 1"),
        (["--idle-timeout", "0"], "--idle-timeout: must be more than 0"),
    ):
        assert main(["watch", *base, *extra]) == 2
        assert message in capsys.readouterr().err


def test_close_cut_short_is_finished_by_the_next_run(tmp_path, monkeypatch):
    station, judged, _ = _in_process(tmp_path, stop_after=2)
    for name, source in _parts_plan(2):
        shutil.copy(source, tmp_path / "camera" / name)
    real_finish = batch._finish

    def power_cut(arc_, batch_id, station_key=None):
        raise KeyboardInterrupt  # stands for a kill after the parts went into the archive, before the report

    monkeypatch.setattr(batch, "_finish", power_cut)
    with pytest.raises(KeyboardInterrupt):
        _run_bounded(station)
    with arc.Archive(tmp_path / "archive") as a:
        assert not a.batch("LINE-3").is_finished and all(p.is_done for p in a.parts("LINE-3"))
    monkeypatch.setattr(batch, "_finish", real_finish)
    again, judged_again, _ = _in_process(tmp_path, stop_after=2)
    outcome = _run_bounded(again)
    assert outcome.closed and "interrupted" in outcome.why_closed and judged_again == []
    assert sorted(p.part_key for p in outcome.parts) == sorted(n for n, _ in _parts_plan(2))
    assert verify(tmp_path / "archive") == []


def test_endpoint_in_use_is_an_input_error_and_leaves_no_server(tmp_path):
    with socket.socket() as busy:
        busy.bind(("127.0.0.1", 0))
        busy.listen()
        port = busy.getsockname()[1]
        station, _, _ = _in_process(tmp_path, opcua=f"opc.tcp://127.0.0.1:{port}", idle_timeout_s=0.5)
        with pytest.raises(InputError, match=f"--opcua opc.tcp://127.0.0.1:{port}/surfinspect/: cannot serve OPC UA"):
            station.run()
    assert not [t for t in threading.enumerate() if t.name == "opcua-server"]


def test_status_line_only_on_a_terminal():
    import io

    from surfinspect.cli.console import Console

    class Terminal(io.StringIO):
        def isatty(self):
            return True

    for err, shown in ((Terminal(), True), (io.StringIO(), False)):
        console = Console(out=io.StringIO(), err=err)
        console.status("LINE: 3 parts")
        console.warn("x.png: the file vanished")
        text = err.getvalue()
        assert ("\rLINE: 3 parts\x1b[K\n" in text) is shown
        assert text.endswith("surfinspect: warning: x.png: the file vanished\n")


def test_parts_waiting_for_their_record_are_bounded(tmp_path, monkeypatch):
    """A backlog of files at start-up with a slow recorder: judging waits, memory does not grow."""
    station, judged, _ = _in_process(tmp_path, stop_after=10, jobs=2)
    for name, source in _parts_plan(10):
        shutil.copy(source, tmp_path / "camera" / name)
    real_files = watch._result_files
    ahead = []

    def slow_files(pixels, result):
        time.sleep(0.05)
        return real_files(pixels, result)

    def count(part, status):
        judged.append(part)
        journal = spool.spool_dir(tmp_path / "archive", "LINE-3") / spool.JOURNAL_NAME
        ahead.append(len(judged) - (len(journal.read_bytes().splitlines()) - 1))  # the header is no part

    monkeypatch.setattr(watch, "_result_files", slow_files)
    station.on_judged = count
    outcome = _run_bounded(station)
    assert len(outcome.parts) == 10 and len(judged) == 10
    assert max(ahead) <= watch.RECORD_BACKLOG + 1  # the queued records and the verdict just published


def test_batch_close_is_signed_with_the_station_key_as_batch_does(tmp_path, capsys):
    root, folder = tmp_path / "archive", tmp_path / "camera"
    folder.mkdir()
    keys = {}
    for name in ("owner", "station", "stranger"):
        keys[name] = tmp_path / f"{name}.key"
        assert main(["-q", "keygen", "--out", str(keys[name]), "--no-passphrase"]) == 0
    assert (
        main(["-q", "owner", "init", "--archive", str(root), "--name", "M. QUALITY", "--key", str(keys["owner"])]) == 0
    )
    enrol = ["signers", "add", "--archive", str(root), "--pub", f"{keys['station']}.pub", "--name", "LINE 2"]
    assert main(["-q", *enrol, "--role", "station", "--by", str(keys["owner"])]) == 0
    shutil.copy(DEMO[0], folder / "one.png")
    run = ["-q", "watch", str(RECIPE), str(folder), "--archive", str(root), "--stop-after", "1"]
    capsys.readouterr()
    assert main([*run, "--batch-id", "W0", "--station-key", str(keys["stranger"])]) == 2
    assert "--station-key: this key" in capsys.readouterr().err
    assert not spool.spool_dir(root, "W0").exists()  # refused before anything was judged
    assert main([*run, "--batch-id", "W1", "--station-key", str(keys["station"])]) == 0
    with arc.Archive(root) as a:
        events = a.events()
    closed = next(e for e in events if e.kind == "report written")
    assert next(e for e in events if e.seq == closed.seq + 1).kind == "head signed"
    report = verify_archive(root)
    assert report.problems == [] and report.warnings == []
