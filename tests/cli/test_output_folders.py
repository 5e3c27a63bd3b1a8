"""Output folders never mix runs (README, "Output folders"): refused when not empty, unless
--overwrite, which removes only what surfinspect listed there; a batch's own copy is replaced."""

from __future__ import annotations

import cv2
import pytest

from surfinspect.cli.main import main
from surfinspect.errors import InputError
from surfinspect.fsutil import WRITTEN_LIST, OutputFolder
from surfinspect.measure import synth

RECIPE = (
    "recipe: t\nrevision: 1\nregions:\n  - name: face\n    rect: [8, 8, 112, 112]\n    lay_deg: 90\n    cell_px: 32\n"
)


@pytest.fixture
def part(tmp_path):
    image = tmp_path / "p-1.png"
    cv2.imwrite(str(image), synth.to_uint8(synth.brushed_panel((128, 128), 90.0, seed=3)))
    recipe = tmp_path / "t.yaml"
    recipe.write_text(RECIPE)
    return recipe, image


def test_inspect_refuses_a_folder_holding_files_and_writes_nothing(part, tmp_path, capsys):
    recipe, image = part
    out = tmp_path / "out"
    out.mkdir()
    (out / "older.json").write_text("{}")
    assert main(["inspect", str(recipe), str(image), "--out", str(out), "--no-report"]) == 2
    err = capsys.readouterr().err
    assert "--out" in err and "not empty" in err and "older.json" in err and "--overwrite" in err
    assert sorted(p.name for p in out.iterdir()) == ["older.json"]


def test_overwrite_removes_only_what_the_tool_wrote(part, tmp_path, capsys):
    recipe, image = part
    out = tmp_path / "out"
    assert main(["inspect", str(recipe), str(image), "--out", str(out), "--no-report"]) == 0
    assert f"wrote 2 file(s) to {out}" in capsys.readouterr().out
    listed = (out / WRITTEN_LIST).read_text().splitlines()
    assert [ln for ln in listed if not ln.startswith("#")] == ["p-1.json", "p-1.overlay.png"]
    (out / "notes.txt").write_text("the inspector's own file")
    # a second run into it: refused, then with --overwrite the old results go and notes.txt stays
    assert main(["inspect", str(recipe), str(image), "--out", str(out), "--no-report"]) == 2
    (out / "p-1.json").write_text("stale")
    assert main(["inspect", str(recipe), str(image), "--out", str(out), "--no-report", "--overwrite"]) == 0
    assert (out / "notes.txt").read_text() == "the inspector's own file"
    assert (out / "p-1.json").read_text() != "stale"
    assert sorted(p.name for p in out.iterdir()) == sorted([WRITTEN_LIST, "notes.txt", "p-1.json", "p-1.overlay.png"])


def test_overwrite_never_follows_a_listed_name_out_of_the_folder(tmp_path):
    out, outside = tmp_path / "out", tmp_path / "keep.txt"
    out.mkdir()
    outside.write_text("not ours")
    (tmp_path / "elsewhere").mkdir()
    (tmp_path / "elsewhere" / "link").symlink_to(outside)
    (out / "via").symlink_to(tmp_path / "elsewhere")
    listed = ["../keep.txt", str(outside), str(tmp_path / "elsewhere" / "link"), "via/link"]
    (out / WRITTEN_LIST).write_text("# list\n" + "\n".join(listed) + "\n")
    OutputFolder(out, "--out", overwrite=True).claim()
    assert outside.read_text() == "not ours" and (tmp_path / "elsewhere" / "link").is_symlink()


def test_a_refused_run_lists_nothing_as_its_own(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "theirs.txt").write_text("x")
    folder = OutputFolder(out, "--out")
    with pytest.raises(InputError, match=r"--out .*not empty \(1 file\(s\), e.g. theirs.txt\)"):
        folder.claim()
    assert folder.finish() == [] and not (out / WRITTEN_LIST).exists()


def test_same_owner_replaces_its_own_copy_but_not_another_owners(tmp_path):
    out = tmp_path / "out"
    first = OutputFolder(out, "--out", owner="batch B1").claim()
    out.mkdir()
    (out / "report.signed-1.pdf").write_bytes(b"%PDF B1 signed")
    assert [p.name for p in first.finish()] == ["report.signed-1.pdf"]
    OutputFolder(out, "--out", owner="batch B1").claim()  # B1 again: its old copy goes first
    assert not (out / "report.signed-1.pdf").exists()
    again = OutputFolder(out, "--out", owner="batch B1").claim()
    (out / "report.signed-1.pdf").write_bytes(b"%PDF B1 signed")
    again.finish()
    # another batch's files would make an unsigned batch look signed: refused
    with pytest.raises(InputError, match=r"not empty"):
        OutputFolder(out, "--out", owner="batch B2").claim()
    assert (out / "report.signed-1.pdf").exists()
