"""``surfinspect review``: serve the review station (batches, parts, dispositions, sign-off) over an archive.

The web application is imported inside :func:`run`, so ``surfinspect --help``
does not load the web framework.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from .._lazy import module
from ..errors import InputError
from ._options import add_archive_option
from .console import Console

location = module("surfinspect.archive.location")

HELP = "serve the review station: look at batches and parts in a browser, record dispositions, sign off"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_archive_option(parser, required=False, note=" (needed unless --recipe-image)")
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
    parser.add_argument(
        "--recipe-image",
        metavar="IMAGE",
        help="open the recipe page on this reference photo: draw the regions, see them measured, save the recipe",
    )
    parser.add_argument("--recipe", metavar="RECIPE", help="with --recipe-image: an existing recipe to edit on it")
    parser.add_argument(
        "--recipe-dir",
        metavar="DIR",
        help="the folder the recipe page saves into (default: the folder of --recipe, else the current folder)",
    )


def run(args: argparse.Namespace, console: Console) -> int:
    from ..review.app import ReviewConfig
    from ..review.server import is_loopback, serve

    if not 0 < args.port < 65536:
        raise InputError(f"--port: {args.port} is not a port (allowed 1-65535)")
    if args.recipe and not args.recipe_image:
        raise InputError("--recipe: needs --recipe-image IMAGE (the reference photo to draw it on)")
    if not args.archive and not args.recipe_image:
        raise InputError("review: give --archive ARCHIVE, --recipe-image IMAGE, or both")
    key_dir = None
    if args.key_dir:
        key_dir = Path(args.key_dir)
        if not key_dir.is_dir():
            raise InputError(f"--key-dir {args.key_dir}: not a folder (allowed: the folder that holds the key files)")
    recipe_image, recipe_file, recipe_dir = _recipe_flags(args, console)
    root = args.archive
    batches = 0
    if root:
        with location.open_archive(root) as arc:  # refuses a damaged or foreign index before the server starts
            batches = len(arc.batches())
    remote = not is_loopback(args.host)
    config = ReviewConfig(
        root,
        read_only=args.read_only,
        key_dir=key_dir,
        remote=remote,
        recipe_image=recipe_image,
        recipe_file=recipe_file,
        recipe_dir=recipe_dir,
    )
    if remote:
        console.warn(
            f"serving on {args.host}: anyone who can reach it can browse; every disposition and sign-off needs an "
            "enrolled key and its passphrase, and recipes are not saved. Use it on a trusted plant network only "
            "(the connection is not encrypted)."
        )
    from ..review.app import create_app

    app = create_app(config)  # reads the reference photo and the recipe: a bad one is refused before serving
    url = f"http://{args.host}:{args.port}"
    what = f"review station for {root} ({batches} batch(es)) at {url}/" if root else "review station:"
    if recipe_image:
        what += f"{';' if root else ''} recipe page at {url}/recipe on {recipe_image} (recipes saved into {recipe_dir})"
    console.info(f"{what} - Ctrl-C stops it")
    serve(app, args.host, args.port)
    return 0


def _recipe_flags(args: argparse.Namespace, console: Console):
    """The recipe page's reference, the recipe to edit and the folder to save into, each checked (exit 2)."""
    if args.recipe_dir and not args.recipe_image:
        raise InputError("--recipe-dir: needs --recipe-image IMAGE")
    if not args.recipe_image:
        return None, None, None
    from ._checks import load_recipe

    image = Path(args.recipe_image)
    recipe = Path(args.recipe) if args.recipe else None
    if recipe is not None:
        load_recipe(recipe, console)  # every problem named, exit 2, as `surfinspect check` does
    folder = Path(args.recipe_dir) if args.recipe_dir else (recipe.parent if recipe else Path.cwd())
    if not folder.is_dir():
        raise InputError(f"--recipe-dir {folder}: not a folder (allowed: an existing folder to save recipes into)")
    return image, recipe, folder.resolve()
