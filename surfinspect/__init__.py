"""surfinspect: measure and judge the surface lay of brushed, ground and milled panels.

Public API::

    recipe = load_recipe("recipes/lw-220.yaml")
    loaded = read_image("panel.png")
    result = inspect_image(loaded.pixels, recipe, image_info=loaded.info)
    text = result_to_json(result)
"""

from ._version import __version__
from .errors import InputError, RecipeError
from .measure.engine import inspect_image
from .measure.imaging import read_image
from .recipe import LayPattern, Recipe, Region, load_recipe, parse_recipe
from .results import PartResult, PartVerdict, RegionResult, RegionVerdict
from .results import dumps as result_to_json
from .results import loads as result_from_json

__all__ = [
    "__version__",
    "InputError",
    "LayPattern",
    "PartResult",
    "PartVerdict",
    "Recipe",
    "RecipeError",
    "Region",
    "RegionResult",
    "RegionVerdict",
    "inspect_image",
    "load_recipe",
    "parse_recipe",
    "read_image",
    "result_from_json",
    "result_to_json",
]
