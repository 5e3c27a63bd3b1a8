"""Exceptions that the command line turns into exit codes."""

from __future__ import annotations

#: Exit code of a usage or input error (fixed; :mod:`surfinspect.results` holds the verdict codes).
EXIT_INPUT_ERROR = 2


class InputError(Exception):
    """Bad input: a recipe, an image, a study table or a flag.

    The message is one line (or several, one problem per line) that names the
    file, the field and what is allowed. The command line prints it and exits
    with code 2; nothing is written for the input concerned.
    """

    def __init__(self, message: str, problems: list[str] | None = None):
        super().__init__(message)
        self.problems = problems or [message]


class RecipeError(InputError):
    """One or more problems found while loading a recipe; ``problems`` lists them all."""


class IndexDamaged(Exception):
    """The archive index cannot be read or written as an archive index (damaged, missing table, not a database).

    Raised by the archive's index backends (:mod:`surfinspect.archive.backend`); defined here so that the
    command line maps it to exit code 2 without loading the archive.
    """


class IndexBusy(Exception):
    """The archive index is read-only or locked by another writer beyond the busy timeout."""
