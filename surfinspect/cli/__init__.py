"""The command line: the dispatcher (``main``), all terminal output (``console``) and one thin
module per command (parse, call the library, print, exit code). The top room: it may import
every other one; nothing imports it."""

from .main import build_parser, main

__all__ = ["build_parser", "main"]
