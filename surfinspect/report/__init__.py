"""Overlay pictures and the PDF reports. Imports ``qualify`` (control charts), ``measure`` and the
shared contracts; never the archive.
"""

from .._lazy import attach

__getattr__, __dir__ = attach(__name__, ("overlay", "pdf", "gauge_page"))
