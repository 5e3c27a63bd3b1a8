"""Qualifying the measurement: printable targets, bias and linearity, gauge R&R, control charts
and capability. Imports ``measure`` and the shared contracts.
"""

from .._lazy import attach

__getattr__, __dir__, __all__ = attach(
    __name__,
    {
        "spc": (
            "D2_MOVING_RANGE",
            "D4_MOVING_RANGE",
            "IndividualsChart",
            "Capability",
            "individuals_chart",
            "capability",
        ),
        "gauge": (
            "INTERACTION_ALPHA",
            "GaugeVerdict",
            "StudyTable",
            "AnovaRow",
            "AnovaTable",
            "VarianceComponent",
            "GaugeStudy",
            "BiasAtNominal",
            "LinearityFit",
            "BiasStudy",
            "read_study_csv",
            "gauge_rr",
            "bias_study",
            "gauge_to_dict",
            "bias_to_dict",
            "write_gauge_pdf",
        ),
        "targets": (
            "GRATING_KINDS",
            "PlacedGrating",
            "TargetSheet",
            "render_grating",
            "layout_targets",
            "render_sheet",
            "write_target_pdf",
            "write_target_png",
            "target_recipe_yaml",
            "write_target_recipe",
            "check_dpi",
            "check_recipe_tolerance",
        ),
    },
)
