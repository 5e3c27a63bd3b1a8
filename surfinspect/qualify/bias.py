"""Bias and linearity of the measured lay against known nominal angles (targets).

References
----------
.. [1] AIAG, *Measurement Systems Analysis Reference Manual*, 4th ed.,
   Automotive Industry Action Group, 2010. ISBN 978-1-60534-211-5 (from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np
from scipy import stats

from ..errors import InputError
from ..measure.orientation import wrap_deviation

__all__ = ["BiasAtNominal", "LinearityFit", "BiasStudy", "bias_study"]


@dataclass(frozen=True)
class BiasAtNominal:
    """Bias and repeatability of the measurements of one reference angle.

    ``bias_deg`` is the mean of the wrapped deviations ``measured - nominal``;
    ``repeatability_deg`` their sample standard deviation; ``ci_deg`` the
    two-sided confidence interval of the bias from Student's t with n-1
    degrees of freedom; ``p_value`` tests bias = 0. Spread figures are None
    with a single measurement.
    """

    nominal_deg: float
    n: int
    mean_measured_deg: float
    bias_deg: float
    repeatability_deg: float | None
    t: float | None
    p_value: float | None
    ci_deg: tuple[float, float] | None


@dataclass(frozen=True)
class LinearityFit:
    """Least-squares line ``bias = slope * nominal + intercept`` over every measurement."""

    slope: float
    intercept: float
    slope_ci: tuple[float, float]
    intercept_ci: tuple[float, float]
    slope_p_value: float
    r_squared: float
    n: int


@dataclass(frozen=True)
class BiasStudy:
    """Bias per nominal angle and the linearity line across nominals."""

    per_nominal: tuple[BiasAtNominal, ...]
    linearity: LinearityFit | None  # None with fewer than 2 nominals or 3 measurements
    confidence: float


def bias_study(
    nominals: Sequence[float],
    measured: Sequence[float],
    *,
    confidence: float = 0.95,
) -> BiasStudy:
    """Bias, repeatability and linearity of lay measurements of known-angle references.

    1. Each measurement's deviation ``measured - nominal`` is wrapped to
       (-90, 90] (lay is axial: 179.8 measured for 0 nominal is -0.2).
    2. Per nominal: bias = mean deviation, repeatability = sample standard
       deviation, t = bias / (s / sqrt(n)) and its confidence interval from
       Student's t with n - 1 degrees of freedom [1]_.
    3. Linearity: ordinary least squares of every deviation on its nominal;
       slope and intercept with confidence intervals from Student's t with
       N - 2 degrees of freedom [1]_.

    Parameters
    ----------
    nominals, measured : sequence of float
        Pairs of reference lay angle and measured lay angle, degrees.
    confidence : float, optional
        Confidence level of the intervals, in (0, 1). Default 0.95.

    Returns
    -------
    BiasStudy
        Nominals in ascending order.

    Raises
    ------
    InputError
        Unequal lengths, no pairs, non-finite values, or a bad confidence.

    References
    ----------
    .. [1] AIAG, *Measurement Systems Analysis Reference Manual*, 4th ed.,
       2010, ch. III, bias and linearity studies (from memory).
    """
    x = np.asarray(nominals, dtype=float).ravel()
    m = np.asarray(measured, dtype=float).ravel()
    if x.size != m.size:
        raise InputError(f"bias study: {x.size} nominal angles for {m.size} measurements (must be equal)")
    if x.size == 0:
        raise InputError("bias study: no measurements")
    if not (np.isfinite(x).all() and np.isfinite(m).all()):
        raise InputError("bias study: nominal and measured angles must be finite numbers")
    if not 0 < confidence < 1:
        raise InputError(f"bias study: confidence must be in (0, 1) (got {confidence})")
    deviation = np.asarray(wrap_deviation(m, x))
    per_nominal = []
    for nominal in np.unique(x):
        d = deviation[x == nominal]
        n = int(d.size)
        bias = float(d.mean())
        s = t = p = ci = None
        if n >= 2:
            s = float(d.std(ddof=1))
            se = s / math.sqrt(n)
            half = float(stats.t.ppf(0.5 + confidence / 2, n - 1)) * se
            ci = (bias - half, bias + half)
            if se > 0:
                t = bias / se
                p = float(2 * stats.t.sf(abs(t), n - 1))
        per_nominal.append(
            BiasAtNominal(
                nominal_deg=float(nominal),
                n=n,
                mean_measured_deg=float((nominal + bias) % 180.0),
                bias_deg=bias,
                repeatability_deg=s,
                t=t,
                p_value=p,
                ci_deg=ci,
            )
        )
    linearity = None
    if np.unique(x).size >= 2 and x.size >= 3:
        fit = stats.linregress(x, deviation)
        t_crit = float(stats.t.ppf(0.5 + confidence / 2, x.size - 2))
        linearity = LinearityFit(
            slope=float(fit.slope),
            intercept=float(fit.intercept),
            slope_ci=(float(fit.slope - t_crit * fit.stderr), float(fit.slope + t_crit * fit.stderr)),
            intercept_ci=(
                float(fit.intercept - t_crit * fit.intercept_stderr),
                float(fit.intercept + t_crit * fit.intercept_stderr),
            ),
            slope_p_value=float(fit.pvalue),
            r_squared=float(fit.rvalue**2),
            n=int(x.size),
        )
    return BiasStudy(per_nominal=tuple(per_nominal), linearity=linearity, confidence=confidence)
