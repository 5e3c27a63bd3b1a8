"""Archival PDF (PDF/A-2b) for every document surfinspect writes: the shipped fonts and ICC profile,
the canvas to draw on and the finishing step. A utility on the shared floor, beside ``fsutil``: the
target sheets (``qualify``) and the reports (``report``) both use it, and it imports no room.
"""

from .._lazy import attach

__getattr__, __dir__, __all__ = attach(
    __name__,
    {
        "fonts": ("SANS", "SANS_BOLD", "SANS_OBLIQUE", "MONO", "REPLACEMENT", "printable", "register_fonts"),
        "document": ("DocumentInfo", "archival_canvas", "finish_archival", "srgb_profile", "SRGB_CONDITION"),
    },
)
