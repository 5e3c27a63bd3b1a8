"""``surfinspect sign``: sign a finished batch off with a meaning, into the archive."""

from __future__ import annotations

import argparse

from .. import archive, batch, signing
from ..console import Console
from ..fsutil import write_bytes_atomic

HELP = "sign a finished batch off (approved, rejected or reviewed) and store the signed report"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--archive", required=True, metavar="DIR", help="the archive folder")
    parser.add_argument("--batch-id", required=True, metavar="ID", help="the batch to sign off")
    parser.add_argument("--key", required=True, metavar="KEYFILE", help="the signer's private key file (from keygen)")
    parser.add_argument("--meaning", required=True, choices=signing.MEANINGS, help="what the signature means")
    parser.add_argument("--comment", default="", metavar="TEXT", help="a comment kept in the signed record")
    parser.add_argument("--passphrase-env", metavar="VAR", help="environment variable holding the key's passphrase")
    parser.add_argument("--out", metavar="PDF", help="also write the signed report to this file")


def run(args: argparse.Namespace, console: Console) -> int:
    with archive.Archive(args.archive) as arc:
        arc.batch(args.batch_id)  # an unknown batch is named before the key is opened
        key = signing.load_signing_key(args.key, passphrase=signing.passphrase_from_env(args.passphrase_env))
        row = archive.sign_batch(
            arc,
            args.batch_id,
            key,
            meaning=args.meaning,
            comment=args.comment,
            render_edition=lambda signoff: batch.render_batch_report(arc, args.batch_id, signoff=signoff),
        )
        edition = arc.object_path(row.signed_report_sha256)
        if args.out:
            write_bytes_atomic(args.out, edition.read_bytes())
    console.info(f"batch {row.batch_id}: sign-off #{row.signoff_no}, {row.meaning} by {row.signer_name} at {row.signed_at_utc}")
    console.info(f"key fingerprint {row.key_fingerprint}")
    console.info(f"signed report {args.out or edition}")
    return 0
