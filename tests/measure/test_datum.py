"""Tests for surfinspect.measure.datum: the part frame found from the part's edges.

The test panels are rendered here with an exact pixel coverage, so the
frame's ground truth (skew, corner, size) follows from the geometry set up in
each test, not from the code under test.
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest

from surfinspect.errors import InputError
from surfinspect.measure import datum
from surfinspect.measure.datum import DatumError, PartFrame, find_part_frame

SHAPE = (400, 600)  # rows, columns
CENTRE = (301.3, 198.7)  # off the pixel grid on purpose
PANEL = (300.0, 180.0)  # length along the panel's own X, width across


def _unit_square_projection_cdf(t, normal):
    """P(normal . U <= t) for U uniform on the unit pixel square centred at 0.

    normal . U is the sum of two uniform variables on [-a/2, a/2] and
    [-b/2, b/2]; its density is the trapezoid obtained by convolving the two
    boxes (the sum of two uniform variables, a textbook result: e.g. Feller,
    An Introduction to Probability Theory, vol. II, ch. I.9 (from memory)).
    """
    a, b = sorted((abs(normal[0]), abs(normal[1])), reverse=True)
    t = np.asarray(t, dtype=np.float64)
    if b < 1e-12:
        return np.clip(t / a + 0.5, 0.0, 1.0)
    inner, outer = (a - b) / 2, (a + b) / 2
    rising = (np.clip(t, -outer, -inner) + outer) ** 2 / (2 * a * b)
    flat = (np.clip(t, -inner, inner) + inner) / a
    falling_part = (outer - np.clip(t, inner, outer)) ** 2 / (2 * a * b)
    falling = (outer - inner) / (2 * a) - falling_part
    return rising + flat + falling


def _panel_axes(rotation_deg):
    """Unit vectors (column, row) of the panel's own X and of its y downward, +Y up on screen."""
    theta = np.deg2rad(rotation_deg)
    along = np.array([np.cos(theta), -np.sin(theta)])
    down = np.array([np.sin(theta), np.cos(theta)])
    return along, down


def _panel_coverage(rotation_deg, *, shape=SHAPE, centre=CENTRE, size=PANEL):
    """Share of each pixel covered by the rotated rectangle.

    Each strip (|u| <= L/2, |v| <= W/2) is covered exactly; their product is
    exact away from the four corner pixels, which the edge fit leaves out.
    """
    along, down = _panel_axes(rotation_deg)
    rows, cols = np.mgrid[0 : shape[0], 0 : shape[1]].astype(np.float64)
    offset = np.stack([cols - centre[0], rows - centre[1]], axis=-1)
    coverage = np.ones(shape)
    for axis, half in ((along, size[0] / 2), (down, size[1] / 2)):
        u = offset @ axis
        coverage *= _unit_square_projection_cdf(half - u, axis) - _unit_square_projection_cdf(-half - u, axis)
    return coverage


def _render_panel(
    rotation_deg,
    *,
    part_level=0.7,
    background_level=0.1,
    noise=0.01,
    brushed=0.05,
    optical_sigma=0.0,
    size=PANEL,
    seed=0,
):
    """A brushed panel (grain along its own X) on a plain background, as a float32 image."""
    rng = np.random.default_rng(seed)
    coverage = _panel_coverage(rotation_deg, size=size)
    kernel = np.zeros((31, 31), np.float32)
    along, _ = _panel_axes(rotation_deg)
    tip = 15 + 12 * along
    start, end = (tuple(int(v) for v in np.rint(p)) for p in (30 - tip, tip))
    cv2.line(kernel, start, end, 1.0, 1, cv2.LINE_AA)
    kernel /= np.sqrt(np.sum(kernel**2))
    grain = cv2.filter2D(rng.standard_normal(SHAPE).astype(np.float32), -1, kernel)
    image = background_level + coverage * (part_level + brushed * grain - background_level)
    if optical_sigma > 0:
        image = cv2.GaussianBlur(image, (0, 0), optical_sigma)
    image = image + noise * rng.standard_normal(SHAPE)
    return np.clip(image, 0.0, 1.0).astype(np.float32)


def _true_top_left(rotation_deg, size=PANEL):
    along, down = _panel_axes(rotation_deg)
    return np.asarray(CENTRE) - size[0] / 2 * along - size[1] / 2 * down


def test_rendered_coverage_matches_brute_force_supersampling():
    # Outside reference: point sampling at 32 x 32 sub-pixel positions per pixel
    # converges to the exact area of the rectangle (300 x 180 = 54000 px^2).
    rotation = 6.5
    coverage = _panel_coverage(rotation)
    along, down = _panel_axes(rotation)
    sub = (np.arange(32) + 0.5) / 32 - 0.5
    rows, cols = 60, 160  # a crop holding the top-left corner and parts of two edges
    r = np.arange(rows)[:, None, None, None] + sub[None, None, :, None]
    c = np.arange(cols)[None, :, None, None] + sub[None, None, None, :]
    dc, dr = c - CENTRE[0], r - CENTRE[1]
    inside = (np.abs(dc * along[0] + dr * along[1]) <= PANEL[0] / 2) & (
        np.abs(dc * down[0] + dr * down[1]) <= PANEL[1] / 2
    )
    brute = inside.mean(axis=(2, 3))
    assert np.abs(brute - coverage[:rows, :cols]).max() < 0.05
    assert coverage.sum() == pytest.approx(PANEL[0] * PANEL[1], rel=1e-4)


@pytest.mark.parametrize("rotation", [-44.0, -30.0, -11.0, 0.0, 6.5, 30.0])
def test_skew_origin_and_size_of_a_bright_panel(rotation):
    # Outside reference: the geometry the panel was rendered with (analytic).
    frame = find_part_frame(_render_panel(rotation, seed=int(rotation) + 50))
    assert abs(frame.rotation_deg - rotation) < 0.1
    assert frame.skew_deg == pytest.approx(frame.rotation_deg)
    assert np.hypot(*(np.asarray(frame.origin_px) - _true_top_left(rotation))) < 0.5
    assert frame.size_px == pytest.approx(PANEL, abs=1.0)
    # An ideal rectangle fills its fitted rectangle exactly (analytic).
    assert frame.fit_quality.filled_share == pytest.approx(1.0, abs=0.01)
    assert frame.fit_quality.corner_error_deg < 0.5


@pytest.mark.parametrize("rotation", [-11.0, 0.0, 6.5])
def test_dark_panel_on_bright_background(rotation):
    # Outside reference: the rendered geometry (analytic); polarity comes from the border.
    image = _render_panel(rotation, part_level=0.25, background_level=0.85, seed=7)
    frame = find_part_frame(image)
    assert abs(frame.rotation_deg - rotation) < 0.1
    assert np.hypot(*(np.asarray(frame.origin_px) - _true_top_left(rotation))) < 0.5
    assert frame.size_px == pytest.approx(PANEL, abs=1.0)


def test_blurred_low_contrast_brushed_panel():
    # Outside reference: the rendered geometry (analytic); a symmetric optical
    # blur leaves a straight edge's 50 % level where it was (analytic).
    rotation = -3.2
    image = _render_panel(
        rotation, part_level=0.5, background_level=0.2, noise=0.02, brushed=0.03, optical_sigma=1.2, seed=3
    )
    frame = find_part_frame(image)
    assert abs(frame.rotation_deg - rotation) < 0.1
    assert np.hypot(*(np.asarray(frame.origin_px) - _true_top_left(rotation))) < 0.5
    assert frame.size_px == pytest.approx(PANEL, abs=1.0)


def test_rounded_corners_give_the_virtual_sharp_corner():
    # Outside reference: the rendered geometry; the frame origin of a panel with
    # radiused corners is where its straight sides meet (the virtual sharp
    # corner a drawing dimensions from: common practice, no source). The disc
    # cut-outs remove (4 - pi) r^2 of area (geometry).
    rotation, radius, scale = 6.5, 20.0, 4
    along, down = _panel_axes(rotation)
    rows = (np.arange(SHAPE[0] * scale) - (scale - 1) / 2) / scale - CENTRE[1]
    cols = (np.arange(SHAPE[1] * scale) - (scale - 1) / 2) / scale - CENTRE[0]
    u = np.abs(cols[None, :] * along[0] + rows[:, None] * along[1]) - (PANEL[0] / 2 - radius)
    v = np.abs(cols[None, :] * down[0] + rows[:, None] * down[1]) - (PANEL[1] / 2 - radius)
    inside = np.hypot(np.maximum(u, 0), np.maximum(v, 0)) + np.minimum(np.maximum(u, v), 0) <= radius
    coverage = cv2.resize(inside.astype(np.float32), SHAPE[::-1], interpolation=cv2.INTER_AREA)
    image = (0.1 + 0.6 * coverage + 0.01 * np.random.default_rng(8).standard_normal(SHAPE)).astype(np.float32)

    frame = find_part_frame(np.clip(image, 0, 1))
    assert abs(frame.rotation_deg - rotation) < 0.1
    assert np.hypot(*(np.asarray(frame.origin_px) - _true_top_left(rotation))) < 0.5
    assert frame.size_px == pytest.approx(PANEL, abs=1.0)
    expected_share = 1 - (4 - np.pi) * radius**2 / (PANEL[0] * PANEL[1])
    assert frame.fit_quality.filled_share == pytest.approx(expected_share, abs=0.005)


def test_large_image_path_finds_the_part_on_a_reduced_copy(monkeypatch):
    # Outside reference: the rendered geometry (analytic). A large image is
    # searched on an area-averaged copy first; forcing a 4x reduction here must
    # not change the sub-pixel result, which comes from the full image.
    monkeypatch.setattr(datum, "_MASK_MAX_SIDE_PX", 150)
    rotation = 6.5
    frame = find_part_frame(_render_panel(rotation, seed=21))
    assert abs(frame.rotation_deg - rotation) < 0.1
    assert np.hypot(*(np.asarray(frame.origin_px) - _true_top_left(rotation))) < 0.5
    assert frame.size_px == pytest.approx(PANEL, abs=1.0)
    assert frame.fit_quality.filled_share == pytest.approx(1.0, abs=0.03)


def test_portrait_panel_takes_x_along_its_longer_side():
    # Outside reference: the rendered geometry. The panel's long side (300 px)
    # runs near-vertically, so +X is the screen "up" direction turned by the skew,
    # and the corner that is top-left with +X pointing right is the bottom-left
    # one on screen.
    skew = 4.0
    size = (180.0, 300.0)
    image = _render_panel(skew, size=size, seed=11)
    along, down = _panel_axes(skew)
    bottom_left = np.asarray(CENTRE) - size[0] / 2 * along + size[1] / 2 * down

    frame = find_part_frame(image)
    assert abs(frame.rotation_deg - (skew + 90.0)) < 0.1
    assert abs(frame.skew_deg - skew) < 0.1
    assert np.hypot(*(np.asarray(frame.origin_px) - bottom_left)) < 0.5
    assert frame.size_px == pytest.approx((300.0, 180.0), abs=1.0)

    upright = find_part_frame(image, x_axis="horizontal-side")
    assert abs(upright.rotation_deg - skew) < 0.1
    assert np.hypot(*(np.asarray(upright.origin_px) - _true_top_left(skew, size))) < 0.5
    assert upright.size_px == pytest.approx(size, abs=1.0)


def test_part_frame_mapping_is_a_rigid_motion_and_its_own_inverse():
    # Outside reference: analytic rotation (x right, y down from the top-left
    # corner): image = origin + x * (cos t, -sin t) + y * (sin t, cos t), with t
    # counter-clockwise on screen; a rotation matrix's inverse is its transpose.
    frame = PartFrame(rotation_deg=6.5, skew_deg=6.5, origin_px=(151.2, 97.4), size_px=(300.0, 180.0))
    rng = np.random.default_rng(5)
    part_points = rng.uniform(-50, 400, size=(200, 2))
    t = np.deg2rad(6.5)
    by_hand = (
        np.array([151.2, 97.4])
        + part_points[:, :1] * np.array([np.cos(t), -np.sin(t)])
        + part_points[:, 1:] * np.array([np.sin(t), np.cos(t)])
    )
    np.testing.assert_allclose(frame.part_to_image(part_points), by_hand, atol=1e-9)

    image_points = rng.uniform(0, 600, size=(200, 2))
    np.testing.assert_allclose(frame.part_to_image(frame.image_to_part(image_points)), image_points, atol=1e-9)
    np.testing.assert_allclose(frame.image_to_part(frame.part_to_image(part_points)), part_points, atol=1e-9)
    np.testing.assert_allclose(frame.image_to_part(image_points[0]), frame.image_to_part(image_points[:1])[0])


def test_fitted_frame_round_trip_and_the_part_lies_at_positive_coordinates():
    # Outside reference: the rendered geometry; the panel's centre lies at
    # (L/2, W/2) from its top-left corner (analytic).
    frame = find_part_frame(_render_panel(-11.0, seed=2))
    pixels = np.random.default_rng(1).uniform(0, 600, size=(100, 2))
    np.testing.assert_allclose(frame.part_to_image(frame.image_to_part(pixels)), pixels, atol=1e-9)
    np.testing.assert_allclose(frame.image_to_part(CENTRE), np.asarray(PANEL) / 2, atol=0.5)
    outline = frame.image_to_part(frame.outline_px())
    np.testing.assert_allclose(
        outline, [[0, 0], [frame.size_px[0], 0], frame.size_px, [0, frame.size_px[1]]], atol=1e-9
    )


def test_angles_convert_between_image_and_part():
    # Outside reference: DESIGN angle convention; lay along the part's edge is 0
    # in the part frame, and axial angles wrap at 180 (analytic).
    frame = PartFrame(rotation_deg=-11.0, skew_deg=-11.0, origin_px=(0.0, 0.0), size_px=(1.0, 1.0))
    assert frame.angle_to_part_deg(-11.0) == pytest.approx(0.0)
    assert frame.angle_to_part_deg(79.0) == pytest.approx(90.0)
    assert frame.angle_to_part_deg(170.0) == pytest.approx(1.0)
    angles = np.linspace(0, 179.9, 50)
    np.testing.assert_allclose(frame.angle_to_image_deg(frame.angle_to_part_deg(angles)), angles, atol=1e-9)


def test_datum_error_is_an_input_error():
    # Outside reference: the project's error contract (InputError -> exit 2).
    assert issubclass(DatumError, InputError)


def test_empty_image_has_no_part():
    # Outside reference: a uniform image holds no contrast at all (analytic).
    with pytest.raises(DatumError, match=r"no part found: the image is uniform"):
        find_part_frame(np.zeros(SHAPE, np.float32))


def test_noise_only_has_no_part():
    # Outside reference: Otsu's separability of one Gaussian population split at
    # its mean is 2/pi = 0.64 (Otsu 1979, analytic), below the 0.8 needed.
    noise = np.clip(0.5 + 0.05 * np.random.default_rng(0).standard_normal(SHAPE), 0, 1).astype(np.float32)
    with pytest.raises(DatumError, match=r"no part found: the grey levels do not split .*separability 0\.6\d"):
        find_part_frame(noise)


def test_part_touching_the_left_border():
    # Outside reference: the rectangle is placed to cross column 0 (geometry set here).
    image = np.full(SHAPE, 0.1, np.float32)
    image[100:300, 0:400] = 0.7
    with pytest.raises(DatumError, match=r"^part touches the image border at the left edge$"):
        find_part_frame(image)


def test_disc_is_not_a_rectangle():
    # Outside reference: a disc fills pi/4 = 0.785 of its enclosing square (geometry).
    image = np.full(SHAPE, 0.1, np.float32)
    cv2.circle(image, (300, 200), 150, 0.7, thickness=-1)
    with pytest.raises(DatumError, match=r"outline is not rectangular: filled share 0\.7[89] < 0\.97"):
        find_part_frame(image)


def test_trapezoid_corners_are_not_square():
    # Outside reference: a symmetric trapezoid whose slanted sides lean 3 deg
    # has corner angles of 90 +/- 3 deg (geometry).
    lean = np.tan(np.deg2rad(3.0)) * 180
    corners = np.array([[150, 110], [450, 110], [450 - lean, 290], [150 + lean, 290]])
    # Fill at 8x resolution (pixel centres of the fine grid at 8 x + 3.5) and
    # average 8 x 8 blocks, so the slanted sides are not staircased.
    scale = 8
    fine = np.zeros((SHAPE[0] * scale, SHAPE[1] * scale), np.uint8)
    cv2.fillPoly(fine, [np.rint((corners * scale + (scale - 1) / 2) * 16).astype(np.int32)], 255, shift=4)
    coverage = cv2.resize(fine, SHAPE[::-1], interpolation=cv2.INTER_AREA).astype(np.float32) / 255
    image = 0.1 + 0.6 * coverage
    with pytest.raises(DatumError, match=r"corner angle differs from 90 deg by 3\.0\d deg > 2\.00 deg"):
        find_part_frame(image, min_filled_share=0.9)


def test_skew_beyond_the_allowed_limit():
    # Outside reference: the panel is rendered 11 deg skewed (geometry set here).
    with pytest.raises(DatumError, match=r"part is rotated -11\.0\d deg, more than max_skew_deg 5\.00 deg"):
        find_part_frame(_render_panel(-11.0, seed=4), max_skew_deg=5.0)


@pytest.mark.parametrize(
    ("image", "message"),
    [
        (np.zeros((40, 40, 3), np.float32), r"image must be a 2-D grey array \(got shape \(40, 40, 3\)\)"),
        (np.zeros((40, 40), np.uint8), r"image must be floating point .*got dtype uint8"),
        (np.full((40, 40), 2.0, np.float32), r"image values must lie in \[0, 1\] \(got 2 to 2\)"),
    ],
)
def test_bad_image_arrays(image, message):
    # Outside reference: the fixed input contract (float grey image in [0, 1]).
    with pytest.raises(DatumError, match=message):
        find_part_frame(image)
