"""``surfinspect disposition``: record, signed, what becomes of a rejected or doubtful part."""

from __future__ import annotations

import argparse

from .._lazy import module
from ._keys import add_key_arguments, open_key
from ._options import add_archive_option
from .console import Console

signatures = module("surfinspect.archive.signatures")
archive = module("surfinspect.archive.store")
location = module("surfinspect.archive.location")

HELP = "record a signed disposition (use-as-is, rework, scrap, re-inspect) of a part judged reject or review, or not-inspected"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_archive_option(parser)
    parser.add_argument("--batch-id", required=True, metavar="ID", help="the batch")
    parser.add_argument("--part", required=True, metavar="PART", help="the part's key in the batch (its file name)")
    parser.add_argument("--decision", required=True, choices=signatures.DECISIONS, help="what becomes of the part")
    parser.add_argument("--comment", default="", metavar="TEXT", help="a comment kept in the signed record")
    add_key_arguments(parser, "--key", "the deciding person's private key file (enrolled in the register)")


def run(args: argparse.Namespace, console: Console) -> int:
    with location.open_archive(args.archive) as arc:
        arc.part(args.batch_id, args.part)  # an unknown batch or part is named before the key is opened
        key = open_key(args.key, args.passphrase_env, "--key")
        if not key.protected:
            console.warn(f"{args.key}: a person's key without a passphrase; anyone who copies the file can sign")
        row = signatures.record_disposition(
            arc, args.batch_id, args.part, key, decision=args.decision, comment=args.comment
        )
    console.info(
        f"batch {row.batch_id}, part {row.part_key}: disposition #{row.disposition_no} {row.decision} "
        f"by {row.signer_name} at {row.decided_at_utc}"
    )
    return 0
