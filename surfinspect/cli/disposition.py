"""``surfinspect disposition``: record, signed, what becomes of a rejected or doubtful part."""

from __future__ import annotations

import argparse

from ..archive import signatures
from ..archive.location import open_archive
from ._keys import add_key_arguments, open_key
from .console import Console

HELP = f"record a signed disposition ({', '.join(signatures.DECISIONS)}) of a rejected or doubtful part"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--archive",
        required=True,
        metavar="ARCHIVE",
        help="the archive: a folder, or postgresql://USER@HOST:PORT/DB?objects=FOLDER",
    )
    parser.add_argument("--batch-id", required=True, metavar="ID", help="the batch")
    parser.add_argument("--part", required=True, metavar="PART", help="the part's key in the batch (its file name)")
    parser.add_argument("--decision", required=True, choices=signatures.DECISIONS, help="what becomes of the part")
    parser.add_argument("--comment", default="", metavar="TEXT", help="a comment kept in the signed record")
    add_key_arguments(parser, "--key", "the deciding person's private key file (enrolled in the register)")


def run(args: argparse.Namespace, console: Console) -> int:
    with open_archive(args.archive) as arc:
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
