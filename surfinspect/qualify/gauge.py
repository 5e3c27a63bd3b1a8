"""Qualifying the measurement: crossed gauge R&R by the ANOVA method.

The analysis is pure (arrays in, frozen dataclasses out). The study table is read
by :mod:`surfinspect.qualify.study_table`, bias and linearity live in
:mod:`surfinspect.qualify.bias`, the JSON and text forms in
:mod:`surfinspect.qualify.gauge_forms`, and the study's PDF page in
:mod:`surfinspect.report.gauge_page`.

Acceptance thresholds (common automotive measurement-system practice): %GRR
under 10 % acceptable, 10-30 % acceptable only with a reason, over 30 % not
acceptable; at least 5 distinct categories; resolution at most a tenth of the
tolerance [1]_.

References
----------
.. [1] AIAG, *Measurement Systems Analysis Reference Manual*, 4th ed.,
   Automotive Industry Action Group, 2010. ISBN 978-1-60534-211-5 (from memory).
.. [2] R. K. Burdick, C. M. Borror and D. C. Montgomery, "A review of methods
   for measurement systems capability analysis", *Journal of Quality
   Technology* 35(4), 342-354, 2003. doi:10.1080/00224065.2003.11980232
   (DOI from memory).
.. [3] D. C. Montgomery and G. C. Runger, "Gauge capability and designed
   experiments. Part II: experimental design models and variance component
   estimation", *Quality Engineering* 6(2), 289-305, 1993.
   doi:10.1080/08982119308919024 (DOI from memory).
.. [4] T. A. Bancroft, "Analysis and inference for incompletely specified
   models involving the use of preliminary test(s) of significance",
   *Biometrics* 20(3), 427-442, 1964. doi:10.2307/2528486 (DOI from memory).
"""

from __future__ import annotations

import enum
import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np
from scipy import stats

from ..errors import InputError
from .spc import D4_MOVING_RANGE

__all__ = [
    "INTERACTION_ALPHA",
    "GaugeVerdict",
    "AnovaRow",
    "AnovaTable",
    "VarianceComponent",
    "GaugeStudy",
    "gauge_rr",
    "small_study_warnings",
    "BASES",
]

#: Significance level above which the part x appraiser interaction is pooled
#: into repeatability: the "sometimes pool" preliminary test at 0.25 of Bancroft
#: (1964) [4]_ (value from memory of that paper; 0.25 is also the common default
#: of gauge R&R software, common practice).
INTERACTION_ALPHA = 0.25

#: Ways of judging %GRR: the larger of the two shares (default), or one of them.
BASES = ("larger", "tolerance", "total-variation")

#: %GRR thresholds (common automotive practice [1]_).
GRR_ACCEPTABLE_BELOW = 10.0
GRR_CONDITIONAL_UP_TO = 30.0
MIN_DISTINCT_CATEGORIES = 5
#: Resolution must be at most this share of the tolerance width ("rule of ten" [1]_).
RESOLUTION_SHARE_OF_TOLERANCE = 0.1

#: Width of the measurement spread in sigmas for %GRR of tolerance (6 sigma, [1]_).
SPREAD_SIGMAS = 6.0
#: Factor of the number of distinct categories, sqrt(2) rounded as in [1]_.
NDC_FACTOR = 1.41

#: D4 (upper range-chart limit over the mean range) by subgroup size, from the
#: usual table of control-chart constants (Montgomery, Introduction to
#: Statistical Quality Control, appendix VI; from memory, checked by simulation
#: in the tests).
D4_BY_SUBGROUP = {2: D4_MOVING_RANGE, 3: 2.574, 4: 2.282, 5: 2.114, 6: 2.004, 7: 1.924, 8: 1.864, 9: 1.816, 10: 1.777}


class GaugeVerdict(str, enum.Enum):
    """Outcome of a gauge study."""

    ACCEPTABLE = "acceptable"
    CONDITIONAL = "conditional"  # acceptable only with a documented reason
    NOT_ACCEPTABLE = "not-acceptable"


@dataclass(frozen=True)
class AnovaRow:
    """One line of an ANOVA table; ``f`` and ``p`` are None for error and total lines."""

    source: str
    df: int
    ss: float
    ms: float | None
    f: float | None
    p: float | None


@dataclass(frozen=True)
class AnovaTable:
    """Two-way crossed ANOVA, with the interaction line or with it pooled into repeatability.

    ``model`` is ``'interaction'`` or ``'pooled'``. In the interaction model,
    parts and appraisers are tested against the interaction mean square and
    the interaction against repeatability (random effects [2]_); in the
    pooled model every effect is tested against the pooled repeatability.
    """

    model: str
    rows: tuple[AnovaRow, ...]

    def row(self, source: str) -> AnovaRow:
        for r in self.rows:
            if r.source == source:
                return r
        raise KeyError(source)


@dataclass(frozen=True)
class VarianceComponent:
    """A source of variation: its variance, sigma and shares."""

    name: str
    variance: float
    sigma: float
    percent_contribution: float  # of the total variance
    percent_total_variation: float  # sigma over total sigma
    percent_tolerance: float  # 6 sigma over the tolerance width


@dataclass(frozen=True)
class GaugeStudy:
    """Result of a crossed gauge R&R study (see :func:`gauge_rr`)."""

    parts: tuple[str, ...]
    appraisers: tuple[str, ...]
    n_trials: int
    tolerance: float
    values: np.ndarray
    anova_interaction: AnovaTable
    anova_pooled: AnovaTable
    model: str
    model_reason: str
    interaction_alpha: float
    components: tuple[VarianceComponent, ...]
    grr_percent_of_total_variation: float
    grr_percent_of_tolerance: float
    ndc: int | None
    resolution: float
    resolution_source: str  # 'given' or 'apparent'
    verdict: GaugeVerdict
    reasons: tuple[str, ...]
    source: str = ""
    basis: str = "larger"
    warnings: tuple[str, ...] = ()  # a study smaller than the usual size, ...

    def component(self, name: str) -> VarianceComponent:
        for c in self.components:
            if c.name == name:
                return c
        raise KeyError(name)

    @property
    def anova(self) -> AnovaTable:
        """The ANOVA table of the model used."""
        return self.anova_interaction if self.model == "interaction" else self.anova_pooled


#: Names of the variance components, in report order.
COMPONENTS = ("repeatability", "reproducibility", "appraiser", "part x appraiser", "grr", "part", "total")
COMPONENT_LABELS = {
    "repeatability": "Repeatability (EV)",
    "reproducibility": "Reproducibility (AV)",
    "appraiser": "  appraiser",
    "part x appraiser": "  part x appraiser",
    "grr": "Gauge R&R (GRR)",
    "part": "Part-to-part (PV)",
    "total": "Total (TV)",
}


def _ratio(num: float, den: float) -> float | None:
    if den > 0:
        return num / den
    return math.inf if num > 0 else None


def _p_value(f: float | None, df1: int, df2: int) -> float | None:
    if f is None:
        return None
    if math.isinf(f):
        return 0.0
    return float(stats.f.sf(f, df1, df2))


def _anova_tables(y: np.ndarray) -> tuple[AnovaTable, AnovaTable]:
    p, o, r = y.shape
    grand = y.mean()
    part_means = y.mean(axis=(1, 2))
    appraiser_means = y.mean(axis=(0, 2))
    cell_means = y.mean(axis=2)
    ss_part = o * r * float(((part_means - grand) ** 2).sum())
    ss_appraiser = p * r * float(((appraiser_means - grand) ** 2).sum())
    ss_interaction = r * float(((cell_means - part_means[:, None] - appraiser_means[None, :] + grand) ** 2).sum())
    ss_error = float(((y - cell_means[:, :, None]) ** 2).sum())
    ss_total = float(((y - grand) ** 2).sum())
    df_part, df_appraiser = p - 1, o - 1
    df_interaction, df_error = df_part * df_appraiser, p * o * (r - 1)
    ms_part, ms_appraiser = ss_part / df_part, ss_appraiser / df_appraiser
    ms_interaction, ms_error = ss_interaction / df_interaction, ss_error / df_error

    def effects(ms_reference: float, df_reference: int) -> tuple[AnovaRow, AnovaRow]:
        rows = []
        for source, df, ss, ms in (
            ("part", df_part, ss_part, ms_part),
            ("appraiser", df_appraiser, ss_appraiser, ms_appraiser),
        ):
            f = _ratio(ms, ms_reference)
            rows.append(AnovaRow(source, df, ss, ms, f, _p_value(f, df, df_reference)))
        return tuple(rows)

    total = AnovaRow("total", p * o * r - 1, ss_total, None, None, None)
    f_interaction = _ratio(ms_interaction, ms_error)
    full = AnovaTable(
        "interaction",
        (
            *effects(ms_interaction, df_interaction),  # random effects: tested against the interaction
            AnovaRow(
                "part x appraiser",
                df_interaction,
                ss_interaction,
                ms_interaction,
                f_interaction,
                _p_value(f_interaction, df_interaction, df_error),
            ),
            AnovaRow("repeatability", df_error, ss_error, ms_error, None, None),
            total,
        ),
    )
    df_pooled = df_interaction + df_error
    ss_pooled = ss_interaction + ss_error
    ms_pooled = ss_pooled / df_pooled
    pooled = AnovaTable(
        "pooled",
        (*effects(ms_pooled, df_pooled), AnovaRow("repeatability", df_pooled, ss_pooled, ms_pooled, None, None), total),
    )
    return full, pooled


def _apparent_resolution(y: np.ndarray) -> float:
    # The recorded step is at most the smallest gap between distinct values;
    # rounding to 12 significant digits keeps binary noise from faking a gap.
    distinct = np.unique(np.array([float(f"{v:.12g}") for v in y.ravel()]))
    return float(np.diff(distinct).min()) if distinct.size > 1 else 0.0


def gauge_rr(
    values: np.ndarray,
    *,
    tolerance: float,
    parts: Sequence[str] | None = None,
    appraisers: Sequence[str] | None = None,
    interaction_alpha: float = INTERACTION_ALPHA,
    resolution: float | None = None,
    basis: str = "larger",
    source: str = "",
) -> GaugeStudy:
    """Crossed gauge repeatability and reproducibility study by the ANOVA method.

    1. Two-way ANOVA with interaction of ``value ~ part * appraiser``: sums of
       squares, degrees of freedom, mean squares; parts and appraisers are
       tested against the interaction, the interaction against repeatability
       (random effects [2]_ [3]_).
    2. If the interaction's p-value is at least ``interaction_alpha`` it is
       pooled into repeatability and the pooled model is used; otherwise the
       model with interaction is kept. The result states which and why.
    3. Variance components from the expected mean squares, negatives set to 0:
       ``EV^2 = MSE``, interaction ``(MSI - MSE) / r``, appraiser
       ``(MSA - MSI) / (p r)``, part ``(MSP - MSI) / (a r)`` (pooled model:
       ``MSI`` replaced by the pooled ``MSE`` and the interaction is 0).
       ``AV^2`` = appraiser + interaction, ``GRR^2 = EV^2 + AV^2``,
       ``TV^2 = GRR^2 + PV^2``.
    4. ``%GRR`` of total variation ``100 GRR / TV``, of tolerance
       ``100 * 6 GRR / T``; ``ndc = floor(1.41 PV / GRR)``; verdict by the
       thresholds of the module docstring.

    Parameters
    ----------
    values : (P, A, R) array_like
        ``values[i, j, k]``: trial k of appraiser j on part i; P, A, R >= 2.
    tolerance : float
        Tolerance width ``USL - LSL`` (> 0) in the units of ``values``; for a
        recipe tolerance of ±3 degrees that is 6.
    parts, appraisers : sequence of str, optional
        Labels; default ``'1'..'P'`` and ``'A'..``.
    interaction_alpha : float, optional
        Pool the interaction when its p-value is at least this (default 0.25,
        common practice, no source).
    resolution : float, optional
        The gauge's resolution (smallest step it reports). Default: the
        apparent resolution, the smallest gap between distinct study values
        (an upper bound of the true step).
    basis : {'larger', 'tolerance', 'total-variation'}, optional
        Which %GRR the verdict is judged on; ``'larger'`` (default) takes the
        larger, since this gauge both accepts parts against a tolerance and
        feeds process charts.
    source : str, optional
        Where the values came from (a file name), kept in the result.

    Returns
    -------
    GaugeStudy

    Raises
    ------
    InputError
        Wrong shape, a non-finite value, a non-positive tolerance, a bad
        ``basis`` or ``interaction_alpha``, or no variation at all.

    References
    ----------
    .. [2] R. K. Burdick, C. M. Borror and D. C. Montgomery, *Journal of
       Quality Technology* 35(4), 342-354, 2003.
       doi:10.1080/00224065.2003.11980232 (DOI from memory).
    .. [3] D. C. Montgomery and G. C. Runger, *Quality Engineering* 6(2),
       289-305, 1993. doi:10.1080/08982119308919024 (DOI from memory).
    """
    _check_settings(tolerance, basis, interaction_alpha, resolution)
    y, part_labels, appraiser_labels, where = _checked_values(values, parts, appraisers, source)
    full, pooled = _anova_tables(y)
    if full.row("total").ss <= 0:
        raise InputError(f"{where}all study values are equal: there is no variation to analyse")
    model, model_reason = _choose_model(full, interaction_alpha)
    variances = _variances(full, pooled, model, y.shape)
    components = _components(variances, tolerance)
    sigma_total = math.sqrt(variances["total"])
    grr, pv = math.sqrt(variances["grr"]), math.sqrt(variances["part"])
    pct_tv = 100.0 * grr / sigma_total if sigma_total > 0 else 0.0
    pct_tol = 100.0 * SPREAD_SIGMAS * grr / tolerance
    ndc = math.floor(NDC_FACTOR * pv / grr) if grr > 0 else None

    if resolution is None:
        resolution_used, resolution_source = _apparent_resolution(y), "apparent"
    else:
        resolution_used, resolution_source = float(resolution), "given"

    verdict, reasons = _judge(pct_tv, pct_tol, ndc, resolution_used, resolution_source, tolerance, basis)
    return GaugeStudy(
        parts=part_labels,
        appraisers=appraiser_labels,
        n_trials=y.shape[2],
        tolerance=float(tolerance),
        values=y.copy(),
        anova_interaction=full,
        anova_pooled=pooled,
        model=model,
        model_reason=model_reason,
        interaction_alpha=float(interaction_alpha),
        components=components,
        grr_percent_of_total_variation=pct_tv,
        grr_percent_of_tolerance=pct_tol,
        ndc=ndc,
        resolution=resolution_used,
        resolution_source=resolution_source,
        verdict=verdict,
        reasons=tuple(reasons),
        source=source,
        basis=basis,
        warnings=tuple(small_study_warnings(*y.shape)),
    )


#: The usual size of a gauge R&R study: 10 parts, 3 appraisers, 2 or 3 trials each (AIAG MSA, 4th ed. [1]_).
USUAL_STUDY = (10, 3, 2)


def small_study_warnings(parts: int, appraisers: int, trials: int) -> list[str]:
    """Warnings for a study smaller than the usual 10 parts x 3 appraisers x 2-3 trials ([1]_)."""
    short = [
        f"{n} {what} (usually at least {usual})"
        for n, usual, what in zip((parts, appraisers, trials), USUAL_STUDY, ("parts", "appraisers", "trials"))
        if n < usual
    ]
    if not short:
        return []
    return [
        "small study: " + ", ".join(short) + "; the usual study is 10 parts x 3 appraisers x 2-3 trials "
        "(AIAG MSA, 4th ed.): %GRR and the number of distinct categories are estimated from few degrees "
        "of freedom and may be far off"
    ]


def _check_settings(tolerance: float, basis: str, interaction_alpha: float, resolution: float | None) -> None:
    """The study's settings; they are checked first and are not about the table, so the messages do not name it."""
    if not (math.isfinite(tolerance) and tolerance > 0):
        raise InputError(f"tolerance: must be a width > 0 (got {tolerance:g})")
    if basis not in BASES:
        raise InputError(f"basis: unknown (got {basis!r}, allowed {', '.join(BASES)})")
    if not 0 < interaction_alpha < 1:
        raise InputError(f"interaction_alpha: must be in (0, 1) (got {interaction_alpha:g})")
    if resolution is not None and not (math.isfinite(resolution) and resolution >= 0):
        raise InputError(f"resolution: must be a number >= 0 (got {resolution:g})")


def _checked_values(
    values: np.ndarray, parts: Sequence[str] | None, appraisers: Sequence[str] | None, source: str
) -> tuple[np.ndarray, tuple[str, ...], tuple[str, ...], str]:
    """The (P, A, R) values as floats, the part and appraiser labels, and the prefix of messages about them."""
    y = np.asarray(values, dtype=float)
    where = f"{source}: " if source else "gauge study: "
    if y.ndim != 3 or min(y.shape) < 2:
        raise InputError(f"{where}values must have shape (parts, appraisers, trials), each at least 2 (got {y.shape})")
    if not np.isfinite(y).all():
        raise InputError(f"{where}values must all be finite numbers")
    p, o, _ = y.shape
    part_labels = tuple(parts) if parts is not None else tuple(str(i + 1) for i in range(p))
    appraiser_labels = tuple(appraisers) if appraisers is not None else tuple(chr(ord("A") + j) for j in range(o))
    if len(part_labels) != p or len(appraiser_labels) != o:
        raise InputError(
            f"{where}labels: {len(part_labels)} parts and {len(appraiser_labels)} appraisers for values of shape {y.shape}"
        )
    return y, part_labels, appraiser_labels, where


def _choose_model(full: AnovaTable, interaction_alpha: float) -> tuple[str, str]:
    """Keep the part x appraiser interaction when significant, else pool it; say which and why."""
    interaction_p = full.row("part x appraiser").p
    if interaction_p is None or interaction_p >= interaction_alpha:
        shown = "undefined (no variation within or between cells)" if interaction_p is None else f"{interaction_p:.3g}"
        return "pooled", (
            f"part x appraiser interaction not significant (p = {shown} >= alpha = {interaction_alpha:g}): "
            "pooled into repeatability"
        )
    return "interaction", (
        f"part x appraiser interaction significant (p = {interaction_p:.3g} < alpha = {interaction_alpha:g}): "
        "kept in the model"
    )


def _variances(full: AnovaTable, pooled: AnovaTable, model: str, shape: tuple[int, int, int]) -> dict[str, float]:
    """Variance components from the expected mean squares of the model used, negatives set to 0."""
    p, o, r = shape
    ms_part, ms_appraiser = full.row("part").ms, full.row("appraiser").ms
    if model == "interaction":
        ms_error = full.row("repeatability").ms
        ms_interaction = full.row("part x appraiser").ms
        var_interaction = max(0.0, (ms_interaction - ms_error) / r)
        reference = ms_interaction  # parts and appraisers are measured against the interaction
    else:
        ms_error = pooled.row("repeatability").ms
        var_interaction = 0.0
        reference = ms_error
    var_repeat = ms_error
    var_appraiser = max(0.0, (ms_appraiser - reference) / (p * r))
    var_part = max(0.0, (ms_part - reference) / (o * r))
    var_reproduce = var_appraiser + var_interaction
    var_grr = var_repeat + var_reproduce
    return {
        "repeatability": var_repeat,
        "reproducibility": var_reproduce,
        "appraiser": var_appraiser,
        "part x appraiser": var_interaction,
        "grr": var_grr,
        "part": var_part,
        "total": var_grr + var_part,
    }


def _components(variances: dict[str, float], tolerance: float) -> tuple[VarianceComponent, ...]:
    """Each component's sigma and its shares of the total variance, total variation and tolerance."""
    var_total = variances["total"]
    sigma_total = math.sqrt(var_total)
    return tuple(
        VarianceComponent(
            name=name,
            variance=variances[name],
            sigma=math.sqrt(variances[name]),
            percent_contribution=100.0 * variances[name] / var_total if var_total > 0 else 0.0,
            percent_total_variation=100.0 * math.sqrt(variances[name]) / sigma_total if sigma_total > 0 else 0.0,
            percent_tolerance=100.0 * SPREAD_SIGMAS * math.sqrt(variances[name]) / tolerance,
        )
        for name in COMPONENTS
    )


def _judge(
    pct_tv: float,
    pct_tol: float,
    ndc: int | None,
    resolution: float,
    resolution_source: str,
    tolerance: float,
    basis: str,
) -> tuple[GaugeVerdict, list[str]]:
    judged = {"larger": max(pct_tv, pct_tol), "tolerance": pct_tol, "total-variation": pct_tv}[basis]
    label = {
        "larger": "%GRR (larger of total variation and tolerance)",
        "tolerance": "%GRR of tolerance",
        "total-variation": "%GRR of total variation",
    }[basis]
    reasons = []
    if judged < GRR_ACCEPTABLE_BELOW:
        verdict = GaugeVerdict.ACCEPTABLE
        reasons.append(f"{label} {judged:.1f}% < {GRR_ACCEPTABLE_BELOW:g}%")
    elif judged <= GRR_CONDITIONAL_UP_TO:
        verdict = GaugeVerdict.CONDITIONAL
        reasons.append(
            f"{label} {judged:.1f}% within {GRR_ACCEPTABLE_BELOW:g}-{GRR_CONDITIONAL_UP_TO:g}%: "
            "acceptable only with a documented reason"
        )
    else:
        verdict = GaugeVerdict.NOT_ACCEPTABLE
        reasons.append(f"{label} {judged:.1f}% > {GRR_CONDITIONAL_UP_TO:g}%")
    if ndc is None:
        reasons.append("number of distinct categories undefined: no measurement variation seen (check the resolution)")
    elif ndc < MIN_DISTINCT_CATEGORIES:
        verdict = GaugeVerdict.NOT_ACCEPTABLE
        reasons.append(f"number of distinct categories {ndc} < {MIN_DISTINCT_CATEGORIES}")
    else:
        reasons.append(f"number of distinct categories {ndc} >= {MIN_DISTINCT_CATEGORIES}")
    limit = RESOLUTION_SHARE_OF_TOLERANCE * tolerance
    if resolution > limit:
        verdict = GaugeVerdict.NOT_ACCEPTABLE
        reasons.append(f"{resolution_source} resolution {resolution:.4g} > tolerance/10 = {limit:.4g}")
    else:
        reasons.append(f"{resolution_source} resolution {resolution:.4g} <= tolerance/10 = {limit:.4g}")
    return verdict, reasons
