"""``surfinspect batch``: inspect a folder of images in parallel into the archive.

Exit code: 1 when any part is rejected, else 3 when any part needs review or
was not inspected (an unreadable, refused or damaged file), else 0; 2 for an
input error that stops the whole batch and for a batch that stopped before
every part was recorded (a worker that ended, a full disk: the reason is
printed; run again to finish). See :mod:`surfinspect.station.batch`.
Stopped by a signal (Ctrl-C, SIGTERM, SIGHUP), the batch ends its worker
processes and exits with 128 + the signal number, as a shell reports a
process killed by that signal: 130 for SIGINT, 143 for SIGTERM, 129 for SIGHUP.
"""

from __future__ import annotations

import argparse
import contextlib
import shlex
import signal
import threading
from pathlib import Path
from typing import Callable, Iterator

from .._lazy import module
from ..errors import EXIT_INPUT_ERROR, InputError
from ..fsutil import OutputFolder
from ._checks import batch_owner, load_recipe
from ._keys import open_key
from ._options import add_archive_option, add_overwrite_option
from .console import Console

archive = module("surfinspect.archive.store")
backend = module("surfinspect.archive.backend")
sqlite3 = module("sqlite3")
location = module("surfinspect.archive.location")
batch = module("surfinspect.station.batch")
retry = module("surfinspect.station.retry")

HELP = "inspect every image in a folder (in parallel) into the archive, with report and CSV; resumable"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("recipe", metavar="RECIPE", help="the recipe YAML file")
    parser.add_argument("folder", metavar="FOLDER", help="folder of images (PNG, TIFF, JPEG, BMP)")
    add_archive_option(parser, made=True)
    parser.add_argument(
        "--batch-id",
        required=True,
        metavar="ID",
        help="the batch id; run again with the same id to finish a stopped batch",
    )
    parser.add_argument("--jobs", type=int, metavar="N", help="worker processes (default: every core)")
    parser.add_argument(
        "--scheduler",
        metavar="tcp://HOST:PORT",
        help="inspect on this Dask scheduler's workers instead (images are sent to them; the archive stays here)",
    )
    parser.add_argument("--operator", metavar="NAME", help="operator name for the report")
    parser.add_argument("--recursive", action="store_true", help="take images from sub-folders too")
    parser.add_argument(
        "--out",
        metavar="DIR",
        help="also write each part's JSON and overlay, report.pdf and regions.csv here "
        "(a new or empty folder, or one holding this batch's earlier copy)",
    )
    add_overwrite_option(parser, with_out=True)
    parser.add_argument(
        "--retry-errors",
        action="store_true",
        help="re-inspect only the parts of this finished batch recorded as not-inspected (their images fixed on "
        "disk) and write a new report edition; earlier sign-offs stay valid for the edition they signed",
    )
    parser.add_argument(
        "--station-key",
        metavar="KEYFILE",
        help="the station's private key (enrolled with role station): signs the chain head when the batch closes",
    )
    parser.add_argument(
        "--passphrase-env", metavar="VAR", help="environment variable holding the station key's passphrase"
    )


class _Progress:
    """A progress bar on a terminal, one plain line per part otherwise."""

    def __init__(self, console: Console):
        self.console = console
        self.bar = None
        self.last: batch.PartDone | None = None
        if console.is_terminal and not console.quiet:
            from tqdm import tqdm

            self.bar = tqdm(file=console.err, unit="part", dynamic_ncols=True)

    def __call__(self, done: batch.PartDone) -> None:
        self.last = done
        if self.bar is not None:
            self.bar.total = done.total
            self.bar.n = done.done
            self.bar.set_postfix_str(f"{done.part_key}: {done.verdict}", refresh=True)
        else:
            note = f" ({_reason(done.part_key, done.error)})" if done.error else ""
            self.console.info(f"[{done.done}/{done.total}] {done.part_key}: {done.verdict}{note}")

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
            self.bar = None


class _Stopped(BaseException):
    """A stop signal, raised in the main thread (a BaseException, like KeyboardInterrupt, so nothing swallows it)."""

    def __init__(self, signum: int):
        super().__init__(signum)
        self.signum = signum


#: Signals that stop a batch cleanly; SIGHUP (a closed terminal) is missing on some systems.
_STOP_SIGNALS = tuple(getattr(signal, name) for name in ("SIGINT", "SIGTERM", "SIGHUP") if hasattr(signal, name))


def _raise_stopped(signum: int, frame) -> None:
    for sig in _STOP_SIGNALS:  # a second signal must not cut the clean-up of the first short
        signal.signal(sig, signal.SIG_IGN)
    raise _Stopped(signum)


@contextlib.contextmanager
def on_stop_signals(handler: Callable[[int, object], None] = _raise_stopped) -> Iterator[None]:
    """Call ``handler`` on SIGINT, SIGTERM and SIGHUP inside the block (main thread only), then restore."""
    if threading.current_thread() is not threading.main_thread():
        yield  # handlers can be set in the main thread only
        return
    previous = {sig: signal.signal(sig, handler) for sig in _STOP_SIGNALS}
    try:
        yield
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)


def batch_fields(args: argparse.Namespace) -> dict:
    """The configuration fields ``batch`` and ``watch`` share, from their common arguments."""
    return dict(
        recipe_path=Path(args.recipe),
        folder=Path(args.folder),
        archive_dir=args.archive,
        batch_id=args.batch_id,
        jobs=args.jobs,
        operator=args.operator,
    )


def run(args: argparse.Namespace, console: Console) -> int:
    if args.scheduler and args.jobs is not None:
        raise InputError("--jobs: not with --scheduler (the cluster's workers are the parallelism)")
    config = batch.BatchConfig(
        **batch_fields(args),
        scheduler=args.scheduler,
        recursive=args.recursive,
        out_dir=Path(args.out) if args.out else None,
        station_key=open_key(args.station_key, args.passphrase_env, "--station-key") if args.station_key else None,
    )
    load_recipe(args.recipe, console)  # its notices; a bad recipe stops here, before the output folder is touched
    folder = None
    if args.out:
        folder = OutputFolder(
            args.out, "--out", overwrite=args.overwrite, owner=batch_owner(args.archive, args.batch_id)
        )
    progress = _Progress(console)
    try:
        if folder is not None:
            folder.claim()
        with on_stop_signals():
            outcome = retry.retry_errors(config) if args.retry_errors else batch.run_batch(config, on_part=progress)
    except _Stopped as stop:
        progress.close()  # the bar's last line first, then the message
        console.error(
            f"batch {args.batch_id}: interrupted ({signal.Signals(stop.signum).name}); {_recorded(progress)}; "
            "run again with the same --batch-id to finish"
        )
        return 128 + stop.signum
    except (
        OSError,
        sqlite3.Error,
        backend.IndexDamaged,
        backend.IndexBusy,
    ) as exc:  # the archive cannot be written: a full disk
        progress.close()
        console.error(
            f"batch {args.batch_id}: stopped: {_write_failure(exc)}; {_recorded(progress)}; "
            "free the space and run again with the same --batch-id to finish"
        )
        return EXIT_INPUT_ERROR
    finally:
        progress.close()
        written = folder.finish() if folder is not None else []
    if args.retry_errors:
        return _say_retried(outcome, args, console, written)
    counts = outcome.counts
    if outcome.was_finished:
        console.info(f"batch {outcome.batch_id} was already finished: nothing inspected")
    elif outcome.resumed:
        console.info(f"batch {outcome.batch_id} resumed: {outcome.inspected_now} part(s) inspected now")
    summary = ", ".join(
        f"{counts[v]} {v}" for v in ("accept", "reject", "review", archive.ERROR_VERDICT, "pending") if counts[v]
    )
    console.info(f"batch {outcome.batch_id}: {len(outcome.parts)} parts: {summary}")
    if not args.recursive:
        _say_what_sub_folders_hold(args, console)
    for key, message in outcome.errors:
        console.warn(f"{key}: {archive.ERROR_VERDICT}: {_reason(key, message)}")
    if outcome.interruption:
        console.error(f"batch {outcome.batch_id} is not finished: {outcome.interruption}")
    elif written:
        console.info(f"report, CSV, results and overlays: wrote {len(written)} file(s) to {args.out}")
    else:
        _say_where_the_report_is(args, console)
    return outcome.exit_code


def _say_retried(outcome, args: argparse.Namespace, console: Console, written: list) -> int:
    """What ``--retry-errors`` did, part by part, and where the new edition is."""
    word = archive.ERROR_VERDICT
    if outcome.nothing_to_retry:
        console.info(f"batch {outcome.batch_id}: nothing to retry: no part is recorded as {word}")
        return outcome.exit_code
    verdicts = {p.part_key: p.verdict for p in outcome.parts}
    for key in outcome.retried:
        console.info(f"{key}: re-inspected: {verdicts[key]} (was {word})")
    for key, message in outcome.still:
        console.warn(f"{key}: still {word}: {_reason(key, message)}")
    if outcome.interruption:
        console.error(f"batch {outcome.batch_id}: retry not recorded: {outcome.interruption}; run the command again")
        return outcome.exit_code
    counts = archive.verdict_counts(outcome.parts)
    summary = ", ".join(f"{counts[v]} {v}" for v in ("accept", "reject", "review", word) if counts[v])
    if outcome.retried:
        console.info(
            f"batch {outcome.batch_id}: report edition {outcome.edition} written ({len(outcome.parts)} parts: "
            f"{summary}); sign-offs of earlier editions stay valid for the edition they signed"
        )
    else:
        console.info(f"batch {outcome.batch_id}: nothing recorded; the report stays edition {outcome.edition}")
    if written:
        console.info(f"report, CSV, results and overlays: wrote {len(written)} file(s) to {args.out}")
    elif outcome.retried:
        _say_where_the_report_is(args, console)
    return outcome.exit_code


def _reason(key: str, message: str) -> str:
    """An error record's message without the part key it starts with (the line names the part already)."""
    return message[len(key) + 2 :] if message.startswith(f"{key}: ") else message


def _recorded(progress: _Progress) -> str:
    done = progress.last
    return f"{done.done} of {done.total} part(s) recorded" if done else "no part recorded in this run"


def _write_failure(exc: BaseException) -> str:
    if isinstance(exc, OSError):
        return f"cannot write {exc.filename or 'the archive'} ({exc.strerror or exc})"
    return f"cannot write the archive index ({exc})"


def _say_where_the_report_is(args: argparse.Namespace, console: Console) -> None:

    with location.open_archive(args.archive) as arc:
        report = arc.batch(args.batch_id).report_sha256
        if report is None:
            return
        console.info(f"report (a PDF stored under its hash, without a suffix): {arc.object_path(report)}")
    console.info(
        "readable copies (report.pdf, regions.csv, each part's JSON and overlay): "
        f"surfinspect show --archive {shlex.quote(args.archive)} --batch-id {args.batch_id} --out DIR"
    )


def _say_what_sub_folders_hold(args: argparse.Namespace, console: Console) -> None:
    """Without --recursive, say how many images the folder's sub-folders hold that were not taken."""
    from ..errors import InputError

    own = [Path(args.archive)] + ([Path(args.out)] if args.out else [])
    try:
        found = batch.discover_images(Path(args.folder), recursive=True, exclude=own)
        below = [f.key for f in found if "/" in f.key]
    except InputError:
        return
    if below:
        folders = sorted({key.rsplit("/", 1)[0] for key in below})
        console.notice(
            f"{len(below)} image(s) in {len(folders)} sub-folder(s) of {args.folder} were not taken "
            f"(first: {folders[0]}/); give --recursive to inspect them too"
        )
