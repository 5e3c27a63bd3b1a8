"""The per-part runner: part names."""

from __future__ import annotations


def test_part_names_show_the_folder_only_when_file_names_clash():
    from surfinspect.station.runner import part_names

    assert part_names(["in/a.png", "in/b.png"]) == ["a.png", "b.png"]
    assert part_names(["line-1/a.png", "line-2/a.png", "line-2/b.png"]) == ["line-1/a.png", "line-2/a.png", "b.png"]
    assert part_names(["x/line/a.png", "y/line/a.png"]) == ["x/line/a.png", "y/line/a.png"]
