"""Every command that takes ``--archive`` opens it through the one function that reads the string."""

from __future__ import annotations

import ast
from pathlib import Path

import surfinspect.cli

CLI = Path(surfinspect.cli.__file__).parent


def test_every_archive_option_goes_through_open_archive():
    takers = []
    for module in sorted(CLI.glob("*.py")):
        text = module.read_text(encoding="utf-8")
        if '"--archive"' not in text:
            continue
        takers.append(module.stem)
        tree = ast.parse(text)
        direct = [
            n.lineno
            for n in ast.walk(tree)
            if isinstance(n, ast.Call) and isinstance(n.func, ast.Attribute) and n.func.attr == "Archive"
        ]
        assert not direct, f"{module.name}: opens Archive(...) directly at line(s) {direct}; use open_archive"
        assert "postgresql://" in text, f"{module.name}: the --archive help does not show the PostgreSQL form"
    assert {"batch", "show", "sign", "verify", "disposition", "signers", "owner", "rejudge"} <= set(takers)
