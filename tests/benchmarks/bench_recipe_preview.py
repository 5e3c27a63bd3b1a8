"""Benchmark: the recipe page's live preview of one 600 x 400 px region on a 12-megapixel reference photo.

Run from the checkout root::

    python tests/benchmarks/bench_recipe_preview.py [--repeat 9]

A brushed 4000 x 3000 px panel (``measure.synth``, fixed seed) is written as a 16-bit PNG and opened
as the recipe page's reference (``ReviewConfig(recipe_image=...)``), as ``surfinspect review
--recipe-image`` does. Timed, medians over ``--repeat`` requests after one warm-up:

- ``POST /recipe/preview`` through Starlette's test client (the whole application: CSRF, JSON,
  the recipe written and parsed, the region measured, the glyphs built, the answer as JSON), the
  region moved by one pixel between requests as a drag does;
- reference 1, the engine alone on that region: ``measure.engine.inspect_region`` (what the preview
  runs) on the pixels in memory;
- reference 2, what a preview would cost without keeping the reference: ``inspect_image`` of the whole
  photo with a recipe of that one region (noise level of the whole image, every time).

Target (issue #16): at most 150 ms from request to numbers.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
ROWS, COLS = 3000, 4000
REGION = (1700, 1300, 600, 400)  # x, y, w, h in px


def _median_s(fn, repeat: int) -> float:
    fn()  # warm-up: imports, thread pools, the first frame and noise level
    times = []
    for i in range(repeat):
        start = time.perf_counter()
        fn(i)
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def run(repeat: int) -> dict[str, float]:
    import re

    import cv2
    import numpy as np
    from starlette.testclient import TestClient

    from surfinspect.measure import synth
    from surfinspect.measure.engine import frame_for, inspect_image, inspect_region
    from surfinspect.measure.imaging import read_image
    from surfinspect.measure.noise import noise_sigma
    from surfinspect.recipe import parse_recipe
    from surfinspect.review.app import ReviewConfig, create_app
    from surfinspect.review.recipe_routes import CSRF_HEADER

    tile = synth.brushed_panel((1000, 1000), 87.0, seed=3, shading=0.0)
    image = np.tile(tile, (ROWS // 1000, COLS // 1000))
    with tempfile.TemporaryDirectory() as tmp:
        photo = Path(tmp) / "reference-12mp.png"
        cv2.imwrite(str(photo), synth.to_uint16(image))
        start = time.perf_counter()
        app = create_app(ReviewConfig(None, recipe_image=photo, recipe_dir=Path(tmp)))
        open_s = time.perf_counter() - start
        client = TestClient(app)
        html = client.get("/recipe").text
        token = re.search(r'name="csrf-token" content="([0-9a-f]+)"', html).group(1)
        sha = re.search(r"/recipe/reference/([0-9a-f]{64})\.img", html).group(1)
        x, y, w, h = REGION

        def mapping(dx: int) -> dict:
            region = {"name": "face", "rect": [x + dx % 7, y, w, h], "lay_deg": 87.0}
            return {"recipe": "bench", "revision": 1, "datum": "image", "regions": [region]}

        def preview(i: int = 0) -> None:
            body = {"reference": sha, "recipe": mapping(i), "index": 0, "file_name": "bench.yaml"}
            r = client.post("/recipe/preview", json=body, headers={CSRF_HEADER: token})
            assert r.status_code == 200, r.text

        pixels = read_image(photo).pixels
        sigma = noise_sigma(pixels)
        text = "recipe: bench\nrevision: 1\nregions:\n  - name: face\n    rect: [{}, {}, {}, {}]\n    lay_deg: 87.0\n"

        def engine_alone(i: int = 0) -> None:
            recipe = parse_recipe(text.format(x + i % 7, y, w, h))
            frame, _ = frame_for(recipe, pixels)
            inspect_region(pixels, recipe, recipe.regions[0], frame, sigma)

        def whole_image(i: int = 0) -> None:
            inspect_image(pixels, parse_recipe(text.format(x + i % 7, y, w, h)))

        preview_s = _median_s(preview, repeat)
        engine_s = _median_s(engine_alone, repeat)
        whole_s = _median_s(whole_image, max(3, repeat // 3))
    return {"open_s": open_s, "preview_s": preview_s, "engine_s": engine_s, "whole_s": whole_s}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=9)
    args = parser.parse_args(argv)
    sys.path.insert(0, str(ROOT))
    r = run(args.repeat)
    print(f"reference photo {COLS} x {ROWS} px opened (read, decoded, kept) in {r['open_s']:.2f} s")
    print(
        f"preview of one {REGION[2]} x {REGION[3]} px region through the application: median {1000 * r['preview_s']:.0f} ms "
        f"(target <= 150 ms)"
    )
    print(
        f"reference 1, inspect_region alone: {1000 * r['engine_s']:.0f} ms "
        f"(the application adds {1000 * (r['preview_s'] - r['engine_s']):.0f} ms, ratio {r['preview_s'] / r['engine_s']:.2f})"
    )
    print(
        f"reference 2, inspect_image of the whole photo with that region: {1000 * r['whole_s']:.0f} ms "
        f"(ratio preview / whole {r['preview_s'] / r['whole_s']:.2f})"
    )
    ok = r["preview_s"] <= 0.150
    print("target met" if ok else "TARGET MISSED")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
