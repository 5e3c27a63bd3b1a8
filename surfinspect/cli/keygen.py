"""``surfinspect keygen``: make a signer's Ed25519 key pair."""

from __future__ import annotations

import argparse

from ._checks import check_output_file
from .console import Console

HELP = "make an Ed25519 key pair for signing batch reports off"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--name", required=True, metavar="PRINTED NAME", help="the signer's name as printed on signed reports"
    )
    parser.add_argument(
        "--out", required=True, metavar="KEYFILE", help="private key file to write (KEYFILE.pub gets the public key)"
    )
    parser.add_argument(
        "--passphrase-env",
        metavar="VAR",
        help="protect the private key with the passphrase held in environment variable VAR",
    )


def run(args: argparse.Namespace, console: Console) -> int:
    from ..archive import signing

    check_output_file("--out", args.out)
    key = signing.write_key_pair(args.out, args.name, passphrase=signing.passphrase_from_env(args.passphrase_env))
    protection = "passphrase-protected" if args.passphrase_env else "not passphrase-protected"
    console.info(f"private key: {args.out} (readable by its owner only, {protection})")
    console.info(f"public key:  {signing.public_key_path_for(args.out)}")
    console.info(f"signer:      {key.signer_name}")
    console.info(f"fingerprint: {key.fingerprint}")
    return 0
