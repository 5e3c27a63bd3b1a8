"""The command line end to end, through the installed console script."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import cv2
import pytest

from surfinspect.measure import synth

ROOT = Path(__file__).resolve().parents[2]


def _script() -> list[str]:
    here = Path(sys.executable).parent / "surfinspect"
    found = str(here) if here.exists() else shutil.which("surfinspect")
    assert found, "the console script 'surfinspect' is not installed (pip install -e .[test])"
    return [found]


def run(*args, cwd=None):
    return subprocess.run(_script() + [str(a) for a in args], capture_output=True, text=True, cwd=cwd, timeout=300)


RECIPE = """\
recipe: cli-panel
revision: 2
regions:
  - name: face
    rect: [10, 10, 300, 220]
    lay_deg: 90
    tolerance_deg: 3
"""


@pytest.fixture
def setup(tmp_path: Path):
    recipe = tmp_path / "panel.yaml"
    recipe.write_text(RECIPE)
    good = tmp_path / "good.png"
    off = tmp_path / "off.png"
    blank = tmp_path / "blank.png"
    cv2.imwrite(str(good), synth.to_uint8(synth.brushed_panel((240, 320), 90.5, seed=1)))
    cv2.imwrite(str(off), synth.to_uint8(synth.brushed_panel((240, 320), 96.0, seed=2)))
    cv2.imwrite(str(blank), synth.to_uint8(synth.polished_blank((240, 320), seed=3)))
    return tmp_path, recipe, good, off, blank


def test_inspect_accepts_a_good_part_and_writes_outputs(setup):
    tmp, recipe, good, _, _ = setup
    out = tmp / "out"
    p = run("inspect", recipe, good, "--out", out)
    assert p.returncode == 0, p.stderr
    assert "good" in p.stdout and "pass (accept)" in p.stdout
    d = json.loads((out / "good.json").read_text())
    assert d["schema"] == "surfinspect.part-result/1" and d["verdict"] == "accept"
    assert abs(d["regions"][0]["deviation_deg"] - 0.5) < 0.2
    assert (out / "good.overlay.png").stat().st_size > 0
    assert (out / "report.pdf").read_bytes()[:5] == b"%PDF-"
    assert not list(out.glob(".*.part"))  # no temporary files left behind


def test_exit_codes_reject_and_review(setup):
    tmp, recipe, good, off, blank = setup
    assert run("inspect", recipe, good, off, "--out", tmp / "o1", "--no-report").returncode == 1
    p = run("inspect", recipe, good, blank, "--out", tmp / "o2", "--no-report")
    assert p.returncode == 3, p.stdout
    assert "no measurable texture" in p.stdout


def _assert_input_error(p, *fragments):
    assert p.returncode == 2, (p.stdout, p.stderr)
    assert "Traceback" not in p.stderr
    lines = [ln for ln in p.stderr.splitlines() if ln.startswith("surfinspect: error:")]
    assert lines, p.stderr
    for f in fragments:
        assert any(f in ln for ln in lines), (f, p.stderr)


def test_bad_recipe_exit_2_and_nothing_written(setup):
    tmp, _, good, _, _ = setup
    bad = tmp / "bad.yaml"
    bad.write_text(RECIPE.replace("tolerance_deg", "tolerence_deg"))
    out = tmp / "never"
    p = run("inspect", bad, good, "--out", out)
    _assert_input_error(p, "bad.yaml:7: regions[0](face).tolerence_deg: unknown key")
    assert not out.exists()
    _assert_input_error(run("check", bad), "tolerence_deg: unknown key")


def test_unreadable_image_exit_2_and_nothing_written_for_it(setup):
    tmp, recipe, good, _, _ = setup
    broken = tmp / "broken.png"
    broken.write_bytes(good.read_bytes()[:300])
    out = tmp / "out"
    p = run("inspect", recipe, broken, good, "--out", out, "--no-report")
    _assert_input_error(p, "broken.png")
    assert not (out / "broken.json").exists() and not (out / "broken.overlay.png").exists()
    assert (out / "good.json").exists()  # the other part is still inspected
    fresh = tmp / "fresh"
    _assert_input_error(
        run("inspect", recipe, tmp / "missing.png", "--out", fresh), "missing.png: image file not found"
    )
    assert not fresh.exists()  # not even an empty output folder is left behind


def test_region_outside_image_exit_2(setup):
    tmp, _, good, _, _ = setup
    r = tmp / "big.yaml"
    r.write_text(RECIPE.replace("[10, 10, 300, 220]", "[10, 10, 500, 220]"))
    out = tmp / "out"
    _assert_input_error(run("inspect", r, good, "--out", out), "regions(face): region lies outside the image")
    assert not (out / "good.json").exists()


def test_check_accepts_bundled_recipes():
    p = run("check", *sorted((ROOT / "recipes").glob("*.yaml")))
    assert p.returncode == 0, p.stderr
    assert "ok: recipe lw-220-wall-panel" in p.stdout


def test_usage_errors_exit_2():
    p = run("inspect")
    assert p.returncode == 2 and "Traceback" not in p.stderr
    assert run("no-such-command").returncode == 2


def test_demo_runs_the_scenario(tmp_path: Path):
    p = run("demo", "--out", tmp_path / "demo", "--project", ROOT)
    assert p.returncode == 1, p.stderr  # the demo batch holds rejects on purpose
    assert "4 accept, 3 reject, 1 review" in p.stdout
    assert "\\" not in p.stdout  # no escaped control character in our own messages
    verdicts = {f.stem: json.loads(f.read_text())["verdict"] for f in (tmp_path / "demo").rglob("*.json")}
    assert verdicts["lw-220-0003"] == "reject" and verdicts["lw-220-0005"] == "review"
    assert verdicts["cp-14-0001"] == "accept" and verdicts["cp-14-0003"] == "reject"
    assert (tmp_path / "demo" / "lw-220-wall-panel" / "report.pdf").exists()


def test_demo_parts_regenerate_identically(tmp_path: Path):
    # demo_parts/ is made by surfinspect.measure.synth with fixed seeds: regenerating gives the same pixels
    from surfinspect.station.demo import make_demo_parts

    for path in make_demo_parts(tmp_path):
        stored = cv2.imread(str(ROOT / "demo_parts" / path.name), cv2.IMREAD_UNCHANGED)
        again = cv2.imread(str(path), cv2.IMREAD_UNCHANGED)
        assert stored is not None and (stored == again).all(), path.name


def test_output_folder_that_is_a_file_is_an_input_error(setup):
    tmp, recipe, good, _, _ = setup
    blocker = tmp / "taken"
    blocker.write_text("not a folder")
    _assert_input_error(run("inspect", recipe, good, "--out", blocker), "--out", "not a folder")
    _assert_input_error(run("demo", "--out", blocker, "--project", ROOT), "not a folder")
    assert blocker.read_text() == "not a folder"


def test_an_error_found_on_an_image_names_the_image(setup):
    tmp, _, good, _, _ = setup
    r = tmp / "wide.yaml"
    r.write_text(RECIPE.replace("[10, 10, 300, 220]", "[10, 10, 500, 220]"))
    p = run("inspect", r, good, "--out", tmp / "o")
    _assert_input_error(p, f"{good}: {r}:")
