"""Images in, numbers out: image reading, Gaussian derivatives and the structure tensor, cell sums
and histograms, the part frame, judging and the engine. Imports only numpy, scipy, OpenCV,
scikit-image and the shared contracts (``recipe``, ``results``, ``errors``).
"""

from .._lazy import attach

__getattr__, __dir__, __all__ = attach(
    __name__,
    {
        "imaging": ("LoadedImage", "read_image", "decode_image", "as_grey_float", "IMAGE_SUFFIXES"),
        "orientation": (
            "gaussian_derivative_kernels",
            "gradients",
            "structure_tensor_sums",
            "tensor_lay",
            "wrap_deviation",
            "axial_mean",
            "rayleigh_test",
            "noise_sigma",
            "noise_gradient_energy",
            "CellSums",
            "cell_sums",
            "hog_cell_histograms",
        ),
        "datum": ("DatumError", "FitQuality", "PartFrame", "find_part_frame"),
        "judge": ("TEXTURE_RATIO_MIN", "CELL_MIN_COVER", "RegionMeasurement", "judge_region"),
        "robust": ("RobustLay", "robust_lay"),
        "conditions": (
            "saturated_pixels",
            "IlluminationBackground",
            "illumination_background",
            "BlockGrid",
            "block_grid",
        ),
        "engine": ("Frame", "inspect_image", "region_masks", "frame_for"),
        "synth": (
            "sine_grating",
            "brushed_texture",
            "isotropic_texture",
            "ring_texture",
            "shade_and_noise",
            "brushed_panel",
            "polished_blank",
            "to_uint8",
            "to_uint16",
            "add_scratch",
            "add_glare",
            "add_streak",
            "illumination_ramp",
            "vignette",
            "motion_blur",
            "defocus",
            "jpeg_roundtrip",
        ),
    },
)
