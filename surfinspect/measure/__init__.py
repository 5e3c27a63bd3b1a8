"""Images in, numbers out: image reading, Gaussian derivatives and the structure tensor, cell sums
and histograms, the part frame, judging and the engine. Imports only numpy, scipy, OpenCV,
scikit-image and the shared contracts (``recipe``, ``results``, ``errors``).
"""

from .._lazy import attach

__getattr__, __dir__ = attach(
    __name__,
    (
        "imaging",
        "cells",
        "orientation",
        "datum",
        "judge",
        "robust",
        "spectrum",
        "uncertainty",
        "conditions",
        "engine",
        "synth",
    ),
)
