"""Private keys at the terminal: the passphrase from a no-echo prompt, or from ``--passphrase-env VAR``.

A passphrase is never taken from the command line (it would show in the
process list and the shell history). Without a terminal and without
``--passphrase-env`` a protected key cannot be opened: the command says so.
"""

from __future__ import annotations

import argparse
import getpass
import sys

from .._lazy import module
from ..errors import InputError

signing = module("surfinspect.archive.signing")  # cryptography loads when a key is opened

__all__ = ["add_key_arguments", "open_key", "open_passphrase", "new_passphrase"]


def add_key_arguments(parser: argparse.ArgumentParser, flag: str, help_text: str, *, required: bool = True) -> None:
    parser.add_argument(flag, required=required, metavar="KEYFILE", help=help_text)
    parser.add_argument(
        "--passphrase-env",
        metavar="VAR",
        help="read the key's passphrase from environment variable VAR (default: asked for on the terminal)",
    )


def _terminal() -> bool:
    return sys.stdin is not None and sys.stdin.isatty()


def open_key(path: str, passphrase_env: str | None, flag: str) -> signing.SigningKey:
    """Load a private key, asking for its passphrase without echo only when it is protected."""
    return signing.load_signing_key(path, passphrase=open_passphrase(path, passphrase_env, flag))


def open_passphrase(path: str, passphrase_env: str | None, flag: str = "--upgrade"):
    """A function giving the passphrase of key file ``path`` (from the variable, else asked without echo)."""
    given = signing.passphrase_from_env(passphrase_env)

    def ask() -> bytes:
        if given is not None:
            return given
        if not _terminal():
            raise InputError(
                f"{flag} {path}: the key is passphrase-protected and no terminal is attached; "
                "give --passphrase-env VAR naming a variable that holds the passphrase"
            )
        return getpass.getpass(f"passphrase for {path}: ").encode("utf-8")

    return ask


def new_passphrase(args: argparse.Namespace) -> bytes | None:
    """The passphrase for a new key: from --passphrase-env, or asked twice; None only with --no-passphrase."""
    if args.no_passphrase:
        if args.passphrase_env:
            raise InputError("--no-passphrase: cannot be combined with --passphrase-env")
        return None
    given = signing.passphrase_from_env(args.passphrase_env)
    if given is not None:
        return given
    if not _terminal():
        raise InputError(
            "passphrase: no terminal to ask on; give --passphrase-env VAR, or --no-passphrase for a key that is "
            "stored unencrypted (protected by its file mode only)"
        )
    first = getpass.getpass("passphrase for the new key: ").encode("utf-8")
    if not first:
        raise InputError("passphrase: empty (give one, or ask for --no-passphrase)")
    if getpass.getpass("the same passphrase again: ").encode("utf-8") != first:
        raise InputError("passphrase: the two entries differ; nothing was written")
    return first
