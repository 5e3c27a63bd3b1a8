"""Synthetic surfaces with known lay: gratings, brushed and polished panels.

Used by the demo, the calibration targets and the tests. Every generator takes
a seed and returns float32 grey images in [0, 1] (rows downward). Lays follow
the fixed convention: degrees counter-clockwise from +X, +Y up on screen.

Oriented textures are made by filtering noise in the Fourier domain with a
filter aligned to the requested angle, so the lay is exact and there is no
interpolation bias from rotating an image.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import fft

__all__ = [
    "sine_grating",
    "brushed_texture",
    "isotropic_texture",
    "ring_texture",
    "shade_and_noise",
    "brushed_panel",
    "polished_blank",
    "to_uint8",
    "to_uint16",
    "add_scratch",
    "add_glare",
    "add_streak",
    "illumination_ramp",
    "vignette",
    "motion_blur",
    "defocus",
    "jpeg_roundtrip",
]


def _coords(shape: tuple[int, int]) -> tuple[np.ndarray, np.ndarray]:
    """Pixel-centre coordinates x (columns) and y_up (= -row) as float64."""
    rows, cols = shape
    x = np.arange(cols, dtype=np.float64)[None, :]
    y_up = -np.arange(rows, dtype=np.float64)[:, None]
    return x, y_up


def sine_grating(
    shape: tuple[int, int],
    lay_deg: float,
    period_px: float,
    *,
    amplitude: float = 0.4,
    mean: float = 0.5,
    phase: float = 0.0,
) -> np.ndarray:
    """A sine grating whose lines run along ``lay_deg``.

    ``I(x, y) = mean + amplitude * sin(2 pi (n . p) / period + phase)`` with
    ``n = (-sin lay, cos lay)`` the normal to the lines and ``p = (x, y_up)``.
    """
    x, y = _coords(shape)
    t = math.radians(lay_deg)
    u = -math.sin(t) * x + math.cos(t) * y
    return (mean + amplitude * np.sin(2 * math.pi * u / period_px + phase)).astype(np.float32)


def _freq_grid(shape: tuple[int, int]) -> tuple[np.ndarray, np.ndarray]:
    """Frequencies (cycles/px) along x and y_up for ``rfft2`` of an image."""
    rows, cols = shape
    fx = fft.rfftfreq(cols)[None, :]
    fy = -fft.fftfreq(rows)[:, None]  # row index grows downward: y_up frequency flips sign
    return fx, fy


def brushed_texture(
    shape: tuple[int, int],
    lay_deg: float,
    *,
    seed: int = 0,
    along_px: float = 40.0,
    across_px: float = 1.2,
    scratch_density: float = 0.0015,
    scratch_length_px: float = 120.0,
    scratch_strength: float = 2.0,
) -> np.ndarray:
    """Brushed-metal texture: anisotropic filtered noise plus scratches along the lay.

    Parameters
    ----------
    shape : (rows, cols)
    lay_deg : float
        Direction of the brushing lines.
    seed : int
    along_px, across_px : float
        Correlation lengths of the fine grain along and across the lay.
    scratch_density : float
        Scratch seeds per pixel; each becomes a line of ``scratch_length_px``.
    scratch_strength : float
        Scratch contrast relative to the grain.

    Returns
    -------
    (rows, cols) float32, zero mean, unit standard deviation.
    """
    rng = np.random.default_rng(seed)
    fx, fy = _freq_grid(shape)
    t = math.radians(lay_deg)
    f_along = fx * math.cos(t) + fy * math.sin(t)  # frequency along the lines
    f_across = -fx * math.sin(t) + fy * math.cos(t)
    two_pi2 = 2 * math.pi**2

    def oriented(noise: np.ndarray, along: float, across: float) -> np.ndarray:
        spec = fft.rfft2(noise, workers=-1)
        spec *= np.exp(-two_pi2 * ((f_along * along) ** 2 + (f_across * across) ** 2))
        out = fft.irfft2(spec, s=shape, workers=-1)
        out -= out.mean()
        return out / (out.std() + 1e-12)

    grain = oriented(rng.standard_normal(shape), along_px, across_px)
    if scratch_density > 0:
        seeds = (rng.random(shape) < scratch_density) * rng.choice([-1.0, 1.0], size=shape)
        scratches = oriented(seeds, scratch_length_px / 2.0, 0.8)
        grain = grain + scratch_strength * scratches
        grain = (grain - grain.mean()) / grain.std()
    return grain.astype(np.float32)


def isotropic_texture(shape: tuple[int, int], *, seed: int = 0, correlation_px: float = 2.0) -> np.ndarray:
    """Direction-free texture (sanded or blasted look): isotropic filtered noise, unit std."""
    rng = np.random.default_rng(seed)
    fx, fy = _freq_grid(shape)
    spec = fft.rfft2(rng.standard_normal(shape), workers=-1)
    spec *= np.exp(-2 * math.pi**2 * (fx**2 + fy**2) * correlation_px**2)
    out = fft.irfft2(spec, s=shape, workers=-1)
    return ((out - out.mean()) / out.std()).astype(np.float32)


def ring_texture(
    shape: tuple[int, int],
    centre_px: tuple[float, float],
    *,
    period_px: float = 6.0,
    seed: int = 0,
    radial: bool = False,
) -> np.ndarray:
    """Concentric rings about ``centre_px`` (x, y image pixels), or spokes with ``radial``.

    Rings: ``sin(2 pi r / period)``, whose lay is tangent to circles about the
    centre. Spokes: ``sin(k * phi)`` with k chosen so the spoke spacing is
    about ``period_px`` at the image's half-size radius. A little noise is added.
    Returns unit-amplitude values around zero.
    """
    rows, cols = shape
    yy, xx = np.mgrid[0:rows, 0:cols].astype(np.float64)
    dx, dy = xx - centre_px[0], yy - centre_px[1]
    if radial:
        k = max(8, int(round(2 * math.pi * 0.5 * min(rows, cols) / period_px)))
        base = np.sin(k * np.arctan2(dy, dx))
    else:
        base = np.sin(2 * math.pi * np.hypot(dx, dy) / period_px)
    rng = np.random.default_rng(seed)
    return (base + 0.05 * rng.standard_normal(shape)).astype(np.float32)


def shade_and_noise(
    texture: np.ndarray,
    *,
    seed: int = 0,
    mean: float = 0.55,
    contrast: float = 0.08,
    shading: float = 0.15,
    shading_deg: float = 30.0,
    noise: float = 0.01,
) -> np.ndarray:
    """Turn a zero-mean texture into a photo: contrast, illumination gradient, camera noise.

    ``shading`` is the relative brightness change across the image along
    ``shading_deg``; ``noise`` the standard deviation of additive camera noise
    (on the [0, 1] scale). Clipped to [0, 1].
    """
    rows, cols = texture.shape
    x, y = _coords((rows, cols))
    t = math.radians(shading_deg)
    ramp = (x / cols - 0.5) * math.cos(t) + (y / rows + 0.5) * math.sin(t)
    light = 1.0 + shading * ramp
    rng = np.random.default_rng(seed + 7919)
    img = (mean + contrast * texture) * light + noise * rng.standard_normal((rows, cols))
    return np.clip(img, 0.0, 1.0).astype(np.float32)


def brushed_panel(
    shape: tuple[int, int],
    lay_deg: float,
    *,
    seed: int = 0,
    patch_rect: tuple[int, int, int, int] | None = None,
    patch_lay_deg: float | None = None,
    noise: float = 0.01,
    shading: float = 0.15,
) -> np.ndarray:
    """A photographed brushed panel, optionally with a re-brushed patch.

    ``patch_rect`` is ``(x, y, w, h)`` in image pixels where the grain runs at
    ``patch_lay_deg`` instead (a local re-work across the grain).
    """
    tex = brushed_texture(shape, lay_deg, seed=seed)
    if patch_rect is not None and patch_lay_deg is not None:
        other = brushed_texture(shape, patch_lay_deg, seed=seed + 1)
        x, y, w, h = patch_rect
        tex = tex.copy()
        tex[y : y + h, x : x + w] = other[y : y + h, x : x + w]
    return shade_and_noise(tex, seed=seed, noise=noise, shading=shading)


def polished_blank(shape: tuple[int, int], *, seed: int = 0, noise: float = 0.01, shading: float = 0.25) -> np.ndarray:
    """A polished (or blank) surface: smooth illumination and camera noise, no lay."""
    return shade_and_noise(np.zeros(shape, dtype=np.float32), seed=seed, noise=noise, shading=shading, mean=0.7)


def to_uint8(image: np.ndarray) -> np.ndarray:
    return np.clip(np.rint(np.asarray(image) * 255.0), 0, 255).astype(np.uint8)


def to_uint16(image: np.ndarray) -> np.ndarray:
    return np.clip(np.rint(np.asarray(image) * 65535.0), 0, 65535).astype(np.uint16)


# ------------------------------------------------------------ photo conditions
# What a shop photo adds to a surface: scratches, glare, uneven light, blur and compression.
# Each takes and returns a float32 image in [0, 1] (rows downward).


def add_scratch(
    image: np.ndarray,
    start_px: tuple[float, float],
    end_px: tuple[float, float],
    *,
    width_px: float = 3.0,
    depth: float = 0.3,
) -> np.ndarray:
    """A dark straight scratch from ``start_px`` to ``end_px`` (x, y image px), anti-aliased.

    The scratch darkens by ``depth`` (on the [0, 1] scale) with a smooth profile
    ``exp(-0.5 (d / (width/2.355))^2)`` across it (``width_px`` is its full width at half depth).
    """
    rows, cols = image.shape
    yy, xx = np.mgrid[0:rows, 0:cols].astype(np.float64)
    (x0, y0), (x1, y1) = start_px, end_px
    length = math.hypot(x1 - x0, y1 - y0)
    ux, uy = (x1 - x0) / length, (y1 - y0) / length
    along = (xx - x0) * ux + (yy - y0) * uy
    across = -(xx - x0) * uy + (yy - y0) * ux
    s = width_px / 2.355
    profile = np.exp(-0.5 * (across / s) ** 2) * ((along >= 0) & (along <= length))
    return np.clip(image - depth * profile, 0.0, 1.0).astype(np.float32)


def add_glare(image: np.ndarray, centre_px: tuple[float, float], radius_px: float, *, peak: float = 1.6) -> np.ndarray:
    """A specular highlight: a Gaussian bright spot that clips at 1 over its middle."""
    rows, cols = image.shape
    yy, xx = np.mgrid[0:rows, 0:cols].astype(np.float64)
    r2 = (xx - centre_px[0]) ** 2 + (yy - centre_px[1]) ** 2
    return np.clip(image + peak * np.exp(-0.5 * r2 / radius_px**2), 0.0, 1.0).astype(np.float32)


def add_streak(image: np.ndarray, angle_deg: float, offset_px: float, width_px: float, *, peak: float = 1.6):
    """The reflection of a tube light: a bright band along ``angle_deg`` (part frame), clipped at 1.

    ``offset_px`` is the band's signed distance from the image centre; the band's profile across is
    Gaussian with standard deviation ``width_px / 2``.
    """
    rows, cols = image.shape
    x, y_up = _coords((rows, cols))
    x = x - (cols - 1) / 2.0
    y_up = y_up + (rows - 1) / 2.0
    t = math.radians(angle_deg)
    across = -math.sin(t) * x + math.cos(t) * y_up - offset_px
    return np.clip(image + peak * np.exp(-0.5 * (across / (width_px / 2.0)) ** 2), 0.0, 1.0).astype(np.float32)


def illumination_ramp(image: np.ndarray, levels: float, *, angle_deg: float = 30.0) -> np.ndarray:
    """Add a linear brightness ramp of ``levels`` (on the [0, 1] scale) across the image along ``angle_deg``."""
    rows, cols = image.shape
    x, y_up = _coords((rows, cols))
    t = math.radians(angle_deg)
    u = (x - (cols - 1) / 2.0) * math.cos(t) + (y_up + (rows - 1) / 2.0) * math.sin(t)
    span = abs(cols * math.cos(t)) + abs(rows * math.sin(t))
    return np.clip(image + levels * u / span, 0.0, 1.0).astype(np.float32)


def vignette(image: np.ndarray, strength: float = 0.5) -> np.ndarray:
    """Darken towards the corners: brightness ``1 - strength * (r / r_corner)^2`` (a lens's falloff)."""
    rows, cols = image.shape
    yy, xx = np.mgrid[0:rows, 0:cols].astype(np.float64)
    r2 = (xx - (cols - 1) / 2.0) ** 2 + (yy - (rows - 1) / 2.0) ** 2
    falloff = 1.0 - strength * r2 / r2.max()
    return np.clip(image * falloff, 0.0, 1.0).astype(np.float32)


def motion_blur(image: np.ndarray, length_px: int, angle_deg: float = 0.0) -> np.ndarray:
    """Blur along a straight path of ``length_px`` pixels at ``angle_deg`` (a moving part or camera)."""
    import cv2

    k = np.zeros((length_px, length_px), np.float32)
    c = (length_px - 1) / 2.0
    t = math.radians(angle_deg)
    for s in np.linspace(-c, c, 4 * length_px):
        k[int(round(c - s * math.sin(t))), int(round(c + s * math.cos(t)))] = 1.0
    k /= k.sum()
    return cv2.filter2D(np.ascontiguousarray(image, np.float32), -1, k, borderType=cv2.BORDER_REFLECT_101)


def defocus(image: np.ndarray, radius_px: float) -> np.ndarray:
    """Out-of-focus blur: a uniform disc of ``radius_px`` (the geometric-optics blur spot)."""
    import cv2

    r = int(math.ceil(radius_px))
    yy, xx = np.mgrid[-r : r + 1, -r : r + 1]
    k = (xx**2 + yy**2 <= radius_px**2).astype(np.float32)
    k /= k.sum()
    return cv2.filter2D(np.ascontiguousarray(image, np.float32), -1, k, borderType=cv2.BORDER_REFLECT_101)


def jpeg_roundtrip(image: np.ndarray, quality: int) -> np.ndarray:
    """Save as an 8-bit JPEG at ``quality`` (OpenCV's libjpeg) and decode it again."""
    import cv2

    ok, buf = cv2.imencode(".jpg", to_uint8(image), [cv2.IMWRITE_JPEG_QUALITY, int(quality)])
    if not ok:
        raise RuntimeError("JPEG encoding failed")
    return cv2.imdecode(buf, cv2.IMREAD_GRAYSCALE).astype(np.float32) / np.float32(255.0)
