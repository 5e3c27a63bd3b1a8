"""``surfinspect review``: serve the review station (batches, parts, dispositions, sign-off) over an archive.

The web application is imported inside :func:`run`, so ``surfinspect --help``
does not load the web framework.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from .._lazy import module
from ..errors import InputError
from .console import Console

location = module("surfinspect.archive.location")

HELP = "serve the review station: look at batches and parts in a browser, record dispositions, sign off"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--archive",
        required=True,
        metavar="ARCHIVE",
        help="the archive: a folder, or postgresql://USER@HOST:PORT/DB?objects=FOLDER",
    )
    parser.add_argument(
        "--host", default="127.0.0.1", help="address to listen on (default 127.0.0.1: this computer only)"
    )
    parser.add_argument("--port", type=int, default=8750, help="port to listen on (default 8750)")
    parser.add_argument("--read-only", action="store_true", help="browse only: no dispositions, no sign-off")
    parser.add_argument(
        "--key-dir",
        metavar="DIR",
        help="the station's key folder: the pages offer the enrolled persons' keys found there (KEY and KEY.pub)",
    )


def run(args: argparse.Namespace, console: Console) -> int:
    from ..review.app import ReviewConfig
    from ..review.server import is_loopback, serve

    if not 0 < args.port < 65536:
        raise InputError(f"--port: {args.port} is not a port (allowed 1-65535)")
    key_dir = None
    if args.key_dir:
        key_dir = Path(args.key_dir)
        if not key_dir.is_dir():
            raise InputError(f"--key-dir {args.key_dir}: not a folder (allowed: the folder that holds the key files)")
    root = args.archive
    with location.open_archive(root) as arc:  # refuses a damaged or foreign index before the server starts
        batches = len(arc.batches())
    remote = not is_loopback(args.host)
    config = ReviewConfig(root, read_only=args.read_only, key_dir=key_dir, remote=remote)
    if remote:
        console.warn(
            f"serving on {args.host}: anyone who can reach it can browse; every disposition and sign-off needs an "
            "enrolled key and its passphrase. Use it on a trusted plant network only (the connection is not encrypted)."
        )
    console.info(
        f"review station for {root} ({batches} batch(es)) at http://{args.host}:{args.port}/ - Ctrl-C stops it"
    )
    serve(config, args.host, args.port)
    return 0
