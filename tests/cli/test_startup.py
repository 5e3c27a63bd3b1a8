"""Start-up: the command line loads no heavy library before a command runs (times: tests/benchmarks/bench_startup.py)."""

from __future__ import annotations

import subprocess
import sys

import pytest

from surfinspect.cli import disposition, sign
from surfinspect.cli.main import COMMANDS
from surfinspect.results import SIGNOFF_MEANINGS

HEAVY = ("cv2", "scipy", "skimage", "reportlab", "cryptography", "numpy", "PIL", "sqlite3")

_PROBE = """
import sys
from surfinspect.cli.main import main
try:
    main({argv!r})
except SystemExit:
    pass
print("loaded:", *sorted(m for m in {heavy!r} if m in sys.modules))
"""


@pytest.mark.parametrize(
    "argv, allowed",
    [
        (["--version"], ()),
        (["--help"], ()),
        (["check", "recipes/lw-220-wall-panel.yaml"], ()),
        # the flags of a command may need its library (the choices of sign and disposition, the dpi range
        # of target): those load for their own --help only
        *[([c, "--help"], ()) for c in COMMANDS if c not in ("target", "bias", "gauge", "sign", "disposition")],
    ],
)
def test_no_heavy_library_is_loaded_before_a_command_runs(argv, allowed):
    code = _PROBE.format(argv=argv, heavy=HEAVY)
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    loaded = done.stdout.strip().splitlines()[-1].split()[1:]
    assert [m for m in loaded if m not in allowed] == []


def test_help_texts_written_out_match_the_archives_words():
    from surfinspect.archive import signatures

    assert f"({', '.join(SIGNOFF_MEANINGS[:2])} or {SIGNOFF_MEANINGS[2]})" in sign.HELP
    assert f"({', '.join(signatures.DECISIONS)})" in disposition.HELP


_LOADED_OURS = """
import sys
from surfinspect.cli.main import main
try:
    main({argv!r})
except SystemExit:
    pass
print("loaded:", *sorted(m for m in sys.modules if m.startswith("surfinspect.")))
"""


def test_check_loads_its_own_command_module_and_no_writer():
    # `check` writes nothing: no other command's module, no fsutil (hashing, temporary files), no archive room
    code = _LOADED_OURS.format(argv=["check", "recipes/lw-220-wall-panel.yaml"])
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    loaded = set(done.stdout.strip().splitlines()[-1].split()[1:])
    commands = {f"surfinspect.cli.{c.replace('-', '_')}" for c in COMMANDS}
    assert loaded & commands == {"surfinspect.cli.check"}
    assert not {m for m in loaded if m == "surfinspect.fsutil" or m.startswith("surfinspect.archive")}


def test_inspecting_a_directional_part_loads_neither_scipy_stats_nor_scipy_signal(tmp_path):
    # scipy.stats and scipy.signal cost about 0.4 s and 1 s to load (python -X importtime): the engine takes
    # the t and F distributions from scipy.special, and only crossed regions load scipy.signal
    code = _PROBE.format(
        argv=["-q", "inspect", "recipes/lw-220-wall-panel.yaml", "demo_parts/lw-220-0001.png", "--out", str(tmp_path)],
        heavy=("scipy.stats", "scipy.signal", "scipy.optimize"),
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert done.stdout.strip().splitlines()[-1].split()[1:] == []
    assert (tmp_path / "lw-220-0001.json").is_file()  # it did inspect
