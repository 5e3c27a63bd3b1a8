"""``surfinspect keygen``: make a key pair (for a person, a station or an archive's owner).

A key file holds the Ed25519 identity key and an ECDSA P-256 PDF key (the one
PDF signatures are made with, which common PDF readers verify), both under
one passphrase. ``--upgrade KEYFILE`` adds a PDF key to a key file made
before PDF keys.
"""

from __future__ import annotations

import argparse

from ._checks import check_output_file
from ._keys import new_passphrase
from .console import Console

HELP = "make a key pair: Ed25519 identity and P-256 PDF key (encrypted with a passphrase unless --no-passphrase)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--name",
        default="",
        metavar="LABEL",
        help="a label kept in the key files (the printed name on signatures comes from the archive's register)",
    )
    target = parser.add_mutually_exclusive_group(required=True)
    target.add_argument("--out", metavar="KEYFILE", help="private key file to write (KEYFILE.pub gets the public key)")
    target.add_argument(
        "--upgrade",
        metavar="KEYFILE",
        help="add a PDF key (P-256) to a key file made before PDF keys, under its passphrase; rewrites KEYFILE.pub",
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

    if args.upgrade:
        from ._keys import open_passphrase

        asker = open_passphrase(args.upgrade, args.passphrase_env)
        key = signing.upgrade_key_file(args.upgrade, passphrase=asker)
        console.info(f"{args.upgrade}: PDF key added (fingerprint of the key unchanged: {key.fingerprint})")
        console.info(
            f"have the archive's owner certify it: surfinspect signers pdf-key --archive DIR "
            f"--pub {signing.public_key_path_for(args.upgrade)} --by OWNER_KEY"
        )
        return 0
    check_output_file("--out", args.out)
    passphrase = new_passphrase(args)
    key = signing.write_key_pair(args.out, args.name, passphrase=passphrase)
    protection = "passphrase-protected" if passphrase else "NOT passphrase-protected"
    console.info(f"private key: {args.out} (readable by its owner only, {protection})")
    console.info(f"public key:  {signing.public_key_path_for(args.out)} (hand it to the archive's owner to enrol)")
    console.info(f"fingerprint: {key.fingerprint}")
    return 0
