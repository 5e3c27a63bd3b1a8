"""Tests for surfinspect.overlay: the overlay picture agrees with the result it draws.

Parts are built by hand (``make_part``) so that every coordinate the picture
must show is known exactly; test_report imports the same helpers.
"""

from __future__ import annotations

import math

import cv2
import numpy as np
import pytest

from surfinspect import overlay
from surfinspect.errors import InputError
from surfinspect.overlay import PALETTE, REGION_LOOKS, build_scene, dash_pieces, render_overlay, write_overlay_png
from surfinspect.results import (
    CellGrid,
    DatumInfo,
    Histogram,
    ImageInfo,
    PartResult,
    Patch,
    RecipeInfo,
    RegionResult,
    RegionVerdict,
    part_verdict,
)

WIDTH, HEIGHT = 480, 360
CELL = 20
FACE_RECT = (20, 20, 280, 320)  # x, y, w, h
PAD_RECT = (320, 40, 140, 140)
HOLE_RECT = (40, 260, 60, 60)
PATCH_CELLS = (slice(4, 7), slice(8, 12))  # rows, cols of the face grid that deviate


def make_pixels(width: int = WIDTH, height: int = HEIGHT, *, lay_deg: float = 90.0, seed: int = 1) -> np.ndarray:
    """A grey grating whose lines run along ``lay_deg`` (CCW from +X, +Y up), plus noise."""
    rows, cols = np.mgrid[0:height, 0:width].astype(np.float32)
    theta = math.radians(lay_deg)
    # distance across the lines: the normal of direction (cos t, sin t) in (x, y-up) coordinates
    across = -math.sin(theta) * cols + math.cos(theta) * (-rows)
    grating = 0.5 + 0.2 * np.sin(2 * np.pi * across / 9.0)
    noise = np.random.default_rng(seed).normal(0.0, 0.03, size=grating.shape)
    return np.clip(grating + noise, 0, 1).astype(np.float32)


def _rect_outline(x, y, w, h):
    return ((float(x), float(y)), (float(x + w), float(y)), (float(x + w), float(y + h)), (float(x), float(y + h)))


def _histogram(peak_deg: float | None, bins: int = 36) -> Histogram:
    edges = tuple(float(v) for v in np.linspace(0.0, 180.0, bins + 1))
    centres = np.linspace(2.5, 177.5, bins)
    if peak_deg is None:
        weights = np.full(bins, 1.0 / bins)
    else:
        d = (centres - peak_deg + 90.0) % 180.0 - 90.0
        weights = np.exp(-0.5 * (d / 6.0) ** 2) + 0.02
        weights /= weights.sum()
    return Histogram(edges, tuple(float(w) for w in weights))


def make_face(
    *, lay_deg: float = 90.37, deviating: bool = True, cell_lay: float = 90.0, patch_lay: float = 30.0, name: str = "face"
) -> RegionResult:
    x, y, w, h = FACE_RECT
    grid_shape = (h // CELL, w // CELL)
    lay = np.full(grid_shape, cell_lay)
    coherence = np.full(grid_shape, 0.8)
    flags = np.zeros(grid_shape, bool)
    hx, hy, hw, hh = HOLE_RECT
    lay[(hy - y) // CELL : (hy + hh - y) // CELL, (hx - x) // CELL : (hx + hw - x) // CELL] = np.nan
    patches = ()
    if deviating:
        lay[PATCH_CELLS] = patch_lay
        flags[PATCH_CELLS] = True
        r, c = PATCH_CELLS
        bbox = (x + c.start * CELL, y + r.start * CELL, (c.stop - c.start) * CELL, (r.stop - r.start) * CELL)
        area = bbox[2] * bbox[3]
        patches = (Patch(bbox, area / (w * h - hw * hh), patch_lay, patch_lay - 90.0, area),)
    dev = lay_deg - 90.0
    failed = deviating or abs(dev) > 3.0
    reasons = ("deviating area 4.1 % exceeds 2 %",) if deviating else ()
    if abs(dev) > 3.0:
        reasons += (f"lay {lay_deg:.1f}° is {dev:.1f}° off 90° (tolerance 3°)",)
    return RegionResult(
        name=name,
        expected_lay_deg=90.0,
        tolerance_deg=3.0,
        lay_deg=lay_deg,
        deviation_deg=dev,
        uncertainty_deg=0.123,
        coherence=0.7312,
        defect_area_fraction=patches[0].area_fraction if patches else 0.0,
        patches=patches,
        histogram=_histogram(lay_deg),
        verdict=RegionVerdict.FAIL if failed else RegionVerdict.PASS,
        reasons=reasons,
        outline_px=(_rect_outline(*FACE_RECT),),
        exclude_px=(_rect_outline(*HOLE_RECT),),
        cells=CellGrid((x, y), CELL, lay, coherence, np.full(grid_shape, 90.0), flags),
    )


def make_pad(*, textured: bool = False) -> RegionResult:
    x, y, w, h = PAD_RECT
    shape = (h // CELL, w // CELL)
    lay = np.full(shape, 0.0 if textured else np.nan)
    return RegionResult(
        name="pad",
        expected_lay_deg=0.0,
        tolerance_deg=2.0,
        lay_deg=0.42 if textured else None,
        deviation_deg=0.42 if textured else None,
        uncertainty_deg=0.2 if textured else None,
        coherence=0.61 if textured else 0.03,
        defect_area_fraction=0.0,
        patches=(),
        histogram=_histogram(0.4 if textured else None),
        verdict=RegionVerdict.PASS if textured else RegionVerdict.NO_TEXTURE,
        reasons=() if textured else ("no measurable texture: coherence 0.03 below 0.2",),
        outline_px=(_rect_outline(*PAD_RECT),),
        cells=CellGrid((x, y), CELL, lay, np.full(shape, 0.5), np.zeros(shape), np.zeros(shape, bool)),
    )


def make_part(
    name: str = "LW-220-0007",
    *,
    regions: tuple[RegionResult, ...] | None = None,
    datum: DatumInfo | None = None,
    sha_seed: str = "a",
    width: int = WIDTH,
    height: int = HEIGHT,
) -> PartResult:
    regions = regions if regions is not None else (make_face(), make_pad())
    return PartResult(
        name=name,
        image=ImageInfo(f"{name}.png", (sha_seed * 64)[:64], width, height, 8),
        recipe=RecipeInfo("lw-220-wall-panel", 3, "7" * 64),
        verdict=part_verdict([r.verdict for r in regions]),
        regions=regions,
        inspected_at="2031-04-02T08:15:00Z",
        engine_version="0.1.0",
        datum=datum,
    )


def nearest_palette_name(rgb) -> str:
    names = list(PALETTE)
    colours = np.array([PALETTE[n] for n in names], float)
    return names[int(np.argmin(((colours - np.asarray(rgb, float)) ** 2).sum(1)))]


# ------------------------------------------------------------------------- tests


def test_picture_shape_and_photo_kept_outside_marks():
    pixels = make_pixels()
    picture = render_overlay(pixels, make_part())
    assert picture.shape == (HEIGHT, WIDTH, 3) and picture.dtype == np.uint8
    # reference: the input photo itself, scaled to 8 bit (x * 255, rounded)
    # a pixel away from every mark (right of the pad, below it) is the photo's grey, unchanged
    y, x = 300, 470
    expected = int(np.clip(pixels[y, x] * 255 + 0.5, 0, 255))
    assert tuple(picture[y, x]) == (expected,) * 3


def test_patch_box_edges_have_patch_colour_where_json_says():
    part = make_part()
    x, y, w, h = part.regions[0].patches[0].bbox_px
    picture = render_overlay(make_pixels(), part)
    # reference: the box (x, y, w, h) of the result's JSON form, the fixed contract of DESIGN.md;
    # midpoints of the left, right and bottom edges (the number label sits at the top-left corner)
    for px, py in ((x, y + h // 2), (x + w, y + h // 2), (x + w // 2, y + h)):
        assert nearest_palette_name(picture[py, px]) == "patch", (px, py, picture[py, px])
    # inside the box, half a cell from its edge, the patch colour is absent (no filled box)
    assert nearest_palette_name(picture[y + h // 2, x + CELL // 2 - 6]) != "patch"


def test_outline_colour_and_dash_follow_verdict():
    part = make_part(regions=(make_face(), make_pad(textured=True)))
    picture = render_overlay(make_pixels(), part)

    def share_on_edge(rect, colour_name):
        x, y, w, h = rect
        xs = np.arange(x + 30, x + w - 30)  # the top edge, clear of corners and the label box
        xs = xs[xs > x + 140]
        hits = [nearest_palette_name(picture[y, xi]) == colour_name for xi in xs]
        return float(np.mean(hits))

    # a dash pattern (on 4, off 2.5 line widths) covers 4 / 6.5 = 62 % of an edge (analytic),
    # less where the dark edge of the dashes is sampled; a solid line covers all of it
    # failing face: dashed, so part of its top edge is gap
    fail_share = share_on_edge(FACE_RECT, "fail")
    assert 0.3 < fail_share < 0.9, fail_share
    # passing pad: solid
    x, y, w, h = PAD_RECT
    right_edge = [nearest_palette_name(picture[yi, x + w]) for yi in range(y + 30, y + h - 10)]
    assert right_edge.count("pass") == len(right_edge)


@pytest.mark.parametrize("lay_deg", [0.0, 30.0, 90.0, 135.0])
def test_glyph_direction_follows_angle_convention(lay_deg):
    # Analytic: lay theta CCW from +X with +Y up is the image-px direction (cos t, -sin t).
    face = make_face(deviating=False, lay_deg=90.0, cell_lay=lay_deg)
    part = make_part(regions=(face,))
    picture = render_overlay(make_pixels(), part)
    i, j = 1, 9  # a cell away from the label, the arrows and the hole
    cx, cy = FACE_RECT[0] + (j + 0.5) * CELL, FACE_RECT[1] + (i + 0.5) * CELL
    t = math.radians(lay_deg)
    r = 0.2 * CELL  # inside the glyph (length 0.65 cell), clear of its dark edge
    along = picture[int(round(cy - r * math.sin(t))), int(round(cx + r * math.cos(t)))]
    assert nearest_palette_name(along) == "cell"
    if lay_deg not in (0.0, 90.0):  # the mirrored (rows-up) convention would put the glyph here
        mirrored = picture[int(round(cy + r * math.sin(t))), int(round(cx + r * math.cos(t)))]
        assert nearest_palette_name(mirrored) != "cell"


def test_deviating_cells_have_their_own_colour():
    part = make_part()
    picture = render_overlay(make_pixels(), part)
    # reference: the cell grid's deviating flags and origin + (j + 0.5) * cell_px centres (CellGrid docstring)
    rows, cols = PATCH_CELLS
    i, j = rows.start + 1, cols.start + 1
    cx, cy = FACE_RECT[0] + (j + 0.5) * CELL, FACE_RECT[1] + (i + 0.5) * CELL
    assert nearest_palette_name(picture[int(cy), int(cx)]) == "cell-deviating"


def test_excluded_area_is_darkened_and_has_no_glyphs():
    pixels = make_pixels()
    picture = render_overlay(pixels, make_part())
    hx, hy, hw, hh = HOLE_RECT
    # reference: the photo, darkened by the factor 0.45 the overlay documents
    inner = picture[hy + 8 : hy + hh - 8, hx + 8 : hx + hw - 8].astype(float)
    photo = np.clip(pixels[hy + 8 : hy + hh - 8, hx + 8 : hx + hw - 8] * 255 + 0.5, 0, 255)
    assert np.allclose(inner[..., 0], np.floor(photo.astype(np.uint8) * 0.45), atol=1)
    assert (inner[..., 0] == inner[..., 2]).all()  # grey only: no coloured glyph inside the hole


def test_region_label_names_region_and_verdict():
    scene = build_scene(make_part(), WIDTH, HEIGHT)
    assert [r.label for r in scene.regions] == ["face: FAIL", "pad: NO TEXTURE"]
    assert REGION_LOOKS[RegionVerdict.FAIL].dash is not None and REGION_LOOKS[RegionVerdict.PASS].dash is None


def test_scene_patch_numbers_follow_patch_order():
    face = make_face()
    second = Patch((200, 300, 40, 20), 0.01, 45.0, -45.0, 800)
    face = RegionResult(**{**face.__dict__, "patches": face.patches + (second,)})
    scene = build_scene(make_part(regions=(face,)), WIDTH, HEIGHT)
    marks = scene.regions[0].patches
    assert [m.number for m in marks] == [1, 2]
    assert marks[1].bbox_px == (200, 300, 40, 20)


def test_part_frame_axes_follow_datum_rotation():
    rotation = 20.0
    datum = DatumInfo("part-edge", rotation, (30.0, 330.0))
    scene = build_scene(make_part(datum=datum), WIDTH, HEIGHT)
    f = scene.frame
    # analytic: a frame turned by r counter-clockwise has +X at r and +Y at r + 90 on screen
    # the +X axis on screen is rotated 20 deg CCW: up and to the right in image px (rows down)
    angle_x = math.degrees(math.atan2(-(f.x_tip[1] - f.origin[1]), f.x_tip[0] - f.origin[0]))
    angle_y = math.degrees(math.atan2(-(f.y_tip[1] - f.origin[1]), f.y_tip[0] - f.origin[0]))
    assert angle_x == pytest.approx(rotation, abs=1e-9)
    assert angle_y == pytest.approx(rotation + 90.0, abs=1e-9)
    # glyphs are turned with the frame: a cell lay of 90 in the part frame is 110 on screen
    seg = scene.regions[0].glyphs[0]
    d = seg[1] - seg[0]
    assert math.degrees(math.atan2(-d[1], d[0])) % 180 == pytest.approx(110.0, abs=1e-9)
    assert build_scene(make_part(datum=DatumInfo("image", 0.0, (0.0, 0.0))), WIDTH, HEIGHT).frame is None


def test_glyphs_thinned_when_cells_are_small_but_deviating_kept():
    part = make_part()
    # counting: the face grid is 16 x 14 cells, 12 of them deviating (3 x 4 block)
    full = build_scene(part, WIDTH, HEIGHT)
    thin = build_scene(part, WIDTH, HEIGHT, min_glyph_spacing_px=3 * CELL)
    assert thin.regions[0].glyph_stride == 3
    assert len(thin.regions[0].glyphs) < len(full.regions[0].glyphs) / 4
    assert len(thin.regions[0].deviating_glyphs) == len(full.regions[0].deviating_glyphs) == 12


def test_dash_pieces_cover_expected_length():
    square = np.array([[0, 0], [10, 0], [10, 10], [0, 10]], float)
    pieces = dash_pieces(square, True, 3.0, 2.0)
    lengths = [np.hypot(*np.diff(p, axis=0).T).sum() for p in pieces]
    # perimeter 40 with period 5: 8 dashes of length 3 (corners kept inside a dash)
    assert len(pieces) == 8 and np.allclose(lengths, 3.0)


def test_max_side_scales_picture_and_marks():
    part = make_part()
    picture = render_overlay(make_pixels(), part, max_side=240)
    # analytic: 480 x 360 shrunk to a 240 px long side is 240 x 180, coordinates halved
    assert picture.shape == (180, 240, 3)
    x, y, w, h = (v / 2 for v in part.regions[0].patches[0].bbox_px)
    assert nearest_palette_name(picture[int(y + h / 2), int(round(x))]) == "patch"


def test_write_png_round_trip(tmp_path):
    part = make_part()
    path = tmp_path / "out" / "LW-220-0007.overlay.png"
    write_overlay_png(path, make_pixels(), part)
    # reference: OpenCV's own PNG decoder reading the file back
    back = cv2.cvtColor(cv2.imread(str(path), cv2.IMREAD_COLOR), cv2.COLOR_BGR2RGB)
    assert np.array_equal(back, render_overlay(make_pixels(), part))
    assert [p.name for p in path.parent.iterdir()] == [path.name]  # no temporary file left behind


def test_bad_inputs():
    part = make_part()
    with pytest.raises(InputError, match=r"pixels are 100 x 50 px but the result is for a 480 x 360 px image"):
        render_overlay(np.zeros((50, 100), np.float32), part)
    with pytest.raises(InputError, match=r"pixels: image must be \(M, N\) grey"):
        render_overlay(np.zeros((2, 3, 5, 7), np.float32), part)
    with pytest.raises(InputError, match=r"max_side must be a positive number of pixels \(got 0\)"):
        render_overlay(make_pixels(), part, max_side=0)


def test_line_widths_grow_with_picture():
    # analytic: one unit is 1/1000 of the long side; 4 units -> 1.6 px (rounded 2) and 16 px
    small = overlay._RasterPainter(np.zeros((300, 400, 3), np.uint8), 1.0)
    large = overlay._RasterPainter(np.zeros((3000, 4000, 3), np.uint8), 1.0)
    assert small.width("outline") == 2 and large.width("outline") == 16
