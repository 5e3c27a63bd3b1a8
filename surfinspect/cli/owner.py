"""``surfinspect owner init``: give an archive its owner (the quality manager), once.

The owner's key signs every later enrolment and revocation in the signer
register. A missing archive folder is made (empty), so that the owner and
the station keys can be set up before the first batch.
"""

from __future__ import annotations

import argparse

from .._lazy import module
from ._keys import add_key_arguments, open_key
from ._options import add_archive_option
from .console import Console

signatures = module("surfinspect.archive.signatures")
archive = module("surfinspect.archive.store")
location = module("surfinspect.archive.location")

HELP = "give an archive its owner once (the key that enrols and revokes signers)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    sub = parser.add_subparsers(dest="action", metavar="ACTION", required=True)
    init = sub.add_parser("init", help="set the owner of an archive (made when missing)")
    add_archive_option(init, made=True)
    init.add_argument("--name", required=True, metavar="PRINTED NAME", help="the owner's name as printed on records")
    add_key_arguments(init, "--key", "the owner's private key file (from keygen)")


def run(args: argparse.Namespace, console: Console) -> int:
    key = open_key(args.key, args.passphrase_env, "--key")
    with location.open_archive(args.archive, create=True) as arc:
        row = signatures.init_owner(arc, key, args.name)
        archive_id = arc.archive_id
    console.info(f"archive {args.archive} (id {archive_id}): owner {row.printed_name}, key {row.key_fingerprint}")
    console.info("enrol signers and station keys with: surfinspect signers add --archive DIR --pub KEY.pub ...")
    return 0
