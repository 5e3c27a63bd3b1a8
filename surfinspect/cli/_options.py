"""Options several commands share: where the archive is (``--archive``), ``--overwrite`` of an output folder."""

from __future__ import annotations

import argparse

__all__ = ["URL_FORM", "LOCATION_HELP", "add_archive_option", "add_overwrite_option"]

#: The URL form ``--archive`` takes besides a folder (``archive.location.URL_FORM``, written out here: parsing
#: the command line loads nothing of the archive room).
URL_FORM = "postgresql://USER@HOST:PORT/DATABASE?objects=FOLDER"
#: What ``--archive`` (and ``archive copy``'s ``--from``/``--to``) takes.
LOCATION_HELP = f"a folder, or {URL_FORM}"


def add_archive_option(parser: argparse.ArgumentParser, *, made: bool = False, required: bool = True, note: str = ""):
    """``--archive ARCHIVE``; ``made``: the command makes a missing folder; ``note``: said after the forms."""
    folder = "a folder (made when missing)" if made else "a folder"
    forms = f"the archive: {folder}, or {URL_FORM}"
    parser.add_argument("--archive", required=required, metavar="ARCHIVE", help=f"{forms}{note}")


def add_overwrite_option(parser: argparse.ArgumentParser, *, with_out: bool = False) -> None:
    """``--overwrite`` for the ``--out`` folder (``fsutil.OutputFolder``); ``with_out``: it has effect only with ``--out``."""
    when = "with --out: " if with_out else ""
    parser.add_argument(
        "--overwrite",
        action="store_true",
        help=f"{when}write into a folder that is not empty, removing first what surfinspect wrote there before",
    )
