"""Crossed lay from the angular power spectrum (measure.crossed and the crossed judge).

The truth is analytic throughout: sine gratings ``synth.sine_grating`` at exact angles and
brushed textures ``synth.brushed_texture`` filtered along exact angles in the Fourier domain,
superposed as averaged (marks that add) or max-combined (a second pass over the first).
"""

from __future__ import annotations

import re

import numpy as np
import pytest

from surfinspect import inspect_image, parse_recipe
from surfinspect.measure import synth
from surfinspect.measure.axial import wrap_deviation
from surfinspect.measure.crossed import angular_resolution_deg, spectral_families
from surfinspect.measure.noise import noise_sigma
from surfinspect.results import PartVerdict, RegionVerdict

SIDE = 480
RECT = "[16, 16, 448, 448]"  # the 448 px region of the table


def _recipe(a: float, b: float, rect: str = RECT, tolerance: float = 3.0):
    return parse_recipe(
        f"recipe: t\nrevision: 1\nregions:\n  - name: r\n    rect: {rect}\n    lay: crossed\n"
        f"    lay_deg: [{a}, {b}]\n    tolerance_deg: {tolerance}\n",
        "crossed.yaml",
    )


def _gratings(a: float, b: float, period: float, seed: int, side: int = SIDE) -> np.ndarray:
    rng = np.random.default_rng(seed)
    shape = (side, side)
    t = synth.sine_grating(shape, a, period, amplitude=0.2, mean=0.0, phase=rng.uniform(0, 2 * np.pi))
    t = t + synth.sine_grating(shape, b, period, amplitude=0.2, mean=0.0, phase=rng.uniform(0, 2 * np.pi))
    return np.clip(0.5 + t + 0.01 * rng.standard_normal(shape), 0.0, 1.0).astype(np.float32)


def _brushed(a: float, b: float, seed: int, *, combine: str = "add", share_a: float = 0.5, side: int = SIDE):
    """Two brushed families; ``share_a`` is the first family's share of the energy when they add."""
    shape = (side, side)
    ta, tb = synth.brushed_texture(shape, a, seed=seed), synth.brushed_texture(shape, b, seed=seed + 100)
    if combine == "add":
        tex = np.sqrt(share_a) * ta + np.sqrt(1.0 - share_a) * tb
    else:
        tex = np.maximum(ta, tb)
    return synth.shade_and_noise(tex / tex.std(), seed=seed)


def _check_accepted(img, a, b, limit=0.5):
    part = inspect_image(img, _recipe(a, b))
    region = part.regions[0]
    assert part.verdict is PartVerdict.ACCEPT, region.reasons
    found, unc = region.extra["crossed_lay_deg"], region.extra["crossed_uncertainty_deg"]
    errors = [abs(wrap_deviation(found[0], a)), abs(wrap_deviation(found[1], b))]
    assert max(errors) <= limit, (found, errors)
    assert all(u is not None and 0 < u < 1.5 for u in unc), unc
    assert region.patches == ()
    return region, errors, unc


# the table, at two seeds (phases, textures) each
@pytest.mark.parametrize(
    "a, b, period, seed",
    [(30, 120, 8, 1), (30, 120, 8, 2), (45, 135, 12, 3), (45, 135, 12, 4), (30, 120, 20, 5), (30, 120, 20, 6)],
)
def test_summed_gratings_are_accepted_with_both_directions_within_half_a_degree(a, b, period, seed):
    region, errors, unc = _check_accepted(_gratings(a, b, period, seed), a, b, limit=0.01)
    assert region.extra["crossed_method"] == ["line", "line"]
    assert region.extra["balance"] == pytest.approx(0.5, abs=0.01)  # equal amplitudes: equal energy


@pytest.mark.parametrize("combine, seed", [("add", 1), ("add", 2), ("max", 1), ("max", 2)])
def test_brushed_families_averaged_or_max_combined_are_accepted(combine, seed):
    region, errors, unc = _check_accepted(_brushed(30, 120, seed, combine=combine), 30, 120)
    assert region.extra["crossed_method"] == ["lobe", "lobe"]


@pytest.mark.parametrize("a, b, seed", [(60, 120, 3), (80, 100, 4)])
def test_separations_of_60_and_20_degrees_are_resolved(a, b, seed):
    _check_accepted(_brushed(a, b, seed), a, b)
    region, errors, _ = _check_accepted(_gratings(a, b, 20, seed), a, b, limit=0.01)
    # 20 deg apart at period 20 on 448 px: the Hann window resolves 2 / (448 / 20) rad = 5.1 deg
    assert region.extra["angular_resolution_deg"] == pytest.approx(angular_resolution_deg(448, 1 / 20), rel=0.05)


@pytest.mark.parametrize("share_a", [0.5, 0.8])
def test_balance_is_the_weaker_familys_share_of_the_energy(share_a):
    region, _, _ = _check_accepted(_brushed(30, 120, 7, share_a=share_a), 30, 120)
    # truth: the energies were mixed share_a : 1 - share_a (unit-variance textures, sqrt amplitudes)
    # (each texture's energy within the band 1/64-1/2 cycles/px is random to a few per cent: measured
    # 0.42-0.50 over seeds for an even mix)
    assert region.extra["balance"] == pytest.approx(min(share_a, 1 - share_a), abs=0.08)
    shares = region.extra["crossed_share"]
    assert shares[0] == pytest.approx(share_a, abs=0.08) and sum(shares) == pytest.approx(1.0)


@pytest.mark.parametrize("lay, seed", [(30.0, 4), (120.0, 5)])
def test_a_single_direction_under_a_crossed_recipe_fails_with_no_second_direction(lay, seed):
    # seed 5 at 120 deg holds a long scratch along the grain: a line at 55 px period, 0.9 deg from the
    # grain's lobe, which is part of the same family (closer than that frequency resolves)
    img = synth.brushed_panel((SIDE, SIDE), lay, seed=seed)
    region = inspect_image(img, _recipe(30, 120)).regions[0]
    missing = 120.0 if lay == 30.0 else 30.0
    assert region.verdict is RegionVerdict.FAIL
    assert region.reasons == (region.reasons[0],) and region.reasons[0].startswith(
        f"no second direction: no lay found near {missing:.1f}°"
    ), region.reasons
    assert re.search(rf"one family of marks, at {lay - 1:.0f}\.[5-9]°|{lay:.0f}\.[0-4]°", region.reasons[0])


def test_a_crossed_surface_6_degrees_off_one_direction_fails_naming_that_direction():
    img = _brushed(36, 120, 5)
    region = inspect_image(img, _recipe(30, 120)).regions[0]
    assert region.verdict is RegionVerdict.FAIL
    assert len(region.reasons) == 1 and "off 30.0°" in region.reasons[0], region.reasons
    assert re.match(r"lay 36\.[0-4]° is 6\.[0-4]° off 30\.0° \(tolerance 3°\)$", region.reasons[0])
    assert abs(region.extra["crossed_deviation_deg"][1]) < 0.5


@pytest.mark.parametrize("combine", ["add", "max"])
def test_a_patch_where_one_family_is_missing_is_found(combine):
    shape = (SIDE, SIDE)
    ta, tb = synth.brushed_texture(shape, 30, seed=8), synth.brushed_texture(shape, 120, seed=108)
    tb = tb.copy()
    tb[200:296, 150:246] = 0.0 if combine == "add" else tb.min()  # 96 px re-worked: only the 30 deg family
    tex = ta + tb if combine == "add" else np.maximum(ta, tb)
    img = synth.shade_and_noise(tex / tex.std(), seed=8)
    region = inspect_image(img, _recipe(30, 120)).regions[0]
    assert region.verdict is RegionVerdict.FAIL
    assert region.extra["cells_missing_family"][0] == 0 and region.extra["cells_missing_family"][1] >= 5
    x, y, w, h = region.patches[0].bbox_px
    assert x < 246 and x + w > 150 and y < 296 and y + h > 200  # where the second family is missing
    assert abs(wrap_deviation(region.patches[0].lay_deg, 30)) < 10  # the family it holds
    # the directions themselves still come out of the spectrum
    assert abs(wrap_deviation(region.extra["crossed_lay_deg"][1], 120)) < 0.5


def test_directions_closer_than_the_resolution_go_to_review():
    # 128 px, period 20: resolution 2 / (128 / 20) rad = 17.9 deg; the recipe wants 12 deg apart
    img = _gratings(80, 92, 20, 1, side=160)
    region = inspect_image(img, _recipe(80, 92, rect="[16, 16, 128, 128]", tolerance=2)).regions[0]
    assert region.verdict is RegionVerdict.REVIEW
    assert "closer than this region's angular resolution" in region.reasons[0]


def test_lobe_standard_error_covers_the_scatter_over_textures():
    """The delta-method standard error of a lobe against the observed scatter over 12 textures.

    Reference: the directions are known exactly (Fourier-domain synthesis), so the scatter of the
    estimate over independent textures is the true error; about 95 % of |error| must lie within
    2 standard errors, and the standard error must not exceed 3x the observed rms (not vacuous).
    """
    errors, ses = [], []
    for seed in range(12):
        img = _brushed(40, 130, 50 + seed, side=256)
        fam = spectral_families(img, noise_sigma=noise_sigma(img)).present
        assert len(fam) == 2
        for truth in (40, 130):
            f = min(fam, key=lambda f: abs(wrap_deviation(f.lay_deg, truth)))
            errors.append(abs(wrap_deviation(f.lay_deg, truth)))
            ses.append(f.standard_error_deg)
    errors, ses = np.array(errors), np.array(ses)
    assert np.mean(errors <= 2 * ses) >= 0.9
    assert np.mean(ses) <= 3 * np.sqrt(np.mean(errors**2))


def test_a_patch_brushed_between_the_two_families_is_found():
    # re-brushed at 75 deg, 45 deg from both families: each family's share of the cells stays even
    # there, so it is the energy off both directions that finds it
    shape = (SIDE, SIDE)
    tex = synth.brushed_texture(shape, 30, seed=1) + synth.brushed_texture(shape, 120, seed=101)
    tex[200:296, 150:246] = np.sqrt(2.0) * synth.brushed_texture(shape, 75, seed=201)[200:296, 150:246]
    region = inspect_image(synth.shade_and_noise(tex / tex.std(), seed=1), _recipe(30, 120)).regions[0]
    assert region.verdict is RegionVerdict.FAIL
    assert region.extra["cells_off_both_families"] >= 9
    x, y, w, h = region.patches[0].bbox_px
    assert x <= 150 + 24 and x + w >= 246 - 24 and y <= 200 + 24 and y + h >= 296 - 24
    assert abs(wrap_deviation(region.patches[0].lay_deg, 75)) < 10  # the patch's own direction
