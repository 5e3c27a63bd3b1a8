"""``surfinspect verify``: check an archive's files, results, signatures and audit trail."""

from __future__ import annotations

import argparse

from .console import Console

HELP = "check every stored file, result, signature and the audit trail of an archive (exit 0 intact, 1 not)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--archive", required=True, metavar="DIR", help="the archive folder")
    parser.add_argument(
        "--batch-id", metavar="ID", help="check this batch only (the audit trail is always checked whole)"
    )


def run(args: argparse.Namespace, console: Console) -> int:
    import sqlite3

    from ..archive import store as archive

    with archive.Archive(args.archive) as arc:
        failures = archive.verify(arc, args.batch_id)
        try:
            arc.record_verification(args.batch_id, failures)
        except sqlite3.OperationalError as exc:  # a read-only copy of an archive can still be checked
            console.warn(f"{args.archive}: the check was not recorded in the audit trail ({exc})")
        events, head = arc.chain_head()
        scope = f"batch {args.batch_id!r}" if args.batch_id else f"{len(arc.batches())} batch(es)"
    if failures:
        console.info(f"archive {args.archive}: {len(failures)} problem(s) found in {scope}:")
        for text in failures:
            console.info(f"  - {text}")
        return 1
    console.info(f"archive {args.archive}: intact ({scope}; audit trail of {events} events, head {head})")
    return 0
