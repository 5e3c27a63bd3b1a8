"""Recipe loading and validation."""

from __future__ import annotations

from pathlib import Path

import pytest

from surfinspect import LayPattern, RecipeError, load_recipe, parse_recipe

GOOD = """\
recipe: lw-220-wall-panel
revision: 3
datum: image
defaults:
  tolerance_deg: 2.5
regions:
  - name: face
    rect: [10, 10, 100, 200]
    lay_deg: 90
    exclude:
      - circle: [50, 50, 10]
  - name: pad
    annulus: [100, 100, 10, 40]
    lay: C
  - name: band
    polygon: [[0, 0], [30, 0], [30, 10]]
    lay: "="
    tolerance_deg: 1
"""


def test_good_recipe_parses_into_frozen_dataclasses():
    r = parse_recipe(GOOD, "good.yaml")
    assert r.name == "lw-220-wall-panel" and r.revision == 3
    face, pad, band = r.regions
    assert face.lay_deg == (90.0,) and face.tolerance_deg == 2.5  # from defaults
    assert face.exclude[0].kind == "circle"
    assert pad.lay is LayPattern.CIRCULAR and pad.shape.kind == "annulus"
    assert band.lay is LayPattern.DIRECTIONAL and band.lay_deg == (0.0,) and band.tolerance_deg == 1.0
    assert len(r.sha256) == 64
    with pytest.raises(AttributeError, match="cannot assign"):
        face.name = "x"


def test_load_recipe_hashes_the_file_bytes(tmp_path: Path):
    import hashlib

    p = tmp_path / "r.yaml"
    p.write_text(GOOD)
    assert load_recipe(p).sha256 == hashlib.sha256(p.read_bytes()).hexdigest()


def _problems(text: str) -> list[str]:
    with pytest.raises(RecipeError) as info:
        parse_recipe(text, "bad.yaml")
    return info.value.problems


def test_typo_key_is_named_with_its_line():
    problems = _problems(GOOD.replace("tolerance_deg: 1", "tolerence_deg: 1"))
    assert problems == [
        "bad.yaml:18: regions[2](band).tolerence_deg: unknown key (allowed: name, rect, polygon, circle, annulus, exclude, lay, lay_deg, centre, tolerance_deg, min_coherence, max_coherence, max_deviating_fraction, max_masked_fraction, max_unmeasured_fraction, cell_px, sigma_px, illumination_px, sharpness_period_px)"
    ]


def test_every_problem_is_reported_at_once():
    text = """\
recipe: bad
revision: x
datum: edge
regions:
  - name: face
    rect: [10, 10, -1, 200]
    lay_deg: 190
  - name: face
    lay: Z
"""
    problems = _problems(text)
    assert len(problems) >= 6
    assert "bad.yaml:2: revision: must be a whole number (got 'x')" in problems
    assert "bad.yaml:3: datum: unknown datum (got 'edge', allowed image, part-edge)" in problems
    assert any(p.startswith("bad.yaml:6: regions[0](face).rect: width and height must be > 0") for p in problems)
    assert any(p.startswith("bad.yaml:7: regions[0](face).lay_deg: out of range (got 190") for p in problems)
    assert any("region name 'face' is used twice" in p for p in problems)
    assert any("unknown lay pattern (got 'Z'" in p for p in problems)


@pytest.mark.parametrize(
    "change, message",
    [
        (("lay_deg: 90", "lay_deg: ninety"), r"regions\[0\]\(face\)\.lay_deg: must be a number \(got 'ninety'"),
        (("rect: [10, 10, 100, 200]", "rect: [10, 10]"), r"rect: must be 4 numbers \[x, y, w, h\]"),
        (("revision: 3", "revision: -1"), r"revision: out of range \(got -1, allowed >= 0\)"),
        (
            ("  tolerance_deg: 2.5", "  tolerance_deg: 0"),
            r"defaults\.tolerance_deg: out of range \(got 0, allowed > 0 and <= 45\)",
        ),
        (("lay: C", "lay: C\n    lay_deg: 10"), r"regions\[1\]\(pad\)\.lay_deg: not used with lay 'C'"),
        (("datum: image", "datum: image\npixel_size_mm: 0"), r"pixel_size_mm: out of range \(got 0, allowed > 0\)"),
    ],
)
def test_field_errors_name_the_field_and_allowed_values(change, message):
    problems = _problems(GOOD.replace(*change))
    assert any(__import__("re").search(message, p) for p in problems), problems


def test_region_needs_exactly_one_shape():
    problems = _problems(GOOD.replace("    rect: [10, 10, 100, 200]\n", ""))
    assert any("regions[0](face): needs exactly one shape (got none" in p for p in problems)


def test_not_yaml_and_not_a_mapping():
    with pytest.raises(RecipeError, match=r"bad.yaml:\d+: not valid YAML"):
        parse_recipe("recipe: [unclosed", "bad.yaml")
    with pytest.raises(RecipeError, match=r"bad.yaml:1: recipe: the file must hold one mapping"):
        parse_recipe("- a\n- b\n", "bad.yaml")


def test_missing_file_is_an_input_error(tmp_path: Path):
    with pytest.raises(RecipeError, match=r"nope.yaml: cannot read recipe"):
        load_recipe(tmp_path / "nope.yaml")


def test_duplicate_key_is_an_error():
    problems = _problems(GOOD.replace("revision: 3", "revision: 3\nrevision: 4"))
    assert any("bad.yaml:3: revision: key given twice" in p for p in problems)


def test_bundled_recipes_are_valid():
    for path in sorted(Path(__file__).resolve().parents[1].joinpath("recipes").glob("*.yaml")):
        assert load_recipe(path).regions


def test_messages_say_what_is_wrong_in_words():
    problems = _problems(GOOD.replace("lay_deg: 90", "lay_deg: ninety"))
    assert any(
        "regions[0](face).lay_deg: must be a number (got 'ninety', allowed 0 <= lay_deg < 180)" in p for p in problems
    )
    # an unknown pattern is one problem, not also a "missing lay_deg"
    problems = _problems(GOOD.replace("lay: C", "lay: diagonal"))
    assert len(problems) == 1 and "unknown lay pattern (got 'diagonal'" in problems[0]
    # a region given as a plain value is named at its own line
    problems = _problems("recipe: r\nrevision: 1\nregions:\n  - face\n")
    assert problems == [
        "bad.yaml:4: regions[0]: must be a mapping of region keys such as name, rect, lay_deg (got 'face')"
    ]


def test_crossed_directions_must_be_told_apart_by_the_tolerance():
    text = "recipe: r\nrevision: 1\nregions:\n  - name: x\n    rect: [0, 0, 9, 9]\n    lay: X\n    lay_deg: [10, 14]\n    tolerance_deg: 3\n"
    with pytest.raises(
        RecipeError,
        match=r"the two directions must differ by more than twice the tolerance \(got \[10.0, 14.0\], tolerance 3°\)",
    ):
        parse_recipe(text, "x.yaml")
    # 178 and 2 are 4 deg apart across the wrap
    with pytest.raises(RecipeError, match="differ by more than twice"):
        parse_recipe(text.replace("[10, 14]", "[178, 2]"), "x.yaml")
    assert parse_recipe(text.replace("[10, 14]", "[10, 100]")).regions[0].lay_deg == (10.0, 100.0)


# ---------------------------------------------------------------- renamed keys

_OLD_KEY = """recipe: r
revision: 1
defaults:
  max_defect_fraction: 0.05
regions:
  - name: face
    rect: [0, 0, 10, 10]
    lay: parallel
    max_defect_fraction: 0.03
  - name: edge
    rect: [0, 0, 10, 10]
    lay_deg: 90
"""


def test_old_key_loads_with_a_notice_naming_the_new_key():
    r = parse_recipe(_OLD_KEY, "old.yaml")
    assert [g.max_deviating_fraction for g in r.regions] == [0.03, 0.05]
    assert r.notices == (
        "old.yaml:4: defaults.max_defect_fraction: old key name, read as max_deviating_fraction (rename it)",
        "old.yaml:9: regions[0](face).max_defect_fraction: old key name, read as max_deviating_fraction (rename it)",
    )


def test_new_key_loads_without_notice_and_both_together_are_refused():
    new = _OLD_KEY.replace("max_defect_fraction", "max_deviating_fraction")
    r = parse_recipe(new, "new.yaml")
    assert r.notices == () and r.regions[0].max_deviating_fraction == 0.03
    both = _OLD_KEY.replace(
        "    max_defect_fraction: 0.03\n", "    max_defect_fraction: 0.03\n    max_deviating_fraction: 0.03\n"
    )
    with pytest.raises(
        RecipeError, match=r"both.yaml:9: regions\[0\]\(face\)\.max_defect_fraction: old name of max_dev"
    ):
        parse_recipe(both, "both.yaml")


def test_check_prints_the_notice_for_the_old_key_and_none_for_the_new(tmp_path, capsys):
    from surfinspect.cli.main import main

    old, new = tmp_path / "old.yaml", tmp_path / "new.yaml"
    old.write_text(_OLD_KEY)
    new.write_text(_OLD_KEY.replace("max_defect_fraction", "max_deviating_fraction"))
    assert main(["check", str(old), str(new)]) == 0
    out, err = capsys.readouterr()
    assert out.count(": ok: recipe r") == 2
    notices = err.splitlines()
    assert len(notices) == 2 and all(n.startswith(f"surfinspect: notice: {old}:") for n in notices)
    assert all("read as max_deviating_fraction" in n for n in notices)


def test_lay_symbol_is_kept_as_written():
    r = parse_recipe(_OLD_KEY, "old.yaml")
    assert [g.lay_symbol for g in r.regions] == ["parallel", ""]
    eq = parse_recipe(_OLD_KEY.replace("lay: parallel", 'lay: "="'), "eq.yaml")
    assert eq.regions[0].lay_symbol == "=" and eq.regions[0].lay_deg == (0.0,)
