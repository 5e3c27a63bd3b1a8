"""All terminal output of the command line goes through here."""

from __future__ import annotations

import sys
from typing import Sequence, TextIO


class Console:
    """Plain-text terminal output: results to stdout, problems to stderr."""

    def __init__(self, out: TextIO | None = None, err: TextIO | None = None, *, quiet: bool = False):
        self.out = out or sys.stdout
        self.err = err or sys.stderr
        self.quiet = quiet
        self._status_shown = False

    @property
    def is_terminal(self) -> bool:
        return hasattr(self.err, "isatty") and self.err.isatty()

    def info(self, text: str) -> None:
        if not self.quiet:
            print(text, file=self.out, flush=True)

    def error(self, text: str) -> None:
        self._end_status()
        print(f"surfinspect: error: {text}", file=self.err, flush=True)

    def warn(self, text: str) -> None:
        self._end_status()
        print(f"surfinspect: warning: {text}", file=self.err, flush=True)

    def note(self, text: str) -> None:
        """A message for the person at the terminal, on stderr (where stdout carries records)."""
        if not self.quiet:
            self._end_status()
            print(text, file=self.err, flush=True)

    def record(self, line: str) -> None:
        """One machine-readable line on stdout, flushed at once (JSON lines for scripts)."""
        print(line, file=self.out, flush=True)

    def status(self, text: str) -> None:
        """A live status line on stderr, rewritten in place; only on a terminal."""
        if self.quiet or not self.is_terminal:
            return
        self.err.write("\r" + text + "\x1b[K")
        self.err.flush()
        self._status_shown = bool(text)

    def _end_status(self) -> None:
        if self._status_shown:
            self.err.write("\n")
            self._status_shown = False

    def notice(self, text: str) -> None:
        """Something to act on later that does not stop the run (an old recipe key name, ...)."""
        if not self.quiet:
            self._end_status()
            print(f"surfinspect: notice: {text}", file=self.err, flush=True)

    def table(self, header: Sequence[str], rows: Sequence[Sequence[object]]) -> None:
        """Print a left-aligned text table; numbers right-aligned."""
        if self.quiet:
            return
        cells = [[str(h) for h in header]] + [["" if c is None else str(c) for c in r] for r in rows]
        widths = [max(len(r[i]) for r in cells) for i in range(len(header))]
        numeric = [
            all(_looks_numeric(r[i]) for r in cells[1:] if r[i]) and any(r[i] for r in cells[1:])
            for i in range(len(header))
        ]
        for k, r in enumerate(cells):
            parts = [c.rjust(w) if numeric[i] and k else c.ljust(w) for i, (c, w) in enumerate(zip(r, widths))]
            print("  ".join(parts).rstrip(), file=self.out)
            if k == 0:
                print("  ".join("-" * w for w in widths), file=self.out)
        self.out.flush()


def _looks_numeric(s: str) -> bool:
    try:
        float(s.replace("°", "").replace("%", "").replace("+", ""))
        return True
    except ValueError:
        return s in ("-", "—")
