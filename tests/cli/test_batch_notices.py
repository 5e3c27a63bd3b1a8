"""batch says what it did not take: images in sub-folders without --recursive."""

from __future__ import annotations

import cv2

from surfinspect.cli.main import main
from surfinspect.measure import synth

RECIPE = (
    "recipe: t\nrevision: 1\nregions:\n  - name: face\n    rect: [8, 8, 112, 112]\n    lay_deg: 90\n    cell_px: 32\n"
)


def test_images_in_sub_folders_are_named_when_not_taken(tmp_path, capsys):
    folder = tmp_path / "in"
    (folder / "line-2").mkdir(parents=True)
    image = synth.to_uint8(synth.brushed_panel((128, 128), 90.0, seed=5))
    cv2.imwrite(str(folder / "a.png"), image)
    cv2.imwrite(str(folder / "line-2" / "a.png"), image)
    (tmp_path / "t.yaml").write_text(RECIPE)
    args = ["batch", str(tmp_path / "t.yaml"), str(folder), "--archive", str(tmp_path / "arc"), "--jobs", "1"]
    assert main([*args, "--batch-id", "N1"]) == 0
    err = capsys.readouterr().err
    assert "notice: 1 image(s) in 1 sub-folder(s) of" in err and "(first: line-2/); give --recursive" in err
    assert main([*args, "--batch-id", "N2", "--recursive"]) == 0
    assert "sub-folder" not in capsys.readouterr().err
