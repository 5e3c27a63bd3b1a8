"""Qualifying the measurement: printable targets, bias and linearity, gauge R&R, control charts
and capability (the gauge study's PDF page is in ``report.gauge_page``). Imports ``measure`` and the shared contracts.
"""

from .._lazy import attach

__getattr__, __dir__ = attach(__name__, ("spc", "study_table", "gauge", "bias", "gauge_forms", "targets", "target_pdf"))
