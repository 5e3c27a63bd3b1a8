"""Overlay pictures and the PDF reports. Imports ``qualify`` (control charts), ``measure`` and the
shared contracts; never the archive.
"""

from .._lazy import attach

__getattr__, __dir__, __all__ = attach(
    __name__,
    {
        "overlay": (
            "RGB",
            "PALETTE",
            "RegionLook",
            "REGION_LOOKS",
            "PART_LOOKS",
            "STYLE_UNITS",
            "PatchMark",
            "patch_label",
            "RegionScene",
            "FrameScene",
            "EXPECTED_VARIES_DEG",
            "expected_varies",
            "measured_angles",
            "place_labels",
            "label_obstacles",
            "OverlayScene",
            "screen_direction",
            "build_scene",
            "dash_pieces",
            "arrow_polylines",
            "axis_polylines",
            "ScenePainter",
            "paint_scene",
            "glyph_widths",
            "render_overlay",
            "write_overlay_png",
            "grey_to_uint8",
            "checked_picture",
        ),
        "pdf": (
            "ANGLE_DECIMALS",
            "CAUTION",
            "PAGE_SIZE",
            "PICTURE_MAX_PX",
            "ExtraPage",
            "NotInspected",
            "format_angle",
            "format_fixed",
            "format_signed_angle",
            "printable_text",
            "render_report",
            "signoff_state",
            "write_report",
        ),
        "gauge_page": ("write_gauge_pdf",),
    },
)
