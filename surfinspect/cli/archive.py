"""``surfinspect archive copy --from A --to B``: move an archive between a folder and PostgreSQL.

The copy is the same archive (same id, same audit chain, same signatures);
it is verified when written, and the command exits 1 when the copy does
not verify (0 when it does, 2 for a usage error).
"""

from __future__ import annotations

import argparse

from ._options import LOCATION_HELP
from .console import Console

HELP = "copy an archive between backends (a folder and PostgreSQL) with every hash and signature intact"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    sub = parser.add_subparsers(dest="action", metavar="ACTION", required=True)
    copy = sub.add_parser("copy", help="copy an archive into a new folder or an empty database, then verify the copy")
    copy.add_argument("--from", dest="source", required=True, metavar="ARCHIVE", help=f"the archive: {LOCATION_HELP}")
    copy.add_argument("--to", dest="target", required=True, metavar="ARCHIVE", help=f"a new archive: {LOCATION_HELP}")


def run(args: argparse.Namespace, console: Console) -> int:
    from ..archive.copy import copy_archive
    from ..archive.location import parse_location
    from ..archive.verify import verify_archive

    outcome = copy_archive(args.source, args.target)
    target = parse_location(args.target, "--to").display
    rows = sum(outcome.rows.values())
    console.info(
        f"copied {rows} index rows ({outcome.events} audit events, head {outcome.head_sha256[:16]}…) "
        f"and {outcome.objects} stored files to {target}"
    )
    report = verify_archive(args.target)
    for text in report.problems:
        console.info(f"  {text}")
    if report.problems:
        console.error(f"the copy at {target} does not verify: {len(report.problems)} problem(s)")
        return 1
    console.info(f"the copy verifies ({len(report.warnings)} warning(s), as the original has them)")
    return 0
