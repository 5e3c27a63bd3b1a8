"""The gauge and bias studies as JSON-ready dictionaries and as rows of text for the terminal and the PDF."""

from __future__ import annotations

import math
from typing import Any

from .._version import __version__
from .bias import BiasStudy
from .gauge import COMPONENT_LABELS, AnovaTable, GaugeStudy

__all__ = ["gauge_to_dict", "bias_to_dict"]


def _json_number(v: float | None, digits: int = 6) -> float | None:
    if v is None or not math.isfinite(v):
        return None
    return round(float(v), digits)


def _anova_to_list(table: AnovaTable) -> list[dict]:
    return [
        {
            "source": r.source,
            "df": r.df,
            "ss": _json_number(r.ss, 9),
            "ms": _json_number(r.ms, 9),
            "f": _json_number(r.f, 6),
            "p": _json_number(r.p, 6),
        }
        for r in table.rows
    ]


def gauge_to_dict(study: GaugeStudy) -> dict[str, Any]:
    """The JSON-ready form of a gauge study (schema ``surfinspect.gauge-study/1``).

    ``values[i][j][k]`` is trial k of appraiser j on part i, in the order of
    ``parts`` and ``appraisers``. Non-finite F values (no variation in the
    denominator) are written as null.
    """
    return {
        "schema": "surfinspect.gauge-study/1",
        "engine_version": __version__,
        "source": study.source,
        "parts": list(study.parts),
        "appraisers": list(study.appraisers),
        "trials": study.n_trials,
        "tolerance": study.tolerance,
        "model": study.model,
        "model_reason": study.model_reason,
        "interaction_alpha": study.interaction_alpha,
        "anova": _anova_to_list(study.anova),  # the table the study used (``model``)
        "anova_with_interaction": _anova_to_list(study.anova_interaction),
        "anova_pooled": _anova_to_list(study.anova_pooled),
        "basis": study.basis,
        "components": {
            c.name.replace(" ", "_"): {
                "name": c.name,
                "variance": _json_number(c.variance, 9),
                "sigma": _json_number(c.sigma, 9),
                "percent_contribution": _json_number(c.percent_contribution, 4),
                "percent_total_variation": _json_number(c.percent_total_variation, 4),
                "percent_tolerance": _json_number(c.percent_tolerance, 4),
            }
            for c in study.components
        },
        "grr_percent_of_total_variation": _json_number(study.grr_percent_of_total_variation, 4),
        "grr_percent_of_tolerance": _json_number(study.grr_percent_of_tolerance, 4),
        "ndc": study.ndc,
        "resolution": _json_number(study.resolution, 9),
        "resolution_source": study.resolution_source,
        "verdict": study.verdict.value,
        "reasons": list(study.reasons),
        "warnings": list(study.warnings),
        "values": [[[_json_number(v, 9) for v in trials] for trials in row] for row in study.values.tolist()],
    }


def bias_to_dict(study: BiasStudy) -> dict[str, Any]:
    """The JSON-ready form of a bias study (schema ``surfinspect.bias-study/1``)."""
    lin = study.linearity
    return {
        "schema": "surfinspect.bias-study/1",
        "engine_version": __version__,
        "confidence": study.confidence,
        "per_nominal": [
            {
                "nominal_deg": b.nominal_deg,
                "n": b.n,
                "mean_measured_deg": _json_number(b.mean_measured_deg),
                "bias_deg": _json_number(b.bias_deg),
                "repeatability_deg": _json_number(b.repeatability_deg),
                "t": _json_number(b.t),
                "p_value": _json_number(b.p_value),
                "ci_deg": None if b.ci_deg is None else [_json_number(v) for v in b.ci_deg],
            }
            for b in study.per_nominal
        ],
        "linearity": None
        if lin is None
        else {
            "slope": _json_number(lin.slope, 9),
            "intercept_deg": _json_number(lin.intercept),
            "slope_ci": [_json_number(v, 9) for v in lin.slope_ci],
            "intercept_ci_deg": [_json_number(v) for v in lin.intercept_ci],
            "slope_p_value": _json_number(lin.slope_p_value),
            "r_squared": _json_number(lin.r_squared),
            "n": lin.n,
        },
    }


# ------------------------------------------------------------------ tables as text

ANOVA_HEADER = ("source", "df", "SS", "MS", "F", "p")
COMPONENT_HEADER = ("component", "variance", "sigma", "% contribution", "% total variation", "% tolerance")


def _fmt(v: float | None, digits: int = 4) -> str:
    if v is None:
        return "-"
    if math.isinf(v):
        return "inf"
    if v != 0 and (abs(v) < 10 ** -(digits - 1) or abs(v) >= 1e6):
        return f"{v:.{digits - 1}e}"
    return f"{v:.{digits}f}"


def _fmt_p(p: float | None) -> str:
    if p is None:
        return "-"
    return "< 0.0001" if p < 1e-4 else f"{p:.4f}"


def anova_text_rows(table: AnovaTable) -> list[list[str]]:
    """The rows of an ANOVA table as text, in the columns of :data:`ANOVA_HEADER`."""
    return [[r.source, str(r.df), _fmt(r.ss), _fmt(r.ms), _fmt(r.f, 3), _fmt_p(r.p)] for r in table.rows]


def component_text_rows(study: GaugeStudy) -> list[list[str]]:
    """The variance components as text, in the columns of :data:`COMPONENT_HEADER`."""
    return [
        [
            COMPONENT_LABELS[comp.name],
            _fmt(comp.variance, 5),
            _fmt(comp.sigma, 4),
            f"{comp.percent_contribution:.2f}",
            f"{comp.percent_total_variation:.2f}",
            f"{comp.percent_tolerance:.2f}",
        ]
        for comp in study.components
    ]
