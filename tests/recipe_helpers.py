"""Small recipes for tests, importable from any test folder (a module of its own: a room's own
conftest.py would shadow a function kept in the top-level one)."""

from __future__ import annotations

from surfinspect import parse_recipe

#: The LW-220 recipe text for 96 x 96 px panels (one region, lay 90 within 3 deg), for tests that run the CLI.
SMALL_PANEL_RECIPE = """\
recipe: lw-220-wall-panel
revision: 3
regions:
  - name: face
    rect: [8, 8, 80, 80]
    lay_deg: 90
    tolerance_deg: 3.0
"""


def directional_recipe(rect, lay_deg, *, tolerance_deg=3.0, cell_px=32, extra=""):
    x, y, w, h = rect
    return parse_recipe(
        f"""
recipe: test-panel
revision: 1
regions:
  - name: face
    rect: [{x}, {y}, {w}, {h}]
    lay_deg: {lay_deg}
    tolerance_deg: {tolerance_deg}
    cell_px: {cell_px}
{extra}
""",
        "test.yaml",
    )
