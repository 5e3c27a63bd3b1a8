"""The numeric core, gathered under one name (the modules it re-exports hold the code).

:mod:`.derivatives` (Gaussian derivatives, structure tensor), :mod:`.axial` (axial statistics),
:mod:`.noise` (the image's noise level), :mod:`.cells` (per-cell sums and histograms),
:mod:`.histograms` (``hog`` compatibility).
"""

from __future__ import annotations

from .axial import RayleighTest, axial_mean, rayleigh_test, wrap_deviation
from .cells import STRIP_ROWS, CellSums, cell_sums
from .derivatives import gaussian_derivative_kernels, gradients, structure_tensor_sums, tensor_lay
from .histograms import hog_cell_histograms
from .noise import noise_gradient_energy, noise_sigma

__all__ = [
    "gaussian_derivative_kernels",
    "gradients",
    "structure_tensor_sums",
    "tensor_lay",
    "wrap_deviation",
    "axial_mean",
    "RayleighTest",
    "rayleigh_test",
    "noise_sigma",
    "noise_gradient_energy",
    "STRIP_ROWS",
    "CellSums",
    "cell_sums",
    "hog_cell_histograms",
]
