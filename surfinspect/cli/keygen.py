"""``surfinspect keygen``: make an Ed25519 key pair (for a person, a station or an archive's owner)."""

from __future__ import annotations

import argparse

from ._checks import check_output_file
from ._keys import new_passphrase
from .console import Console

HELP = "make an Ed25519 key pair (encrypted with a passphrase unless --no-passphrase)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--name",
        default="",
        metavar="LABEL",
        help="a label kept in the key files (the printed name on signatures comes from the archive's register)",
    )
    parser.add_argument(
        "--out", required=True, metavar="KEYFILE", help="private key file to write (KEYFILE.pub gets the public key)"
    )
    parser.add_argument(
        "--passphrase-env", metavar="VAR", help="the new passphrase is in environment variable VAR (default: asked)"
    )
    parser.add_argument(
        "--no-passphrase",
        action="store_true",
        help="store the private key unencrypted (for an unattended station; protected by its file mode only)",
    )


def run(args: argparse.Namespace, console: Console) -> int:
    from ..archive import signing

    check_output_file("--out", args.out)
    passphrase = new_passphrase(args)
    key = signing.write_key_pair(args.out, args.name, passphrase=passphrase)
    protection = "passphrase-protected" if passphrase else "NOT passphrase-protected"
    console.info(f"private key: {args.out} (readable by its owner only, {protection})")
    console.info(f"public key:  {signing.public_key_path_for(args.out)} (hand it to the archive's owner to enrol)")
    console.info(f"fingerprint: {key.fingerprint}")
    return 0
