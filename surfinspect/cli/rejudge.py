"""``surfinspect rejudge``: re-inspect archived images under another recipe revision; the archive is unchanged.

Writes ``rejudge.json``, ``rejudge.csv`` and ``rejudge.pdf`` (the parts whose
verdict changes) into ``--out``. Exit code from the new verdicts, as for
``inspect``: 0 all accept, 1 some reject, 3 none rejected but some review
(or not re-inspectable), 2 usage/input error.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from ._options import add_archive_option
from .console import Console

HELP = "re-inspect archived parts under another recipe revision and list the verdicts that would change"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_archive_option(parser)
    parser.add_argument("--recipe", required=True, metavar="RECIPE", help="the recipe YAML to judge by now")
    parser.add_argument("--batch-id", action="append", default=[], metavar="ID", help="a batch (repeat; default: all)")
    parser.add_argument("--since", metavar="DATE", help="only batches started at or after (YYYY-MM-DD, UTC)")
    where = parser.add_mutually_exclusive_group()
    where.add_argument("--scheduler", metavar="tcp://HOST:PORT", help="run on this Dask scheduler's workers")
    where.add_argument("--jobs", type=int, metavar="N", help="local worker processes (default: every core)")
    parser.add_argument("--out", required=True, metavar="DIR", help="folder for rejudge.json, .csv and .pdf")


def run(args: argparse.Namespace, console: Console) -> int:
    from ..station.rejudge import RejudgeConfig, rejudge

    outcome = rejudge(
        RejudgeConfig(
            archive=args.archive,
            recipe_path=Path(args.recipe),
            out_dir=Path(args.out),
            batch_ids=tuple(args.batch_id),
            since=args.since,
            scheduler=args.scheduler,
            jobs=args.jobs,
        )
    )
    console.info(f"{len(outcome.parts)} part(s) re-judged; {outcome.changed} change verdict")
    for p in outcome.parts:
        if p["changed"]:
            console.info(f"  {p['batch_id']} {p['part_key']}: {p['recorded']['verdict']} -> {p['new']['verdict']}")
    console.info(f"written: {', '.join(str(f) for f in outcome.files)}")
    return outcome.exit_code
