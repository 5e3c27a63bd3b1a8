"""Qualifying the measurement: printable targets, bias and linearity, gauge R&R, control charts
and capability (the gauge study's PDF page is in ``report.gauge_page``). Imports ``measure`` and the shared contracts.
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
        "study_table": ("StudyTable", "read_study_csv"),
        "gauge": (
            "INTERACTION_ALPHA",
            "GaugeVerdict",
            "AnovaRow",
            "AnovaTable",
            "VarianceComponent",
            "GaugeStudy",
            "gauge_rr",
        ),
        "bias": ("BiasAtNominal", "LinearityFit", "BiasStudy", "bias_study"),
        "gauge_forms": ("gauge_to_dict", "bias_to_dict"),
        "targets": (
            "GRATING_KINDS",
            "PlacedGrating",
            "TargetSheet",
            "render_grating",
            "layout_targets",
            "render_sheet",
            "write_target_png",
            "target_recipe_yaml",
            "write_target_recipe",
            "check_dpi",
            "check_recipe_tolerance",
        ),
        "target_pdf": ("write_target_pdf",),
    },
)
