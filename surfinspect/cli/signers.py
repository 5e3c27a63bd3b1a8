"""``surfinspect signers add|revoke|pdf-key|list``: the archive's signer register.

Enrolment and revocation are signed by the archive owner's key (``--by``)
and recorded in the audit chain. ``--role station`` enrols a station's key,
which signs chain heads at batch close and nothing else.
"""

from __future__ import annotations

import argparse

from .._lazy import module
from ._keys import add_key_arguments, open_key
from ._options import add_archive_option
from .console import Console

signatures = module("surfinspect.archive.signatures")
signing = module("surfinspect.archive.signing")
archive = module("surfinspect.archive.store")
location = module("surfinspect.archive.location")

HELP = "enrol, revoke and list the keys that may sign in an archive"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    sub = parser.add_subparsers(dest="action", metavar="ACTION", required=True)
    add = sub.add_parser("add", help="enrol a public key under a printed name and role")
    add_archive_option(add)
    add.add_argument("--pub", required=True, metavar="KEY.pub", help="the signer's public key file (from keygen)")
    add.add_argument("--name", required=True, metavar="PRINTED NAME", help="the name printed on what the key signs")
    add.add_argument(
        "--role", required=True, metavar="ROLE", help="e.g. inspector, quality engineer; 'station' for a line station"
    )
    add_key_arguments(add, "--by", "the archive owner's private key file")
    revoke = sub.add_parser("revoke", help="withdraw an enrolled key from now on")
    add_archive_option(revoke)
    revoke.add_argument(
        "--key-fingerprint", required=True, metavar="HEX", help="the key's fingerprint (8 or more leading digits)"
    )
    revoke.add_argument("--reason", default="", metavar="TEXT", help="why the key is withdrawn (kept in the record)")
    add_key_arguments(revoke, "--by", "the archive owner's private key file")
    pdf = sub.add_parser(
        "pdf-key",
        help="certify the PDF key of an enrolled holder (or the owner) whose key file was upgraded (keygen --upgrade)",
    )
    add_archive_option(pdf)
    pdf.add_argument("--pub", required=True, metavar="KEY.pub", help="the holder's upgraded public key file")
    add_key_arguments(pdf, "--by", "the archive owner's private key file")
    listing = sub.add_parser("list", help="list the owner and every enrolled key")
    add_archive_option(listing)


def run(args: argparse.Namespace, console: Console) -> int:
    with location.open_archive(args.archive) as arc:
        if args.action == "list":
            _list(arc, console)
            return 0
        owner_key = open_key(args.by, args.passphrase_env, "--by")
        if args.action == "add":
            public = signing.load_public_key(args.pub)
            row = signatures.enrol_signer(arc, owner_key, public, args.name, args.role)
            console.info(f"entry {row.entry_no}: enrolled {row.printed_name} ({row.role}), key {row.key_fingerprint}")
            if public.pdf_public_der is None:
                console.notice(f"{args.pub}: no PDF key, so PDF readers without Ed25519 cannot check its PDF "
                               f"signatures; {signing.UPGRADE_HINT}")  # fmt: skip
        elif args.action == "pdf-key":
            public = signing.load_public_key(args.pub)
            row = signatures.certify_pdf_key(arc, owner_key, public)
            console.info(f"entry {row.entry_no}: certified the PDF key of {row.printed_name} ({row.key_fingerprint})")
        else:
            row = signatures.revoke_signer(arc, owner_key, args.key_fingerprint, args.reason)
            console.info(f"entry {row.entry_no}: revoked the key of {row.printed_name} ({row.key_fingerprint})")
    return 0


def _list(arc: archive.Archive, console: Console) -> None:
    reg = arc.register()
    if reg.owner is None:
        console.info(f"archive {arc.location}: no owner yet (surfinspect owner init); nothing can be signed in it")
        return
    console.info(
        f"owner: {reg.owner.printed_name}, key {reg.owner.key_fingerprint} (since {reg.owner.enrolled_at_utc})"
    )
    rows = [
        [
            s.printed_name,
            s.role,
            s.key_fingerprint[:16] + "…",
            s.enrolled_at_utc,
            f"revoked {s.revoked_at_utc}" if s.revoked_at_utc else "active",
            "P-256" if s.pdf_public_key_hex else "Ed25519 only",
        ]
        for s in sorted(reg.signers.values(), key=lambda s: s.entry_no)
    ]
    if rows:
        console.table(["printed name", "role", "key", "enrolled (UTC)", "state", "PDF key"], rows)
    else:
        console.info("no signer enrolled yet")
