"""Every command that takes ``--archive`` opens it through the one function that reads the string."""

from __future__ import annotations

import argparse
import ast
from pathlib import Path

import surfinspect.cli
from surfinspect.cli._options import add_archive_option

CLI = Path(surfinspect.cli.__file__).parent


def test_every_archive_option_goes_through_open_archive():
    takers = []
    for module in sorted(CLI.glob("*.py")):
        text = module.read_text(encoding="utf-8")
        if "add_archive_option(" not in text or module.stem == "_options":
            assert '"--archive"' not in text or module.stem == "_options", (
                f"{module.name}: --archive not by add_archive_option"
            )
            continue
        takers.append(module.stem)
        tree = ast.parse(text)
        direct = [
            n.lineno
            for n in ast.walk(tree)
            if isinstance(n, ast.Call) and isinstance(n.func, ast.Attribute) and n.func.attr == "Archive"
        ]
        assert not direct, f"{module.name}: opens Archive(...) directly at line(s) {direct}; use open_archive"
    assert {"batch", "show", "sign", "verify", "disposition", "signers", "owner", "rejudge"} <= set(takers)
    # the one place the option is made shows the PostgreSQL form in every command's help
    parser = argparse.ArgumentParser()
    add_archive_option(parser)
    assert "postgresql://" in parser.format_help()
