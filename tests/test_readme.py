"""README.md's command table names every flag each command takes (its --help being the other list)."""

from __future__ import annotations

import argparse
from pathlib import Path

import pytest

from surfinspect.cli.main import COMMANDS, build_parser

README = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
TABLE = " ".join(line for line in README.splitlines() if line.startswith("| `surfinspect "))


def _flags(parser: argparse.ArgumentParser) -> set[str]:
    found = set()
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for sub in action.choices.values():
                found |= _flags(sub)
        found |= {o for o in action.option_strings if o.startswith("--") and action.help != argparse.SUPPRESS}
    return found - {"--help", "--quiet"}


@pytest.mark.parametrize("command", COMMANDS)
def test_every_flag_is_in_the_command_table(command):
    parser = build_parser(command)
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction)).choices[command]
    rows = " ".join(row for row in TABLE.split("| `surfinspect ")[1:] if row.startswith((f"{command} ", f"{command}`")))
    assert rows, f"no row for {command}"
    assert sorted(f for f in _flags(sub) if f not in rows) == []
