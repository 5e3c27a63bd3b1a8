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
from ._version import __version__ as __version__  # published: see own= below

# A chosen few names of several modules, so each is named here (``recipe`` is published whole).
__getattr__, __dir__ = attach(
    __name__,
    ("recipe",),
    aliases={
        "inspect_image": ("measure.engine", "inspect_image"),
        "read_image": ("measure.imaging", "read_image"),
        "InputError": ("errors", "InputError"),
        "RecipeError": ("errors", "RecipeError"),
        "PartResult": ("results", "PartResult"),
        "PartVerdict": ("results", "PartVerdict"),
        "RegionResult": ("results", "RegionResult"),
        "RegionVerdict": ("results", "RegionVerdict"),
        "result_to_json": ("results", "dumps"),
        "result_from_json": ("results", "loads"),
    },
    own=("__version__",),
)
