"""The demo scenario: an invented panel shop with two part numbers.

* LW-220 lift wall panel: brushed stainless, one region, lay vertical (90°)
  within 3°. Photographed square to the camera (datum ``image``).
* CP-14 cover plate: aluminium on a dark fixture, a few degrees skewed; a
  brushed band (lay 0° within 2°) and a face-milled pad judged only for texture
  presence (datum ``part-edge``, regions in mm).

The demo batch mixes good parts, a panel brushed 8° off, a panel with a
re-brushed patch across the grain, a polished blank and a plate whose band is
brushed 3.5° off. Every image comes from :mod:`surfinspect.measure.synth` with a fixed
seed; ``surfinspect demo --regenerate`` writes them again.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import cv2
import numpy as np

from ..fsutil import write_bytes_atomic
from ..measure import synth

__all__ = ["DEMO_PARTS", "make_demo_parts", "plate_on_fixture"]


@dataclass(frozen=True)
class DemoPart:
    file: str
    recipe: str  # recipe file name in recipes/
    what: str  # what the demo expects to see, in words


DEMO_PARTS = (
    DemoPart("lw-220-0001.png", "lw-220-wall-panel.yaml", "good panel"),
    DemoPart("lw-220-0002.png", "lw-220-wall-panel.yaml", "good panel"),
    DemoPart("lw-220-0003.png", "lw-220-wall-panel.yaml", "brushed 8° off: reject"),
    DemoPart("lw-220-0004.png", "lw-220-wall-panel.yaml", "re-brushed patch across the grain: reject"),
    DemoPart("lw-220-0005.png", "lw-220-wall-panel.yaml", "polished blank, no texture: review"),
    DemoPart("cp-14-0001.png", "cp-14-cover-plate.yaml", "good plate, rotated +1.5°"),
    DemoPart("cp-14-0002.png", "cp-14-cover-plate.yaml", "good plate, rotated -2.5°"),
    DemoPart("cp-14-0003.png", "cp-14-cover-plate.yaml", "band brushed 3.5° off: reject"),
)

PANEL_SHAPE = (600, 400)  # rows, cols
PLATE_IMAGE_SHAPE = (440, 640)
PLATE_MM = (120.0, 80.0)
PLATE_PIXEL_MM = 0.25
PAD_MM = (60.0, 57.0, 16.0)  # centre x, y (y downward from the top edge), radius


def plate_on_fixture(
    skew_deg: float, band_lay_deg: float = 0.0, *, seed: int = 0, shape=PLATE_IMAGE_SHAPE, noise: float = 0.008
) -> np.ndarray:
    """A CP-14 cover plate on a dark fixture, turned ``skew_deg`` counter-clockwise.

    The plate's brushed band runs at ``band_lay_deg`` in the part frame (so at
    ``band_lay_deg + skew_deg`` in the image); its face-milled pad shows arcs
    about a centre far outside the pad. The outline is anti-aliased by
    drawing it at 8x and area-averaging down.
    """
    rows, cols = shape
    length, width = (v / PLATE_PIXEL_MM for v in PLATE_MM)
    cx, cy = cols / 2.0, rows / 2.0
    t = math.radians(skew_deg)
    ex, ey = np.array([math.cos(t), -math.sin(t)]), np.array([math.sin(t), math.cos(t)])
    origin = np.array([cx, cy]) - ex * length / 2 - ey * width / 2  # top-left corner, pixel-edge coordinates

    def to_img(u, v):
        return origin + ex * u + ey * v

    corners = np.array([to_img(0, 0), to_img(length, 0), to_img(length, width), to_img(0, width)])
    k = 8
    big = np.zeros((rows * k, cols * k), np.uint8)
    cv2.fillPoly(
        big, [np.round(corners * k * 16).astype(np.int32).reshape(-1, 1, 2)], 255, lineType=cv2.LINE_8, shift=4
    )
    alpha = cv2.resize(big, (cols, rows), interpolation=cv2.INTER_AREA).astype(np.float32) / 255.0

    brushed = synth.brushed_texture(shape, band_lay_deg + skew_deg, seed=seed, along_px=30.0)
    pad_c = to_img(PAD_MM[0] / PLATE_PIXEL_MM, PAD_MM[1] / PLATE_PIXEL_MM)
    far = pad_c + ey * 260.0  # the cutter's centre, off the pad
    arcs = synth.ring_texture(shape, (float(far[0]), float(far[1])), period_px=5.0, seed=seed + 3)
    yy, xx = np.mgrid[0:rows, 0:cols]
    in_pad = np.hypot(xx + 0.5 - pad_c[0], yy + 0.5 - pad_c[1]) < PAD_MM[2] / PLATE_PIXEL_MM + 4
    texture = np.where(in_pad, 1.4 * arcs, brushed)
    plate = synth.shade_and_noise(texture, seed=seed, mean=0.62, contrast=0.07, shading=0.1, noise=0.0)
    rng = np.random.default_rng(seed + 11)
    background = 0.08 + 0.02 * synth.isotropic_texture(shape, seed=seed + 5, correlation_px=3.0)
    img = alpha * plate + (1 - alpha) * background + noise * rng.standard_normal(shape)
    return np.clip(img, 0, 1).astype(np.float32)


def _demo_images() -> dict[str, np.ndarray]:
    return {
        "lw-220-0001.png": synth.brushed_panel(PANEL_SHAPE, 90.4, seed=101),
        "lw-220-0002.png": synth.brushed_panel(PANEL_SHAPE, 89.3, seed=102),
        "lw-220-0003.png": synth.brushed_panel(PANEL_SHAPE, 98.0, seed=103),
        "lw-220-0004.png": synth.brushed_panel(
            PANEL_SHAPE, 90.2, seed=104, patch_rect=(150, 260, 120, 96), patch_lay_deg=4.0
        ),
        "lw-220-0005.png": synth.polished_blank(PANEL_SHAPE, seed=105),
        "cp-14-0001.png": plate_on_fixture(1.5, 0.3, seed=201),
        "cp-14-0002.png": plate_on_fixture(-2.5, -0.4, seed=202),
        "cp-14-0003.png": plate_on_fixture(0.8, 3.5, seed=203),
    }


def make_demo_parts(folder: str | Path) -> list[Path]:
    """Write the demo images (8-bit PNG) into ``folder``; returns their paths."""
    folder = Path(folder)
    out = []
    for name, img in _demo_images().items():
        ok, data = cv2.imencode(".png", synth.to_uint8(img), [cv2.IMWRITE_PNG_COMPRESSION, 9])
        assert ok
        write_bytes_atomic(folder / name, data.tobytes())
        out.append(folder / name)
    return out
