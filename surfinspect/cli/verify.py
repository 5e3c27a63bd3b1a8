"""``surfinspect verify``: check an archive's index, audit chain, register, signatures and files.

Exit 0 when intact (warnings, such as a batch closed without a station key,
are printed but do not fail unless ``--strict``), 1 when anything was
changed, removed, reordered or damaged, 2 for a folder that is no archive.
"""

from __future__ import annotations

import argparse

from .._lazy import module
from ..archive.backend import IndexBusy, IndexDamaged
from ..errors import InputError
from ..fsutil import check_output_file
from ._options import add_archive_option
from .console import Console

legacy_v1 = module("surfinspect.archive.legacy_v1")
archive = module("surfinspect.archive.store")
location = module("surfinspect.archive.location")
verifier = module("surfinspect.archive.verify")

HELP = "check an archive's index, audit chain, signer register, signatures and files (exit 0 intact, 1 not)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_archive_option(parser)
    parser.add_argument(
        "--batch-id",
        metavar="ID",
        help="check this batch only (chain, index rows and register are always checked whole)",
    )
    parser.add_argument("--anchor", metavar="FILE", help="also check against an anchor exported earlier")
    parser.add_argument(
        "--export-anchor",
        metavar="FILE",
        help="after an intact check, write the archive's head here, to keep outside it",
    )
    parser.add_argument("--strict", action="store_true", help="count warnings (unsigned heads) as problems")


def run(args: argparse.Namespace, console: Console) -> int:
    anchor = verifier.read_anchor(args.anchor) if args.anchor else None
    first_format = (
        not location.is_database_url(args.archive) and legacy_v1.format_of(args.archive) == legacy_v1.FORMAT_1
    )
    if args.export_anchor:
        if first_format:
            raise InputError("--export-anchor: anchors are kept for archives of the current format only")
        check_output_file("--export-anchor", args.export_anchor)
    report = verifier.verify_archive(args.archive, args.batch_id, anchor=anchor)
    problems = report.problems + (report.warnings if args.strict else [])
    # an archive of the first format is only read: nothing is written into it
    trail = "first format, read only" if first_format else _record(args, problems, console)
    for text in report.warnings:
        console.warn(text)
    scope = f"batch {args.batch_id!r}" if args.batch_id else "every batch"
    if problems:
        console.info(f"archive {args.archive}: {len(problems)} problem(s) found in {scope}:")
        for text in problems:
            console.info(f"  - {text}")
        if args.export_anchor:
            console.info(f"no anchor written to {args.export_anchor}: the archive does not verify")
        return 1
    console.info(f"archive {args.archive}: intact ({scope}; {trail})")
    if args.export_anchor:
        console.info(f"anchor written to {args.export_anchor}: keep it outside the archive; check with --anchor")
    return 0


def _record(args: argparse.Namespace, problems: list[str], console: Console) -> str:
    """Record the check in the audit trail, write the anchor when asked, and say who owns the archive."""
    try:
        with location.open_archive(args.archive) as arc:
            arc.record_verification(args.batch_id, problems)
            events, head = arc.chain_head()
            owner = arc.register().owner
            if args.export_anchor and not problems:
                verifier.export_anchor(arc, args.export_anchor)
    except (IndexBusy, IndexDamaged, InputError) as exc:  # a read-only copy of an archive can still be checked
        console.warn(f"{args.archive}: the check was not recorded in the audit trail ({exc})")
        return "the check was not recorded"
    # a rewritten archive would have to name another owner key: compare it with the one you know
    who = f"owner {owner.printed_name}, key {owner.key_fingerprint}" if owner else "no owner yet, nothing signed"
    return f"audit trail of {events} events, head {head}; {who}"
