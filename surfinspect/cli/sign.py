"""``surfinspect sign``: sign a finished batch off with a meaning, into the archive.

The key must be enrolled in the archive's signer register (which gives the
printed name), not revoked and not a station's; the archive must verify.
Every input and output is checked before the signature is made: a command
that fails leaves no sign-off behind.
"""

from __future__ import annotations

import argparse
import shlex
from pathlib import Path

from .._lazy import module
from ..fsutil import write_bytes_atomic
from ._checks import check_output_file
from ._keys import add_key_arguments, open_key
from ._options import add_archive_option
from .console import Console

signatures = module("surfinspect.archive.signatures")
signing = module("surfinspect.archive.signing")
archive = module("surfinspect.archive.store")
location = module("surfinspect.archive.location")
batch = module("surfinspect.station.batch")

HELP = "sign a finished batch off (released, withheld or examined) and store the signed report"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_archive_option(parser)
    parser.add_argument("--batch-id", required=True, metavar="ID", help="the batch to sign off")
    add_key_arguments(parser, "--key", "the signer's private key file (enrolled in the archive's register)")
    parser.add_argument(
        "--meaning",
        required=True,
        choices=signatures.MEANINGS,
        help="released: may go on as judged; withheld: held back; examined: read and checked, no release decision",
    )
    parser.add_argument("--comment", default="", metavar="TEXT", help="a comment kept in the signed record")
    parser.add_argument("--out", metavar="PDF", help="also write the signed report to this .pdf file")


def run(args: argparse.Namespace, console: Console) -> int:
    out = None
    if args.out:
        check_output_file("--out", args.out, suffixes=(".pdf",), not_same_as=[("the --key file", args.key)])
        out = Path(args.out)
    with location.open_archive(args.archive) as arc:
        arc.batch(args.batch_id)  # an unknown batch is named before the key is opened
        key = open_key(args.key, args.passphrase_env, "--key")
        if not key.protected:
            console.warn(f"{args.key}: a person's key without a passphrase; anyone who copies the file can sign")
        row = signatures.sign_batch(
            arc,
            args.batch_id,
            key,
            meaning=args.meaning,
            comment=args.comment,
            render_edition=lambda signoff: batch.render_batch_report(arc, args.batch_id, signoff=signoff),
        )
        edition = arc.object_path(row.signed_report_sha256)
        ed25519_pdf = signatures.pdf_signing_key(arc, key)[0] is key.private_key
        if out is not None:
            write_bytes_atomic(out, edition.read_bytes())
    if key.label and key.label != row.signer_name:
        console.warn(
            f"{args.key}: the key file calls its holder {key.label!r}; signed as {row.signer_name!r} (register)"
        )
    console.info(
        f"batch {row.batch_id}: sign-off #{row.signoff_no}, {row.meaning} by {row.signer_name} at {row.signed_at_utc}"
    )
    console.info(f"key fingerprint {row.key_fingerprint}")
    if ed25519_pdf:
        console.notice(
            "the PDF signature is an Ed25519 one (no certified PDF key for this key): PDF readers without Ed25519, "
            f"such as poppler's, cannot check it; {signing.UPGRADE_HINT}"
        )
    console.info(f"signed report (a PDF stored under its hash, without a suffix): {edition}")
    if out is not None:
        console.info(f"signed report copied to {out}")
    else:
        console.info(
            f"readable copy (report.signed-{row.signoff_no}.pdf): "
            f"surfinspect show --archive {shlex.quote(args.archive)} --batch-id {row.batch_id} --out DIR"
        )
    return 0
