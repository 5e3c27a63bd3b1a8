"""Command-line entry point: parse arguments, dispatch, map outcomes to exit codes.

Each sub-command lives in ``surfinspect/cli/<name>.py`` and provides
``HELP`` (one line), ``add_arguments(parser)`` and ``run(args, console) -> int``.
Input errors raised anywhere below become one line on stderr and exit code 2.

Start-up: a command module imports only the standard library and the light
shared modules at module level (its heavy imports - OpenCV, SciPy, scikit-image,
reportlab, cryptography, NumPy - happen inside ``run``), and only the chosen
command's ``add_arguments`` runs, so ``--version``, ``--help`` and ``check``
start in a few tens of milliseconds (``tests/benchmarks/bench_startup.py``).
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
from typing import Sequence

from .._version import __version__
from ..errors import EXIT_INPUT_ERROR, IndexBusy, IndexDamaged, InputError
from .console import Console

#: Environment variable: when set, an internal error shows its traceback instead of one line.
DEBUG_ENV = "SURFINSPECT_DEBUG"

#: Sub-commands in the order ``--help`` lists them.
COMMANDS = (
    "inspect",
    "check",
    "demo",
    "batch",
    "watch",
    "keygen",
    "owner",
    "owner-certificate",
    "signers",
    "sign",
    "disposition",
    "verify",
    "show",
    "archive",
    "rejudge",
    "target",
    "bias",
    "gauge",
    "review",
)


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # argparse's own usage errors exit 2 too, in one line
        self.print_usage(sys.stderr)
        print(f"surfinspect: error: {message}", file=sys.stderr)
        raise SystemExit(EXIT_INPUT_ERROR)


def build_parser(only: str | None = None) -> argparse.ArgumentParser:
    """The parser of every command; with ``only``, that command alone with its flags ("": every command, no flags).

    The top-level usage then lists the one command; its module is the only command module imported.
    """
    parser = _Parser(prog="surfinspect", description="Measure and judge the surface lay of panels.")
    parser.add_argument("--version", action="version", version=f"surfinspect {__version__}")
    parser.add_argument("-q", "--quiet", action="store_true", help="print nothing but errors")
    # -q also after the command name; SUPPRESS keeps the sub-parser from resetting a -q given before it
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument(
        "-q", "--quiet", action="store_true", default=argparse.SUPPRESS, help="print nothing but errors"
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    # a chosen command needs its own module only; the list of commands (--help, --version) needs every HELP
    for name in (only,) if only else COMMANDS:
        module_name = name.replace("-", "_")  # owner-certificate lives in owner_certificate.py
        try:
            module = importlib.import_module(f".{module_name}", __package__)
        except ModuleNotFoundError as exc:
            if exc.name == f"{__package__}.{module_name}":
                continue  # command not built yet
            raise
        p = sub.add_parser(name, help=module.HELP, description=module.HELP, parents=[common])
        if only is None or only == name:
            module.add_arguments(p)
        p.set_defaults(_run=module.run, _parser=p)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    words = list(sys.argv[1:] if argv is None else argv)
    chosen = next((w for w in words if not w.startswith("-")), None)
    parser = build_parser(chosen if chosen in COMMANDS else "")  # "": the list of commands only
    args, unknown = parser.parse_known_args(argv)
    if unknown:  # name them with the sub-command's own usage, not the top-level one
        getattr(args, "_parser", parser).error(f"unrecognized arguments: {' '.join(unknown)}")
    console = Console(quiet=args.quiet)
    if not getattr(args, "_run", None):
        parser.print_help()
        return EXIT_INPUT_ERROR
    try:
        return int(args._run(args, console))
    except InputError as exc:
        for line in exc.problems:
            console.error(line)
        return EXIT_INPUT_ERROR
    except (IndexDamaged, IndexBusy) as exc:  # an archive index that cannot be read or written
        console.error(f"archive index: {exc} (`surfinspect verify --archive DIR` names what is wrong)")
        return EXIT_INPUT_ERROR
    except OSError as exc:
        # an output that cannot be written (a file where a folder is wanted, no permission, disk
        # full): a usage problem, not a verdict. Writes are atomic, so nothing half-written remains.
        where = exc.filename or "output"
        console.error(f"{where}: cannot write or read ({exc.strerror or exc.__class__.__name__})")
        return EXIT_INPUT_ERROR
    except KeyboardInterrupt:
        console.error("interrupted")
        return 130
    except Exception as exc:  # a bug: never a traceback that exits 1, which would read as "rejected"
        if os.environ.get(DEBUG_ENV):
            raise
        console.error(
            f"internal error, not a verdict ({type(exc).__name__}: {exc}); "
            f"please report it with the command that was run (set {DEBUG_ENV}=1 for the traceback)"
        )
        return EXIT_INPUT_ERROR


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
