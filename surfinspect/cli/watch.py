"""``surfinspect watch``: judge each image as the camera drops it into a folder; tell the line controller.

stdout carries one JSON line per part as it is judged; notes, warnings and
(on a terminal) a live status line go to stderr. SIGINT, SIGTERM and SIGHUP
close the batch after the parts in flight: the batch report and CSV are
written as ``batch`` writes them and the exit code follows the batch's
verdicts (0 all accepted, 1 any rejected, 3 any needing review or not
inspected); 2 for an input error or a station that had to stop (its journal
or archive could not be written).
"""

from __future__ import annotations

import argparse
import shlex
import signal

from .._lazy import module
from ._keys import add_key_arguments, open_key
from ._options import add_archive_option
from .batch import batch_fields, on_stop_signals
from .console import Console

watch = module("surfinspect.station.watch")

HELP = "judge each image as it arrives in a folder, publish verdicts (JSON lines, OPC UA), archive the batch"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("recipe", metavar="RECIPE", help="the recipe YAML file")
    parser.add_argument("folder", metavar="FOLDER", help="the folder the camera writes images into")
    add_archive_option(parser, made=True)
    parser.add_argument(
        "--batch-id", required=True, metavar="ID", help="the batch id; run again with the same id to go on after a stop"
    )
    parser.add_argument("--jobs", type=int, default=1, metavar="N", help="parts judged at the same time (default 1)")
    parser.add_argument("--operator", metavar="NAME", help="operator name for the report")
    parser.add_argument(
        "--opcua", metavar="ENDPOINT", help="serve the verdicts over OPC UA here, e.g. opc.tcp://127.0.0.1:4840"
    )
    parser.add_argument("--stop-after", type=int, metavar="N", help="close the batch once it holds N parts")
    parser.add_argument(
        "--idle-timeout", type=float, metavar="S", help="close the batch after S seconds without a new part"
    )
    parser.add_argument(
        "--settle",
        type=float,
        metavar="S",
        help="a file neither renamed in nor closed after writing is complete once unchanged this long (default 1 s)",
    )
    parser.add_argument("--poll", action="store_true", help="poll the folder instead of inotify (network shares)")
    add_key_arguments(
        parser,
        "--station-key",
        "the station's private key (enrolled with role station): signs the chain head when the batch closes",
        required=False,
    )


def _status_text(batch_id: str, status: watch.StationStatus) -> str:
    c = status.counts
    last = status.last
    tail = f" | last {last.part}: {last.verdict}" if last else ""
    return (
        f"{batch_id}: {status.judged} parts: {c['accept']} accept, {c['reject']} reject, {c['review']} review, "
        f"{c['error']} not inspected | {status.parts_per_minute:.1f}/min{tail}"
    )


def run(args: argparse.Namespace, console: Console) -> int:
    config = watch.WatchConfig(
        **batch_fields(args),
        opcua=args.opcua,
        stop_after=args.stop_after,
        idle_timeout_s=args.idle_timeout,
        **({} if args.settle is None else {"settle_s": args.settle}),
        poll=args.poll,
        station_key=open_key(args.station_key, args.passphrase_env, "--station-key") if args.station_key else None,
    )

    def judged(part: watch.JudgedPart, status: watch.StationStatus) -> None:
        console.record(part.json_line())
        console.status(_status_text(args.batch_id, status))

    station = watch.Station(config, on_judged=judged, on_warning=console.warn, on_note=console.note)
    with on_stop_signals(lambda signum, frame: station.request_stop(f"{signal.Signals(signum).name} received")):
        outcome = station.run()
    console.status("")
    _summarise(args, console, outcome)
    return outcome.exit_code


def _summarise(args: argparse.Namespace, console: Console, outcome: watch.WatchOutcome) -> None:
    if outcome.left_unjudged:
        names = ", ".join(outcome.left_unjudged[:5]) + (" …" if len(outcome.left_unjudged) > 5 else "")
        console.warn(f"not judged before the batch closed (left in the folder): {names}")
    if not outcome.closed:
        console.note(f"batch {outcome.batch_id}: {outcome.why_closed}; no part arrived, nothing archived")
        return
    counts = {}
    for p in outcome.parts:
        counts[p.verdict] = counts.get(p.verdict, 0) + 1
    summary = ", ".join(f"{n} {v}" for v, n in sorted(counts.items()))
    console.note(
        f"batch {outcome.batch_id} closed ({outcome.why_closed}): {len(outcome.parts)} part(s): {summary}; "
        f"{outcome.judged_now} judged in this run"
    )
    console.note(
        "report, CSV and results are in the archive: "
        f"surfinspect show --archive {shlex.quote(args.archive)} --batch-id {outcome.batch_id} --out DIR"
    )
