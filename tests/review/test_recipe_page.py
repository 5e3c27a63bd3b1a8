"""The recipe page over HTTP (Starlette's test client): its page, reference photo, check, preview and save.

The messages are compared with what ``surfinspect check`` and ``surfinspect inspect`` print for the same
file, and the preview's numbers with ``inspect_image``'s for the same region: the page must say what
the commands say.
"""

from __future__ import annotations

import json
import re

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from review_helpers import ROOT, run_cli
from starlette.testclient import TestClient

from surfinspect.errors import InputError
from surfinspect.formatting import format_angle
from surfinspect.measure.engine import inspect_image
from surfinspect.measure.imaging import read_image
from surfinspect.recipe import load_recipe, parse_recipe
from surfinspect.recipe_writer import recipe_text
from surfinspect.review import recipe_page
from surfinspect.review.app import ReviewConfig, create_app
from surfinspect.review.security import MAX_BODY_BYTES

CP14_IMAGE = ROOT / "demo_parts" / "cp-14-0001.png"
CP14_RECIPE = ROOT / "recipes" / "cp-14-cover-plate.yaml"


class Page:
    def __init__(self, client: TestClient):
        self.client = client
        html = client.get("/recipe").text
        self.token = re.search(r'name="csrf-token" content="([0-9a-f]+)"', html).group(1)
        raw = re.search(r'<script type="application/json" id="recipe-data">(.*?)</script>', html, re.S).group(1)
        self.data = json.loads(raw)

    def post(self, action: str, recipe=None, **extra):
        body = {"reference": self.data["reference"], "recipe": recipe or self.data["recipe"]}
        body.setdefault("file_name", self.data["file_name"])
        body.update(extra)
        return self.client.post(f"/recipe/{action}", json=body, headers={"x-csrf-token": self.token})


@pytest.fixture
def cp14(tmp_path):
    folder = tmp_path / "recipes"
    folder.mkdir()
    (folder / CP14_RECIPE.name).write_bytes(CP14_RECIPE.read_bytes())
    config = ReviewConfig(None, recipe_image=CP14_IMAGE, recipe_file=folder / CP14_RECIPE.name, recipe_dir=folder)
    with TestClient(create_app(config), raise_server_exceptions=False) as c:
        yield Page(c), folder


def with_region(recipe: dict, index: int, **changes) -> dict:
    regions = [dict(r) for r in recipe["regions"]]
    regions[index].update(changes)
    return {**recipe, "regions": regions}


def test_the_page_loads_the_recipe_as_its_file_holds_it(cp14):
    page, _ = cp14
    assert page.data["recipe"]["regions"][0] == {
        "name": "band",
        "rect": [4, 4, 112, 28],
        "lay": "parallel",
        "tolerance_deg": 2.0,
        "max_deviating_fraction": 0.02,
    }
    assert page.data["base_revision"] == 1 and page.data["problems"] == []
    assert page.data["frame"]["kind"] == "part-edge" and page.data["frame"]["px_per_unit"] == 4.0
    image = page.client.get(f"/recipe/reference/{page.data['reference']}.img")
    assert image.status_code == 200 and image.content == CP14_IMAGE.read_bytes()
    assert page.client.get("/recipe/reference/" + "0" * 64 + ".img").status_code == 404
    assert 'href="/recipe"' in page.client.get("/").text  # reachable from the front page


def test_preview_gives_the_numbers_inspect_gives(cp14):
    page, _ = cp14
    loaded = read_image(CP14_IMAGE)
    whole = inspect_image(loaded.pixels, load_recipe(CP14_RECIPE))
    for i, expected in enumerate(whole.regions):
        r = page.post("preview", index=i)
        assert r.status_code == 200
        view = r.json()
        assert view["region"] == expected.name and view["verdict"] == expected.verdict.value
        assert view["lay"] == format_angle(round(expected.lay_deg, 3), axial=True)
        assert view["lay_deg"] == round(expected.lay_deg, 3)
        assert len(view["glyphs"]) > 10 and all(len(s) == 4 for s in view["glyphs"])
    assert page.post("preview", index=0).json()["use_measured"] == round(whole.regions[0].lay_deg, 1)


def test_a_region_outside_the_photo_is_the_message_inspect_prints_not_a_500(cp14, cp14_reference, tmp_path):
    page, _ = cp14
    recipe = with_region(page.data["recipe"], 0, rect=[4, 4, 900, 28])
    r = page.post("preview", recipe, index=0)
    assert r.status_code == 422
    assert "region lies outside the image" in r.json()["error"]
    checked = page.post("check", recipe).json()["problems"]
    # the same line `surfinspect inspect` prints for the saved file on this photo
    saved = tmp_path / "cp-14-cover-plate.yaml"
    saved.write_text(recipe_page.file_text(recipe, cp14_reference))  # the text Save writes
    with pytest.raises(InputError, match="region lies outside the image") as caught:
        inspect_image(read_image(CP14_IMAGE).pixels, load_recipe(saved))
    assert checked == [str(caught.value).replace(str(saved), saved.name)]


def test_check_gives_the_lines_surfinspect_check_prints(cp14, cp14_reference, tmp_path, capsys):
    page, _ = cp14
    recipe = with_region(page.data["recipe"], 0, tolerance_deg=-1, lay="sideways")
    recipe = {**recipe, "datum": "edge"}
    answer = page.post("check", recipe, comments=page.data["comments"]).json()
    problems = answer["problems"]
    (tmp_path / "cp-14-cover-plate.yaml").write_text(answer["text"])  # the file Save would write, as the page shows it
    capsys.readouterr()
    import os

    here = os.getcwd()
    os.chdir(tmp_path)
    try:
        assert run_cli(["check", "cp-14-cover-plate.yaml"]) == 2
    finally:
        os.chdir(here)
    printed = capsys.readouterr().err
    assert len(problems) == 3 and all(f"surfinspect: error: {p}" in printed.splitlines() for p in problems)
    assert any("unknown datum" in p for p in problems) and any("unknown lay pattern" in p for p in problems)


def test_a_crossed_region_is_previewed_with_both_directions_or_none(cp14):
    page, _ = cp14
    # the band is brushed one way only: the second direction is not found, and the page offers nothing to take
    r = page.post(
        "preview", with_region(page.data["recipe"], 0, lay="crossed", lay_deg=[0, 90], tolerance_deg=3), index=0
    )
    assert r.status_code == 200 and r.json()["crossed_peaks"] in ([], [pytest.approx(0, abs=1)] * 2)
    assert r.json()["use_measured"] is None


def test_crossed_directions_too_close_are_named(cp14):
    page, _ = cp14
    recipe = with_region(page.data["recipe"], 0, lay="crossed", lay_deg=[10, 12])
    (problem,) = page.post("check", recipe).json()["problems"]
    assert "the two directions must differ by more than twice the tolerance" in problem


@pytest.mark.parametrize(
    "body, headers, status, sentence",
    [
        (b"{not json", {"content-type": "application/json"}, 400, "not valid JSON"),
        (b"[1, 2]", {"content-type": "application/json"}, 400, "must be a JSON object"),
        (b"recipe=x", {"content-type": "application/x-www-form-urlencoded"}, 415, "must be JSON"),
        (b'{"reference": "../../etc/passwd"}', {"content-type": "application/json"}, 404, "no reference photo"),
    ],
)
def test_bad_requests_are_refused_with_a_sentence(cp14, body, headers, status, sentence):
    page, _ = cp14
    r = page.client.post("/recipe/preview", content=body, headers={**headers, "x-csrf-token": page.token})
    assert r.status_code == status and sentence in r.json()["error"]


def test_without_the_csrf_token_or_over_the_size_limit_nothing_runs(cp14):
    page, folder = cp14
    before = sorted(folder.iterdir())
    body = {"reference": page.data["reference"], "recipe": page.data["recipe"], "file_name": "new.yaml"}
    assert page.client.post("/recipe/save", json=body).status_code == 403
    assert page.client.post("/recipe/save", json=body, headers={"x-csrf-token": "0" * 64}).status_code == 403
    big = json.dumps({**body, "pad": "x" * MAX_BODY_BYTES}).encode()
    r = page.client.post(
        "/recipe/save", content=big, headers={"content-type": "application/json", "x-csrf-token": page.token}
    )
    assert r.status_code == 413
    assert sorted(folder.iterdir()) == before


@pytest.mark.parametrize("index", [-1, 2, "0", None, True])
def test_preview_of_a_region_that_is_not_there(cp14, index):
    page, _ = cp14
    r = page.post("preview", index=index)
    assert r.status_code == 422 and "no region number" in r.json()["error"]


def test_save_asks_before_replacing_and_keeps_the_old_revision(cp14):
    page, folder = cp14
    original = (folder / "cp-14-cover-plate.yaml").read_bytes()
    r = page.post("save", base_revision=1, comments=page.data["comments"])
    assert r.status_code == 409 and r.json()["exists"]
    assert (folder / "cp-14-cover-plate.yaml").read_bytes() == original
    r = page.post("save", base_revision=1, comments=page.data["comments"], overwrite=True)
    assert r.status_code == 200 and r.json()["revision"] == 2 and r.json()["kept"] == "cp-14-cover-plate.rev1.yaml"
    assert (folder / "cp-14-cover-plate.rev1.yaml").read_bytes() == original
    text = (folder / "cp-14-cover-plate.yaml").read_text()
    sha = page.data["reference"]
    assert text.splitlines()[0].startswith("# CP-14 cover plate")  # the file's own comment stays
    assert re.search(
        rf"^# reference image cp-14-0001.png sha256 {sha}, drawn and saved \d{{4}}-\d\d-\d\d \d\d:\d\d UTC$", text, re.M
    )
    again = page.post("save", base_revision=2, overwrite=True)  # the next save keeps revision 2 as well
    assert again.json()["revision"] == 3 and again.json()["kept"] == "cp-14-cover-plate.rev2.yaml"
    assert load_recipe(folder / "cp-14-cover-plate.rev2.yaml").revision == 2


@pytest.mark.parametrize("name", ["../escape.yaml", "/tmp/x.yaml", "sub/x.yaml", ".hidden.yaml", "x.txt", ""])
def test_save_takes_a_file_name_in_the_recipe_folder_only(cp14, name):
    page, folder = cp14
    before = sorted(folder.iterdir())
    r = page.post("save", file_name=name)
    assert r.status_code == 422 and "file name: not allowed" in r.json()["error"]
    assert sorted(folder.iterdir()) == before


def test_a_recipe_with_problems_is_not_saved(cp14):
    page, folder = cp14
    recipe = with_region(page.data["recipe"], 1, circle=[60, 57, "big"])
    r = page.post("save", recipe, file_name="other.yaml")
    assert r.status_code == 422 and "circle" in r.json()["problems"][0]
    assert not (folder / "other.yaml").exists()


def test_a_new_recipe_saves_what_check_accepts(tmp_path):
    image = ROOT / "demo_parts" / "lw-220-0002.png"
    config = ReviewConfig(None, recipe_image=image, recipe_dir=tmp_path)
    with TestClient(create_app(config), raise_server_exceptions=False) as c:
        page = Page(c)
        assert page.data["recipe"]["regions"] == [] and page.data["base_revision"] is None
        assert "needs a list of 1 to 1000 regions" in page.data["problems"][0]
        recipe = {**page.data["recipe"], "regions": [{"name": "face", "rect": [20, 20, 360, 560], "lay_deg": 90}]}
        r = page.post("save", recipe, file_name="lw-new.yaml")
    assert r.status_code == 200 and r.json()["revision"] == 1
    assert run_cli(["-q", "check", str(tmp_path / "lw-new.yaml")]) == 0
    assert parse_recipe((tmp_path / "lw-new.yaml").read_text()).regions[0].lay_deg == (90.0,)


@pytest.mark.parametrize("kw, sentence", [({"read_only": True}, "read-only"), ({"remote": True}, "this computer only")])
def test_a_read_only_or_remote_station_saves_nothing(tmp_path, kw, sentence):
    config = ReviewConfig(None, recipe_image=CP14_IMAGE, recipe_dir=tmp_path, **kw)
    with TestClient(create_app(config), raise_server_exceptions=False) as c:
        page = Page(c)
        recipe = {**page.data["recipe"], "regions": [{"name": "a", "rect": [10, 10, 100, 100], "lay_deg": 0}]}
        r = page.post("save", recipe, file_name="x.yaml")
        assert page.post("preview", recipe, index=0).status_code == 200  # looking is allowed
    assert r.status_code == 403 and sentence in r.json()["error"]
    assert list(tmp_path.iterdir()) == []


def test_without_a_reference_the_page_says_how_to_get_one(demo_archive):
    with TestClient(create_app(ReviewConfig(demo_archive.root)), raise_server_exceptions=False) as c:
        r = c.get("/recipe")
        assert r.status_code == 200 and "--recipe-image" in r.text
        part = c.get(f"/batch/{demo_archive.batch_id}/part/0")
        assert f'href="/batch/{demo_archive.batch_id}/part/0/recipe"' in part.text
        # an archived part's photo and its batch's recipe (revision 3): the page starts from both
        r = c.get(f"/batch/{demo_archive.batch_id}/part/0/recipe")
        assert r.status_code == 200 and "lw-220-0001.png" in r.text
        assert '"base_revision": 3' in r.text
        assert c.get(f"/batch/{demo_archive.batch_id}/part/99/recipe").status_code == 404


@pytest.mark.parametrize(
    "args, message",
    [
        (["review"], "give --archive ARCHIVE, --recipe-image IMAGE, or both"),
        (["review", "--recipe", str(CP14_RECIPE)], "--recipe: needs --recipe-image"),
        (["review", "--recipe-image", str(CP14_IMAGE), "--recipe-dir", "no/such/folder"], "not a folder"),
        (["review", "--recipe-image", str(CP14_RECIPE)], "cp-14-cover-plate.yaml"),  # not a photo
        (["review", "--recipe-image", str(CP14_IMAGE), "--recipe", str(ROOT / "README.md")], "README.md"),
    ],
)
def test_the_command_refuses_bad_flags_in_one_line(args, message, capsys):
    assert run_cli(args) == 2
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err


_KEYS = ["name", "rect", "circle", "polygon", "annulus", "exclude", "lay", "lay_deg", "centre", "tolerance_deg",
         "cell_px", "datum", "pixel_size_mm", "defaults", "regions", "odd"]  # fmt: skip


@pytest.fixture(scope="module")
def cp14_reference():
    return recipe_page.reference_from_file(CP14_IMAGE)


_json = st.recursive(
    st.none() | st.booleans() | st.integers(-(10**20), 10**20) | st.floats(allow_nan=True) | st.text(max_size=12),
    lambda inner: st.one_of(st.lists(inner, max_size=4), st.dictionaries(st.sampled_from(_KEYS), inner, max_size=5)),
    max_leaves=20,
)


@settings(max_examples=50, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(regions=st.lists(st.dictionaries(st.sampled_from(_KEYS), _json, max_size=6), max_size=3), top=_json)
def test_any_json_the_page_could_send_is_checked_or_named_never_a_crash(cp14_reference, regions, top):
    # what a tampered page could post: every answer is a list of problem lines (or none), never an exception
    mapping = {"recipe": "x", "revision": 1, "regions": regions}
    if isinstance(top, dict):
        mapping.update(top)
    recipe, problems = recipe_page.check(mapping, "x.yaml", cp14_reference)
    assert all(isinstance(p, str) and p for p in problems)
    if recipe is not None and not problems:
        assert parse_recipe(recipe_text(mapping)).regions  # what check accepted, the loader reads again
    for i in range(len(regions)):
        try:
            recipe_page.preview(mapping, i, "x.yaml", cp14_reference)
        except InputError as exc:
            assert str(exc)


@pytest.mark.parametrize(
    "name, allowed",
    [
        ("cp-14-cover-plate.yaml", "cp-14-cover-plate.yaml"),
        ("my recipe (2).yml", "my-recipe-2.yml"),
        ("../../etc/passwd", "passwd.yaml"),
        ("Zähler.yaml", "Z-hler.yaml"),
        ("...", "recipe.yaml"),
    ],
)
def test_a_loaded_recipe_s_name_becomes_a_name_save_takes(name, allowed):
    assert recipe_page.allowed_name(name) == allowed and recipe_page.FILE_NAME.match(allowed)
