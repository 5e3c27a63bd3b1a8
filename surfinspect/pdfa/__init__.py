"""Archival PDF (PDF/A-2b) for every document surfinspect writes: the shipped fonts and ICC profile,
the canvas to draw on and the finishing step. A utility on the shared floor, beside ``fsutil``: the
target sheets (``qualify``) and the reports (``report``) both use it, and it imports no room.
"""

from .._lazy import attach

__getattr__, __dir__ = attach(__name__, ("fonts", "document"))
