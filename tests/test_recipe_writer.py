"""Recipe mappings written as YAML and read back: the loader gets what the mapping said, in a stable order."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from surfinspect.errors import RecipeError
from surfinspect.recipe import parse_recipe
from surfinspect.recipe_writer import header_comments, recipe_mapping, recipe_text

ROOT = Path(__file__).resolve().parents[1]


def _without_lines(recipe):
    return replace(recipe, path="", sha256="", regions=tuple(replace(g, line=0) for g in recipe.regions))


@pytest.mark.parametrize("name", ["cp-14-cover-plate.yaml", "lw-220-wall-panel.yaml"])
def test_the_demo_recipes_come_back_the_same(name):
    text = (ROOT / "recipes" / name).read_text()
    written = recipe_text(recipe_mapping(text), comments=header_comments(text))
    assert _without_lines(parse_recipe(written)) == _without_lines(parse_recipe(text))
    assert written.splitlines()[0] == text.splitlines()[0]  # the file's own first comment
    assert recipe_text(recipe_mapping(written)) == recipe_text(recipe_mapping(text))  # stable: a fixed point


def test_keys_are_written_in_the_readme_order_whatever_order_they_come_in():
    mapping = {
        "regions": [{"lay_deg": 90, "rect": [0, 0, 10, 10], "name": "face", "exclude": [{"circle": [5, 5, 2]}]}],
        "revision": 2,
        "datum": "image",
        "recipe": "x",
    }
    assert recipe_text(mapping) == (
        "recipe: x\nrevision: 2\ndatum: image\nregions:\n  - name: face\n    rect: [0, 0, 10, 10]\n"
        "    exclude:\n      - circle: [5, 5, 2]\n    lay_deg: 90\n"
    )


def test_an_unknown_key_is_written_for_the_loader_to_name():
    text = recipe_text(
        {"recipe": "x", "revision": 1, "colour": "red", "regions": [{"name": "a", "rect": [0, 0, 1, 1], "lay_deg": 0}]}
    )
    with pytest.raises(RecipeError, match=r":7: colour: unknown key"):
        parse_recipe(text)


# names and descriptions people type: quotes, colons, hashes, YAML words, line breaks, any script
_text = st.text(
    st.characters(codec="utf-8", exclude_categories=("Cs", "Cc", "Co", "Cn", "Zl", "Zp", "Cf")), min_size=1, max_size=40
)


@settings(max_examples=150, deadline=None)
@given(
    name=_text.filter(lambda s: s.strip() == s),
    description=st.text(max_size=60),
    x=st.floats(0, 1e5),
    w=st.floats(0.1, 1e5),
)
def test_any_text_and_number_reads_back_as_written(name, description, x, w):
    mapping = {"recipe": "r", "revision": 1, "regions": [{"name": name, "rect": [x, 0, w, 1], "lay_deg": 0}]}
    if description:
        mapping["description"] = description
    try:
        recipe = parse_recipe(recipe_text(mapping))
    except RecipeError as exc:  # a name or description the loader refuses is refused for what it is
        assert any(k in exc.problems[0] for k in ("name", "description")), exc.problems
        return
    assert recipe.regions[0].name == name and recipe.regions[0].shape.params == (x, 0, w, 1)
    assert recipe.description == description
