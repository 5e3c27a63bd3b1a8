"""The engine and judging on synthetic panels with known lay."""

from __future__ import annotations

import numpy as np
import pytest
from recipe_helpers import directional_recipe

from surfinspect import InputError, inspect_image, parse_recipe, result_from_json, result_to_json
from surfinspect.measure import synth
from surfinspect.measure.engine import Frame
from surfinspect.measure.orientation import wrap_deviation
from surfinspect.results import PartVerdict, RegionVerdict

SHAPE = (480, 640)
RECT = (16, 16, 608, 448)


@pytest.mark.parametrize("lay", [0.0, 17.5, 45.0, 90.0, 133.0, 179.2])
def test_brushed_panel_lay_within_02_deg(lay):
    # Analytic truth: synth.brushed_texture filters noise in the Fourier domain along lay_deg exactly,
    # then shading (illumination gradient) and camera noise are added.
    img = synth.brushed_panel(SHAPE, lay, seed=int(lay * 10) + 1)
    part = inspect_image(img, directional_recipe(RECT, lay))
    region = part.regions[0]
    assert abs(region.deviation_deg) < 0.2
    assert region.uncertainty_deg is not None and 0 < region.uncertainty_deg < 1.0
    assert part.verdict is PartVerdict.ACCEPT
    assert region.patches == ()


def test_panel_5_deg_off_is_rejected_with_its_deviation():
    img = synth.brushed_panel(SHAPE, 95.0, seed=7)
    part = inspect_image(img, directional_recipe(RECT, 90, tolerance_deg=3))
    region = part.regions[0]
    assert part.verdict is PartVerdict.REJECT
    assert region.verdict is RegionVerdict.FAIL
    assert region.deviation_deg == pytest.approx(5.0, abs=0.3)
    assert any("5.0° off 90.0°" in r for r in region.reasons)


def test_patch_across_the_grain_is_found_with_its_box():
    patch = (256, 160, 160, 128)
    img = synth.brushed_panel(SHAPE, 90.0, seed=8, patch_rect=patch, patch_lay_deg=0.0)
    part = inspect_image(img, directional_recipe(RECT, 90, cell_px=32))
    region = part.regions[0]
    assert part.verdict is PartVerdict.REJECT
    assert len(region.patches) == 1
    x, y, w, h = region.patches[0].bbox_px
    px, py, pw, ph = patch
    # the patch box is made of whole cells: within one cell of the true box on every side
    assert abs(x - px) <= 32 and abs(y - py) <= 32
    assert abs((x + w) - (px + pw)) <= 32 and abs((y + h) - (py + ph)) <= 32
    assert region.patches[0].lay_deg == pytest.approx(0.0, abs=3.0) or region.patches[0].lay_deg > 177
    true_share = pw * ph / (RECT[2] * RECT[3])
    assert region.deviating_area_fraction == pytest.approx(true_share, rel=0.4)
    # the whole-region lay is not pulled off by the crossed patch (doubled angles cancel)
    assert abs(region.deviation_deg) < 0.5


def test_polished_blank_is_no_texture_and_part_needs_review():
    img = synth.polished_blank(SHAPE, seed=3)
    part = inspect_image(img, directional_recipe(RECT, 90))
    region = part.regions[0]
    assert region.verdict is RegionVerdict.NO_TEXTURE
    assert region.lay_deg is None and region.deviation_deg is None
    assert part.verdict is PartVerdict.REVIEW


@pytest.mark.parametrize("value", [0.0, 0.5, 1.0])
def test_perfectly_uniform_image_is_no_texture(value):
    # no noise at all: no gradient, so no angle may be invented
    img = np.full((120, 160), value, np.float32)
    part = inspect_image(img, directional_recipe((8, 8, 144, 104), 90))
    assert part.regions[0].verdict is RegionVerdict.NO_TEXTURE
    assert part.regions[0].lay_deg is None


def test_blurred_brushed_surface_at_high_noise_is_no_texture():
    # "No texture" is relative to the image's own noise: a heavily blurred grain under strong
    # camera noise has gradient energy close to the noise's own.
    import cv2

    tex = cv2.GaussianBlur(synth.brushed_texture(SHAPE, 90.0, seed=5), (0, 0), 6.0)
    img = synth.shade_and_noise(tex / tex.std() * 0.05, noise=0.02, seed=5)
    part = inspect_image(img, directional_recipe(RECT, 90))
    assert part.regions[0].verdict is RegionVerdict.NO_TEXTURE


def test_exclude_shape_removes_pixels():
    # A crossed-grain logo area excluded from the region no longer makes the part fail.
    patch = (256, 160, 160, 128)
    img = synth.brushed_panel(SHAPE, 90.0, seed=8, patch_rect=patch, patch_lay_deg=0.0)
    extra = "    exclude:\n      - rect: [240, 144, 192, 160]\n"
    part = inspect_image(img, directional_recipe(RECT, 90, extra=extra))
    assert part.verdict is PartVerdict.ACCEPT, part.regions[0].reasons


def test_region_outside_image_is_an_input_error():
    img = synth.brushed_panel((100, 100), 90.0, seed=1)
    with pytest.raises(InputError, match=r"test.yaml:\d+: regions\(face\): region lies outside the image"):
        inspect_image(img, directional_recipe((50, 50, 80, 20), 90))


def test_result_json_round_trip_and_fixed_keys():
    img = synth.brushed_panel((200, 240), 30.0, seed=2)
    part = inspect_image(img, directional_recipe((8, 8, 224, 184), 30), inspected_at="2026-01-01T00:00:00Z")
    text = result_to_json(part)
    again = result_from_json(text)
    assert result_to_json(again) == text
    import json

    d = json.loads(text)
    assert d["schema"] == "surfinspect.part-result/1"
    for key in ("engine_version", "inspected_at", "image", "recipe", "verdict", "regions"):
        assert key in d
    r = d["regions"][0]
    for key in (
        "name",
        "expected_lay_deg",
        "tolerance_deg",
        "lay_deg",
        "deviation_deg",
        "uncertainty_deg",
        "coherence",
        "defect_area_fraction",
        "deviating_area_fraction",
        "patches",
        "histogram",
        "verdict",
        "reasons",
    ):
        assert key in r
    assert len(r["histogram"]["bin_edges_deg"]) == len(r["histogram"]["weights"]) + 1
    assert sum(r["histogram"]["weights"]) == pytest.approx(1.0, abs=1e-4)


def test_camera_rotation_correction_turns_the_lay():
    # A fixed fixture turned 4 deg counter-clockwise: the recipe's camera_rotation_deg puts the
    # lay back into the part frame.
    img = synth.brushed_panel((300, 300), 94.0, seed=4)
    r = parse_recipe(
        "recipe: t\nrevision: 1\ncamera_rotation_deg: 4\nregions:\n  - name: face\n    rect: [40, 40, 200, 200]\n    lay_deg: 90\n"
    )
    region = inspect_image(img, r).regions[0]
    assert region.deviation_deg == pytest.approx(0.0, abs=0.25)


@pytest.mark.parametrize("pixel_size_mm", [None, 0.1])
def test_camera_rotation_pivots_about_the_image_centre(pixel_size_mm):
    # Horizontal grain in the image, a camera turned +3.5 and -3.5 deg: in the part frame the lay is
    # 0 - 3.5 = -3.5 (176.5) and +3.5, a deviation of equal size and opposite sign (lay_part =
    # lay_image - rotation, DESIGN.md's angle convention). A full-frame region works both ways: the
    # pivot is the image centre, and the corners the rotation turns off the image are cut at its border.
    img = synth.brushed_panel((240, 320), 0.0, seed=8)
    unit = pixel_size_mm or 1.0
    rect = f"[0, 0, {320 * (pixel_size_mm or 1.0):g}, {240 * (pixel_size_mm or 1.0):g}]"
    mm = f"pixel_size_mm: {pixel_size_mm}\n" if pixel_size_mm else ""
    got = {}
    for turn in (0.0, 3.5, -3.5):
        r = parse_recipe(
            f"recipe: t\nrevision: 1\n{mm}camera_rotation_deg: {turn}\nregions:\n"
            f"  - name: face\n    rect: {rect}\n    lay_deg: 0\n    tolerance_deg: 10\n"
        )
        result = inspect_image(img, r)
        got[turn] = result.regions[0]
        # the frame's centre is the image centre whatever the turn
        assert result.datum is not None
        frame = Frame(result.datum.origin_px, turn, 1.0 / unit if pixel_size_mm else 1.0)
        np.testing.assert_allclose(frame.to_image([[160 * unit, 120 * unit]])[0], [160.0, 120.0], atol=1e-9)
    # relative to the texture's own lay (0.1 deg off horizontal: synthetic scratches), equal and opposite
    own = got[0.0].deviation_deg
    assert abs(own) < 0.3
    assert got[3.5].deviation_deg - own == pytest.approx(-3.5, abs=0.05)
    assert got[-3.5].deviation_deg - own == pytest.approx(3.5, abs=0.05)
    # and the region's outline turns about the image centre: its centroid stays there
    for region in got.values():
        np.testing.assert_allclose(np.mean(region.outline_px[0], axis=0), [160.0, 120.0], atol=1e-6)


def test_a_region_off_the_image_is_still_refused_with_a_camera_rotation():
    img = synth.brushed_panel((240, 320), 0.0, seed=8)
    r = parse_recipe(
        "recipe: t\nrevision: 1\ncamera_rotation_deg: 2\nregions:\n"
        "  - name: face\n    rect: [100, 100, 400, 100]\n    lay_deg: 0\n"
    )
    with pytest.raises(InputError, match=r"regions\(face\): region lies outside the image"):
        inspect_image(img, r)


def test_frame_round_trip():
    f = Frame(origin_px=(12.5, 40.25), rotation_deg=-7.3, px_per_unit=4.0)
    pts = np.array([[0, 0], [10.0, 3.0], [-2.5, 7.0]])
    np.testing.assert_allclose(f.to_frame(f.to_image(pts)), pts, atol=1e-12)
    # +X of a frame turned counter-clockwise on screen points up-right: rows decrease
    a, b = Frame(rotation_deg=30).to_image([[0, 0], [1, 0]])
    assert b[0] > a[0] and b[1] < a[1]


# ---------------------------------------------------------------- lay patterns

PATTERN_SHAPE = (320, 320)


def _pattern_recipe(body: str):
    return parse_recipe("recipe: t\nrevision: 1\nregions:\n  - name: r\n" + body, "pattern.yaml")


@pytest.mark.parametrize("a, b, seed", [(30.0, 120.0, 1), (45.0, 135.0, 5), (0.0, 90.0, 9)])
def test_crossed_lay_finds_both_directions(a, b, seed):
    # Two superposed brushed textures. The gradient histogram of each is broad, so the peaks
    # are located to about 2 deg (measured over seeds), far less precisely than a single lay.
    tex = synth.brushed_texture(PATTERN_SHAPE, a, seed=seed) + synth.brushed_texture(PATTERN_SHAPE, b, seed=seed + 1)
    img = synth.shade_and_noise(tex / tex.std(), seed=3)
    r = _pattern_recipe(
        f"    rect: [10, 10, 300, 300]\n    lay: crossed\n    lay_deg: [{a}, {b}]\n    tolerance_deg: 3\n"
    )
    region = inspect_image(img, r).regions[0]
    assert region.verdict is RegionVerdict.PASS, region.reasons
    found = region.extra["crossed_lay_deg"]
    assert abs(wrap_deviation(found[0], a)) < 2.5 and abs(wrap_deviation(found[1], b)) < 2.5
    assert 0.2 < region.extra["balance"] <= 0.5


def test_single_lay_under_crossed_recipe_fails_with_reason():
    img = synth.brushed_panel(PATTERN_SHAPE, 30.0, seed=4)
    r = _pattern_recipe("    rect: [10, 10, 300, 300]\n    lay: X\n    lay_deg: [30, 120]\n")
    region = inspect_image(img, r).regions[0]
    assert region.verdict is RegionVerdict.FAIL
    assert any("no lay found near 120.0°" in t for t in region.reasons)


def test_isotropic_texture_passes_multidirectional_and_has_no_lay_for_a_directional_recipe():
    img = synth.shade_and_noise(synth.isotropic_texture(PATTERN_SHAPE, seed=5), seed=5)
    multi = _pattern_recipe("    rect: [10, 10, 300, 300]\n    lay: M\n    cell_px: 32\n")
    region = inspect_image(img, multi).regions[0]
    assert region.verdict is RegionVerdict.PASS, region.reasons
    assert region.lay_deg is None
    assert region.extra["rayleigh_p"] > 0.01 and region.extra["rayleigh_crossed_p"] > 0.01
    directional = _pattern_recipe("    rect: [10, 10, 300, 300]\n    lay_deg: 90\n")
    part = inspect_image(img, directional)
    region = part.regions[0]
    # no direction stands out of this texture (the Hotelling test on the cells cannot tell it from
    # 1/f noise): no angle is invented, and a person looks at the part
    assert region.verdict is RegionVerdict.NO_TEXTURE and region.lay_deg is None
    assert part.verdict is PartVerdict.REVIEW
    assert region.reasons[0].startswith("no measurable texture: no lay stands out")


def test_crossed_at_right_angles_fails_multidirectional():
    # Two lays 90 deg apart cancel in the summed tensor and in doubled angles (coherence ~0.08),
    # so only the four-fold harmonic of the cell histograms shows the shared pair of directions.
    tex = synth.brushed_texture(PATTERN_SHAPE, 30.0, seed=1) + synth.brushed_texture(PATTERN_SHAPE, 120.0, seed=2)
    img = synth.shade_and_noise(tex / tex.std(), seed=3)
    region = inspect_image(img, _pattern_recipe("    rect: [10, 10, 300, 300]\n    lay: M\n    cell_px: 32\n")).regions[
        0
    ]
    assert region.coherence < 0.1
    assert region.verdict is RegionVerdict.FAIL
    assert any("crossed pattern near 3" in t for t in region.reasons), region.reasons  # 30 and 120 deg, to ~2 deg


def test_brushed_texture_fails_multidirectional():
    img = synth.brushed_panel(PATTERN_SHAPE, 60.0, seed=6)
    region = inspect_image(img, _pattern_recipe("    rect: [10, 10, 300, 300]\n    lay: multidirectional\n")).regions[0]
    assert region.verdict is RegionVerdict.FAIL
    assert any("coherence" in t for t in region.reasons)


def test_concentric_rings_pass_circular_about_their_centre():
    # Analytic: sin(2 pi r / period) has its lines on circles about the centre.
    centre = (170.0, 150.0)
    img = synth.shade_and_noise(synth.ring_texture(PATTERN_SHAPE, centre, period_px=6.0, seed=1), seed=1, contrast=0.2)
    # the region avoids the centre, where the rings are too tight to resolve
    body = f"    annulus: [{centre[0] + 0.5}, {centre[1] + 0.5}, 40, 140]\n    lay: circular\n    centre: [{centre[0] + 0.5}, {centre[1] + 0.5}]\n    cell_px: 16\n"
    region = inspect_image(img, _pattern_recipe(body)).regions[0]
    assert region.verdict is RegionVerdict.PASS, region.reasons
    assert abs(region.deviation_deg) < 0.5
    # fitted centre when none is given
    fitted = inspect_image(
        img, _pattern_recipe(body.replace(f"    centre: [{centre[0] + 0.5}, {centre[1] + 0.5}]\n", ""))
    ).regions[0]
    cx, cy = fitted.extra["centre_px"]
    assert abs(cx - centre[0]) < 1.5 and abs(cy - centre[1]) < 1.5
    assert fitted.verdict is RegionVerdict.PASS
    # a centre moved far away: the local lay no longer follows its circles
    far = body.replace(f"centre: [{centre[0] + 0.5}, {centre[1] + 0.5}]", "centre: [2000, -1500]")
    region = inspect_image(img, _pattern_recipe(far)).regions[0]
    assert region.verdict is RegionVerdict.FAIL
    assert region.deviating_area_fraction > 0.5


def test_spokes_pass_radial():
    centre = (160.0, 160.0)
    img = synth.shade_and_noise(synth.ring_texture(PATTERN_SHAPE, centre, period_px=8.0, radial=True), contrast=0.2)
    body = "    annulus: [160.5, 160.5, 60, 150]\n    lay: R\n    centre: [160.5, 160.5]\n    cell_px: 16\n"
    region = inspect_image(img, _pattern_recipe(body)).regions[0]
    assert region.verdict is RegionVerdict.PASS, region.reasons
    circ = inspect_image(img, _pattern_recipe(body.replace("lay: R", "lay: C"))).regions[0]
    assert circ.verdict is RegionVerdict.FAIL


# ---------------------------------------------------------------- the part's own frame

PLATE_RECIPE = """\
recipe: cp-14-test
revision: 1
datum: part-edge
pixel_size_mm: 0.25
regions:
  - name: band
    rect: [4, 4, 112, 28]
    lay: parallel
    tolerance_deg: 2.0
"""


@pytest.mark.parametrize("skew", [-11.0, 0.0, 6.5])
@pytest.mark.parametrize("band_lay", [0.0, 3.2])
def test_skewed_plate_lay_relative_to_the_part(skew, band_lay):
    # Ground truth from the rendering: demo.plate_on_fixture turns the plate `skew` deg
    # counter-clockwise about the image centre and brushes its band at band_lay in the part frame.
    from surfinspect.station.demo import PLATE_IMAGE_SHAPE, PLATE_MM, PLATE_PIXEL_MM, plate_on_fixture

    img = plate_on_fixture(skew, band_lay, seed=31)
    part = inspect_image(img, parse_recipe(PLATE_RECIPE, "plate.yaml"))
    assert part.datum.kind == "part-edge"
    assert part.datum.rotation_deg == pytest.approx(skew, abs=0.1)
    rows, cols = PLATE_IMAGE_SHAPE
    length, width = (v / PLATE_PIXEL_MM for v in PLATE_MM)
    t = np.radians(skew)
    true_origin = (
        np.array([cols / 2, rows / 2])
        - np.array([np.cos(t), -np.sin(t)]) * length / 2
        - np.array([np.sin(t), np.cos(t)]) * width / 2
    )
    assert np.hypot(*(np.array(part.datum.origin_px) - true_origin)) < 0.5
    band = part.regions[0]
    assert band.deviation_deg == pytest.approx(band_lay, abs=0.2)
    expected = PartVerdict.ACCEPT if band_lay < 2.0 else PartVerdict.REJECT
    assert part.verdict is expected, band.reasons


def test_millimetre_regions_land_on_the_same_pixels_as_pixel_regions():
    # Round trip through the part frame: the same region given in mm (0.25 mm/px) and in px.
    from surfinspect.measure.engine import frame_for, region_masks
    from surfinspect.station.demo import plate_on_fixture

    img = plate_on_fixture(4.0, 0.0, seed=2)
    mm = parse_recipe(PLATE_RECIPE.replace("rect: [4, 4, 112, 28]", "polygon: [[4, 4], [116, 4], [100, 32], [10, 30]]"))
    px = parse_recipe(
        PLATE_RECIPE.replace("pixel_size_mm: 0.25\n", "").replace(
            "rect: [4, 4, 112, 28]", "polygon: [[16, 16], [464, 16], [400, 128], [40, 120]]"
        )
    )
    (frame_mm, _), (frame_px, _) = frame_for(mm, img), frame_for(px, img)
    a = region_masks(mm.regions[0], frame_mm, img.shape)
    b = region_masks(px.regions[0], frame_px, img.shape)
    assert a[0] == b[0]
    assert (a[1] == b[1]).all()
    np.testing.assert_allclose(frame_mm.to_frame(frame_mm.to_image([[10.0, 20.0]])), [[10.0, 20.0]], atol=1e-9)


def test_patch_sizes_in_mm_with_pixel_size():
    img = synth.brushed_panel(SHAPE, 90.0, seed=8, patch_rect=(256, 160, 160, 128), patch_lay_deg=0.0)
    r = parse_recipe(
        "recipe: t\nrevision: 1\npixel_size_mm: 0.5\nregions:\n  - name: face\n    rect: [8, 8, 304, 224]\n    lay_deg: 90\n    cell_px: 32\n"
    )
    patch = inspect_image(img, r).regions[0].patches[0]
    assert patch.bbox_mm == (patch.bbox_px[2] * 0.5, patch.bbox_px[3] * 0.5)
    assert patch.area_mm2 == pytest.approx(patch.area_px * 0.25)
    # datum image, no rotation: the part frame is the image's, so the position is the pixel box times 0.5 mm
    assert patch.position_mm == pytest.approx(tuple(v * 0.5 for v in patch.bbox_px))
    # the planted patch (256, 160) px from the corner is found where it is, to one 32 px cell
    assert abs(patch.position_mm[0] - 128.0) <= 16 and abs(patch.position_mm[1] - 80.0) <= 16


def test_patch_position_in_a_rotated_part_frame():
    # a camera turned 10 deg: the part frame's box of the patch is the box around its cells' corners mapped
    # into that frame; mapping the box's centre back gives the pixel box's centre (Frame.to_image)
    img = synth.brushed_panel(SHAPE, 100.0, seed=8, patch_rect=(128, 96, 96, 64), patch_lay_deg=10.0)
    r = parse_recipe(
        "recipe: t\nrevision: 1\npixel_size_mm: 0.5\ncamera_rotation_deg: 10\nregions:\n  - name: face\n"
        "    rect: [30, 30, 100, 60]\n    lay_deg: 90\n    cell_px: 32\n"
    )
    result = inspect_image(img, r)
    patch = result.regions[0].patches[0]
    x, y, w, h = patch.position_mm
    frame = Frame(result.datum.origin_px, 10.0, 2.0)
    bx, by, bw, bh = patch.bbox_px
    np.testing.assert_allclose(frame.to_image([[x + w / 2, y + h / 2]])[0], [bx + bw / 2, by + bh / 2], atol=1e-6)
    # the box around a turned rectangle is larger than it by |cos| + |sin| terms
    c, s = np.cos(np.radians(10)), np.sin(np.radians(10))
    assert w == pytest.approx((bw * c + bh * s) / 2, rel=1e-6) and h == pytest.approx((bw * s + bh * c) / 2, rel=1e-6)


def test_part_not_found_is_review_in_words():
    img = synth.brushed_panel((200, 300), 0.0, seed=1)  # the panel fills the frame: no edge to find
    part = inspect_image(img, parse_recipe(PLATE_RECIPE))
    assert part.verdict is PartVerdict.REVIEW
    assert part.reasons and part.reasons[0].startswith("part frame not found:")


def test_uncertainty_covers_the_error_about_95_percent_of_the_time():
    # A k = 2 expanded uncertainty should cover the true error for ~95 % of parts (GUM, JCGM
    # 100:2008, 6.2). Measured over independent textures whose grain is correlated over more than
    # a cell (along 30 px, cells 24 px), the case where single-cell scatter understates the error.
    r = directional_recipe((20, 20, 448, 112), 3.5, cell_px=24)
    covered, ratios = 0, []
    for seed in range(40):
        tex = synth.brushed_texture((160, 500), 3.5, seed=seed, along_px=30.0)
        region = inspect_image(synth.shade_and_noise(tex, seed=seed, contrast=0.07, noise=0.008), r).regions[0]
        covered += abs(region.deviation_deg) <= region.uncertainty_deg
        ratios.append(region.uncertainty_deg)
    assert covered >= 34  # at least 85 % of 40
    assert np.mean(ratios) < 0.5  # and it is not uselessly wide


def test_a_full_width_region_leaves_the_image_alone_and_measures_the_same_twice():
    # A strip of a full-width region is a view of the image itself: removing the illumination
    # background in place once changed the caller's pixels, and the rows two strips share twice
    # (a false deviating band at the strip joint, different from run to run).
    img = synth.brushed_panel((600, 320), 30.0, seed=1).astype(np.float32)
    before = img.copy()
    recipe = directional_recipe((0, 0, 320, 600), 30.0, cell_px=24)
    first = inspect_image(img, recipe).regions[0]
    np.testing.assert_array_equal(img, before)
    second = inspect_image(img, recipe).regions[0]
    assert first.lay_deg == second.lay_deg and first.patches == second.patches == ()
    assert first.verdict is RegionVerdict.PASS


def test_inspect_region_alone_gives_what_inspect_image_gives():
    # the recipe page's preview measures one region with inspect_region on the image kept in memory:
    # its JSON form must be inspect_image's for that region, byte for byte (both demo recipes, part frame too)
    from pathlib import Path

    from surfinspect.measure.engine import frame_for, inspect_region
    from surfinspect.measure.imaging import read_image
    from surfinspect.measure.noise import noise_sigma
    from surfinspect.recipe import load_recipe
    from surfinspect.results import region_to_dict

    root = Path(__file__).resolve().parents[2]
    for recipe_name, image_name in [
        ("cp-14-cover-plate.yaml", "cp-14-0002.png"),
        ("lw-220-wall-panel.yaml", "lw-220-0004.png"),
    ]:
        recipe = load_recipe(root / "recipes" / recipe_name)
        pixels = read_image(root / "demo_parts" / image_name).pixels
        whole = inspect_image(pixels, recipe)
        frame, _ = frame_for(recipe, pixels)
        sigma = noise_sigma(pixels)
        for region, expected in zip(recipe.regions, whole.regions):
            alone = inspect_region(pixels, recipe, region, frame, sigma)
            assert region_to_dict(alone) == region_to_dict(expected)


def test_the_same_photo_gives_the_same_result_wherever_its_pixels_lie_in_memory():
    # a report is repeatable to the last printed digit: the engine's vector paths must not depend on
    # the image buffer's alignment. cv2.magnitude once did, and on this photo (one lay under a
    # crossed recipe, with glare: the histogram cross-check fits a bump that is not there, an
    # ill-conditioned fit) histogram_lay_deg moved between 75.050 and 75.057 deg from run to run.
    img = synth.add_glare(synth.brushed_panel((600, 800), 75.0, seed=0), (300.0, 250.0), 60.0)
    recipe = parse_recipe(
        "recipe: t\nrevision: 1\nregions:\n  - name: a\n    rect: [10, 10, 700, 560]\n"
        "    lay: crossed\n    lay_deg: [75, 165]\n  - name: b\n    rect: [0, 0, 800, 600]\n    lay_deg: 75\n"
    )
    texts = set()
    for offset in range(8):
        buffer = np.empty(img.size + 16, np.float32)
        copy = buffer[offset : offset + img.size].reshape(img.shape)
        copy[...] = img
        texts.add(result_to_json(inspect_image(copy, recipe, inspected_at="2026-01-01T00:00:00Z")))
    assert len(texts) == 1
