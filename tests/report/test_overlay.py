"""Tests for surfinspect.report.overlay: the overlay picture agrees with the result it draws.

Parts are built by hand (``make_part``) so that every coordinate the picture
must show is known exactly; test_report imports the same helpers.
"""

from __future__ import annotations

import math

import cv2
import numpy as np
import pytest

from surfinspect.errors import InputError
from surfinspect.report import overlay
from surfinspect.report.overlay import (
    PALETTE,
    REGION_LOOKS,
    axis_polylines,
    build_scene,
    dash_pieces,
    expected_varies,
    place_labels,
    render_overlay,
    write_overlay_png,
)
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
    *,
    lay_deg: float = 90.37,
    deviating: bool = True,
    cell_lay: float = 90.0,
    patch_lay: float = 30.0,
    name: str = "face",
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
        deviating_area_fraction=patches[0].area_fraction if patches else 0.0,
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
        deviating_area_fraction=0.0,
        patches=(),
        histogram=_histogram(0.4 if textured else None),
        verdict=RegionVerdict.PASS if textured else RegionVerdict.NO_TEXTURE,
        reasons=() if textured else ("no measurable texture: coherence 0.03 below 0.2",),
        outline_px=(_rect_outline(*PAD_RECT),),
        cells=CellGrid((x, y), CELL, lay, np.full(shape, 0.5), np.zeros(shape), np.zeros(shape, bool)),
    )


RING_CENTRE = (220.0, 180.0)  # image px
RING_ORIGIN = (100, 60)  # top-left of the ring region's cell grid, image px
RING_CELLS = 12  # 12 x 12 cells of CELL px
RING_RADIUS = 120.0
RING_WRONG = (slice(0, 3), slice(4, 8))  # cells whose lay runs along the radius instead


def tangent_deg(x: float, y: float, centre=RING_CENTRE) -> float:
    """Analytic lay of circles about ``centre`` at image point (x, y): the radius turned by 90 degrees.

    The radius direction is (x - cx, -(y - cy)) with +Y up (rows grow down).
    """
    return (math.degrees(math.atan2(-(y - centre[1]), x - centre[0])) + 90.0) % 180.0


def make_ring(*, wrong: bool = True, fitted: bool = False, name: str = "ring") -> RegionResult:
    """A circular-lay region: expected lay tangent to circles about RING_CENTRE, cell by cell."""
    x0, y0 = RING_ORIGIN
    n = RING_CELLS
    i, j = np.indices((n, n))
    cx, cy = x0 + (j + 0.5) * CELL, y0 + (i + 0.5) * CELL
    inside = np.hypot(cx - RING_CENTRE[0], cy - RING_CENTRE[1]) < RING_RADIUS - 0.5 * CELL
    expected = np.where(inside, np.vectorize(tangent_deg)(cx, cy), np.nan)
    lay = expected.copy()
    flags = np.zeros((n, n), bool)
    if wrong:
        block = np.zeros((n, n), bool)
        block[RING_WRONG] = True
        block &= inside
        lay[block] = (expected[block] + 90.0) % 180.0
        flags = block
    t = np.linspace(0.0, 2 * math.pi, 48, endpoint=False)
    outline = tuple((RING_CENTRE[0] + RING_RADIUS * math.cos(a), RING_CENTRE[1] + RING_RADIUS * math.sin(a)) for a in t)
    extra = {
        "centre_px": list(RING_CENTRE),
        "mean_cell_coherence": 0.9123,
        "rms_cell_deviation_deg": 0.512,
        "texture_to_noise": 88.51,
    }
    if fitted:
        extra["centre_fitted"] = True
    return RegionResult(
        name=name,
        expected_lay_deg=None,
        tolerance_deg=4.0,
        lay_deg=None,
        deviation_deg=0.437,
        uncertainty_deg=0.05,
        coherence=0.0123,
        deviating_area_fraction=0.0,
        patches=(),
        histogram=_histogram(None),
        verdict=RegionVerdict.FAIL if wrong else RegionVerdict.PASS,
        reasons=("lay is on average 0.4° off the circles about the centre (tolerance 4°)",)
        if wrong
        else ("circular lay as required",),
        lay_pattern="circular",
        outline_px=(outline,),
        cells=CellGrid(RING_ORIGIN, CELL, lay, np.full((n, n), 0.9), expected, flags),
        extra=extra,
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
    assert [r.label for r in scene.regions] == ["face: FAIL", "pad: NO-TEXTURE"]
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


def _axial_angle(segment) -> float:
    """Screen angle of an image-px segment, counter-clockwise with +Y up, in [0, 180)."""
    d = np.asarray(segment[1]) - np.asarray(segment[0])
    return math.degrees(math.atan2(-d[1], d[0])) % 180.0


def test_expected_direction_drawn_per_cell_where_it_varies():
    part = make_part(regions=(make_ring(wrong=False),))
    ring = build_scene(part, WIDTH, HEIGHT).regions[0]
    cells = part.regions[0].cells
    # counting: one tick per cell that has an expected lay (the cells inside the circle)
    assert len(ring.expected_glyphs) == int(np.isfinite(cells.expected_deg).sum()) > 50
    for seg in ring.expected_glyphs:
        mid = (seg[0] + seg[1]) / 2
        # analytic: circles about the centre run perpendicular to the radius through the cell centre
        want = tangent_deg(*mid)
        got = _axial_angle(seg)
        assert min(abs(got - want), 180 - abs(got - want)) < 1e-6
    # the region's one-direction arrows are not drawn: there is no one direction
    assert ring.expected_screen_deg == () and ring.measured_screen_deg == ()
    # a region with one expected direction everywhere gets no per-cell ticks
    assert len(build_scene(make_part(), WIDTH, HEIGHT).regions[0].expected_glyphs) == 0


def test_expected_varies_is_axial():
    # axial directions: 179.99 and 0.01 are 0.02 degrees apart, one direction for the recipe
    assert not expected_varies(np.array([[179.99, 0.01], [np.nan, 0.0]]))
    assert expected_varies(np.array([[0.0, 10.0]]))
    assert not expected_varies(np.array([[np.nan, 45.0]]))


def test_deviating_ring_cell_shows_expected_tick_across_measured_line():
    part = make_part(regions=(make_ring(),))
    picture = render_overlay(make_pixels(lay_deg=0.0), part)
    i, j = 2, 6  # a deviating cell inside the circle, clear of the label and the centre
    assert part.regions[0].cells.deviating[i, j]
    cx, cy = RING_ORIGIN[0] + (j + 0.5) * CELL, RING_ORIGIN[1] + (i + 0.5) * CELL
    expected = math.radians(tangent_deg(cx, cy))
    # the tick (0.95 of a cell) reaches beyond the measured line (0.65 of a cell): between the two
    # lengths, along the expected direction, the picture shows the expected colour
    r = 0.4 * CELL
    px = picture[int(round(cy - r * math.sin(expected))), int(round(cx + r * math.cos(expected)))]
    assert nearest_palette_name(px) in ("expected", "halo-light")
    # the measured line (along the radius, here near vertical) runs across it in the deviating colour;
    # sampled row by row on the line (OpenCV puts integer coordinates at pixel centres)
    # the line is 1 px wide here and blends with its black edge, which scales R, G and B alike: so the
    # hue identifies it, G / R = 159 / 230 = 0.69 for Okabe-Ito orange (0.44 for the vermillion of "fail")
    measured = expected + math.pi / 2
    hits = 0
    for row in range(int(cy) - 4, int(cy) + 5):
        col = int(round(cx + (cy - row) / math.tan(measured)))
        r, g, _ = max((tuple(int(v) for v in picture[row, c]) for c in (col - 1, col, col + 1)), key=lambda p: p[0])
        hits += r > 150 and 0.62 < g / r < 0.76
    assert hits >= 7


def test_lay_centre_marked_and_labelled():
    part = make_part(regions=(make_ring(fitted=True),))
    scene = build_scene(part, WIDTH, HEIGHT)
    assert scene.regions[0].lay_centre == RING_CENTRE and scene.regions[0].lay_centre_fitted
    with_centre = render_overlay(make_pixels(), part).astype(int)
    plain = make_ring(fitted=True)
    plain = RegionResult(**{**plain.__dict__, "extra": {"texture_to_noise": 88.51}})
    without = render_overlay(make_pixels(), make_part(regions=(plain,))).astype(int)
    # reference: the centre the result file gives (extra.centre_px); the marker's white arms reach
    # about 0.9 arrow heads (16 units of 0.48 px) from it, and only the marker differs between the two
    x, y = int(RING_CENTRE[0]), int(RING_CENTRE[1])
    changed = np.argwhere(np.abs(with_centre - without).sum(axis=2) > 60)
    near = np.hypot(changed[:, 1] - x, changed[:, 0] - y) < 12
    assert near.sum() > 20
    label = changed[~near]  # and the label box "ring centre (fitted)" beside it, nothing else
    assert len(label) and (label[:, 1] >= x).all() and (np.abs(label[:, 0] - y) < 30).all()
    arm = with_centre[y - 1 : y + 2, x + 5 : x + 7].min(axis=2)
    assert arm.max() > 230  # white on the arm, away from the ring around the centre


def test_place_labels_keeps_boxes_apart_and_inside():
    boxes = [(10.0, 10.0, 40.0, 10.0)] * 3 + [(95.0, 95.0, 20.0, 10.0)]
    spots = place_labels(boxes, (100.0, 100.0), gap=1.0, obstacles=[(60.0, 0.0, 40.0, 40.0)])
    assert spots[0] == (10.0, 10.0)  # the first keeps its place
    placed = [(x, y, w, h) for (x, y), (_, _, w, h) in zip(spots, boxes)]
    for k, (x, y, w, h) in enumerate(placed):
        assert 0 <= x <= 100 - w and 0 <= y <= 100 - h  # inside the picture
        for a, b, c, d in placed[k + 1 :] + [(60.0, 0.0, 40.0, 40.0)]:
            # analytic: two boxes overlap when both their x and y intervals overlap
            assert x + w <= a or a + c <= x or y + h <= b or b + d <= y


def test_frame_axes_have_heads_and_stay_on_the_picture():
    # origin 30 px below the picture's top: a full-length +Y axis would leave the picture
    datum = DatumInfo("part-edge", 0.0, (40.0, 30.0), size_px=(400.0, 300.0))
    f = build_scene(make_part(datum=datum), WIDTH, HEIGHT).frame
    assert 0.0 <= f.y_tip[1] < 30.0 and f.x_tip[0] - 40.0 == pytest.approx(0.15 * WIDTH)
    _, barb, _ = axis_polylines((0.0, 0.0), (10.0, 0.0), 3.0)
    # analytic: a barb leaves the tip at 150 degrees from the shaft, 3 px long
    d = barb[1] - barb[0]
    assert np.allclose(barb[0], (10.0, 0.0)) and math.hypot(*d) == pytest.approx(3.0)
    assert math.degrees(math.atan2(-d[1], d[0])) == pytest.approx(150.0)


def test_patch_label_names_patch():
    assert overlay.patch_label(3) == "P3"


def test_crossed_lay_draws_each_grain_found():
    import dataclasses

    face = dataclasses.replace(
        make_face(deviating=False),
        lay_pattern="crossed",
        expected_lay_deg=(30.0, 120.0),
        lay_deg=None,
        extra={"crossed_lay_deg": [None, 116.7], "crossed_deviation_deg": [None, -3.3]},
    )
    datum = DatumInfo("part-edge", 2.0, (10.0, 350.0))
    region = build_scene(make_part(regions=(face,), datum=datum), WIDTH, HEIGHT).regions[0]
    # reference: the result's extra.crossed_lay_deg (the one grain found), turned by the datum's skew
    assert region.measured_screen_deg == pytest.approx((118.7,))
    assert region.expected_screen_deg == pytest.approx((32.0, 122.0))
