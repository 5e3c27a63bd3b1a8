"""surfinspect: measure and judge the surface lay of brushed, ground and milled panels.

Public API::

    recipe = load_recipe("recipes/lw-220.yaml")
    loaded = read_image("panel.png")
    result = inspect_image(loaded.pixels, recipe, image_info=loaded.info)
    text = result_to_json(result)

The names are loaded on first use, so that a command that needs no image (``--version``,
``check``) does not pay for importing OpenCV and SciPy.
"""

from ._lazy import attach
from ._version import __version__

__getattr__, __dir__, _names = attach(
    __name__,
    {
        "measure.engine": ("inspect_image",),
        "measure.imaging": ("read_image",),
        "errors": ("InputError", "RecipeError"),
        "recipe": ("LayPattern", "Recipe", "Region", "load_recipe", "parse_recipe"),
        "results": ("PartResult", "PartVerdict", "RegionResult", "RegionVerdict"),
    },
    aliases={"result_to_json": ("results", "dumps"), "result_from_json": ("results", "loads")},
)
__all__ = ["__version__", *_names]
