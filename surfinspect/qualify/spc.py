"""Batch statistics: individuals and moving-range control charts, process capability.

Pure functions on sequences of numbers; they return frozen dataclasses and do
no I/O. Missing measurements (``None`` or NaN, e.g. a region without texture)
keep their place in the sequence so that indices still name the part, but
they take no part in the statistics.

References
----------
.. [1] D. C. Montgomery, *Introduction to Statistical Quality Control*, 7th ed.,
   Wiley, 2013, ch. 6.4 (control charts for individual measurements) and
   ch. 8 (process capability). ISBN 978-1-118-14681-1.
.. [2] ASTM E2587-16, *Standard Practice for Use of Control Charts in
   Statistical Process Control*, ASTM International. doi:10.1520/E2587-16
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from ..errors import InputError

__all__ = [
    "D2_MOVING_RANGE",
    "D4_MOVING_RANGE",
    "IndividualsChart",
    "Capability",
    "individuals_chart",
    "capability",
]

#: d2 for subgroups of two (moving range of consecutive values) [1]_.
D2_MOVING_RANGE = 1.128
#: D4 for subgroups of two: upper limit of the moving-range chart over its mean [1]_.
D4_MOVING_RANGE = 3.267
#: Width of the individuals limits in mean moving ranges, 3 / d2 rounded as tabulated [1]_.
INDIVIDUALS_LIMIT_FACTOR = 2.66


@dataclass(frozen=True)
class IndividualsChart:
    """Individuals (X) and moving-range (MR) chart of one sequence.

    Attributes
    ----------
    values : tuple of float
        The input values in their order; NaN where a value was missing.
    center : float
        Mean of the finite values (centre line of the X chart).
    mr : tuple of float
        Moving ranges ``|values[k+1] - values[k]|``, length ``len(values) - 1``;
        NaN where either neighbour is missing.
    mr_bar : float
        Mean of the finite moving ranges (centre line of the MR chart).
    sigma : float
        Within (short-term) standard deviation, ``mr_bar / 1.128``.
    ucl, lcl : float
        X-chart limits, ``center ± 2.66 mr_bar``.
    mr_ucl : float
        MR-chart upper limit, ``3.267 mr_bar`` (its lower limit is 0).
    out_of_limits : tuple of int
        Indices into ``values`` of points outside ``[lcl, ucl]``.
    mr_out_of_limits : tuple of int
        Indices into ``mr`` of moving ranges above ``mr_ucl``; ``mr[k]`` is
        the range between ``values[k]`` and ``values[k + 1]``.
    """

    values: tuple[float, ...]
    center: float
    mr: tuple[float, ...]
    mr_bar: float
    sigma: float
    ucl: float
    lcl: float
    mr_ucl: float
    out_of_limits: tuple[int, ...]
    mr_out_of_limits: tuple[int, ...]

    @property
    def n(self) -> int:
        """Number of finite values."""
        return int(np.isfinite(np.asarray(self.values, dtype=float)).sum())


@dataclass(frozen=True)
class Capability:
    """Process capability of a sequence against specification limits.

    Attributes
    ----------
    cp : float or None
        ``(usl - lsl) / (6 sigma)``; None when a limit is missing or sigma is 0.
    cpk : float or None
        ``min(usl - mean, mean - lsl) / (3 sigma)`` over the limits given;
        None when sigma is 0 (no spread observed: the index is undefined, not
        infinite; look at the gauge resolution instead).
    mean, sigma : float
        Mean of the finite values and the sigma used.
    sigma_source : {'within', 'given'}
        ``'within'``: moving-range sigma of the sequence; ``'given'``: passed in.
    n : int
        Number of finite values.
    lsl, usl : float or None
        Lower and upper specification limits (one may be None).
    cp_interval, cpk_interval : (float, float) or None
        Two-sided confidence intervals at :data:`CAPABILITY_CONFIDENCE`: for
        Cp from the chi-square distribution of the variance, for Cpk Bissell's
        normal approximation (see :func:`capability`).
    warnings : tuple of str
        Below :data:`CAPABILITY_MIN_PARTS` values, a warning that the indices
        rest on too few parts.
    """

    cp: float | None
    cpk: float | None
    mean: float
    sigma: float
    sigma_source: str
    n: int
    lsl: float | None
    usl: float | None
    cp_interval: tuple[float, float] | None = None
    cpk_interval: tuple[float, float] | None = None
    warnings: tuple[str, ...] = ()


#: Confidence level of the Cp and Cpk intervals.
CAPABILITY_CONFIDENCE = 0.95
#: Fewer values than this and Cp/Cpk carry a warning (common practice, no source: 25 subgroups are the
#: usual least for control limits and capability studies).
CAPABILITY_MIN_PARTS = 25


def capability_intervals(
    cp: float | None, cpk: float | None, n: int, confidence: float = CAPABILITY_CONFIDENCE
) -> tuple[tuple[float, float] | None, tuple[float, float] | None]:
    """Two-sided confidence intervals of Cp and Cpk estimated from ``n`` values.

    Cp: ``Cp sqrt(chi2(a/2, n-1) / (n-1)) <= Cp <= Cp sqrt(chi2(1-a/2, n-1) / (n-1))``,
    exact for normal data with sigma from ``n - 1`` degrees of freedom [1]_.
    Cpk: Bissell's approximation ``Cpk +- z(1-a/2) sqrt(1/(9n) + Cpk^2/(2(n-1)))`` [2]_.
    With the moving-range sigma the degrees of freedom are fewer than ``n - 1``, so
    the intervals are, if anything, too narrow.

    References
    ----------
    .. [1] D. C. Montgomery, *Introduction to Statistical Quality Control*,
       7th ed., Wiley, 2013, ch. 8.3.5. ISBN 978-1-118-14681-1.
    .. [2] A. F. Bissell, "How reliable is your capability index?", *Journal of
       the Royal Statistical Society, Series C (Applied Statistics)* 39(3),
       331-340, 1990. doi:10.2307/2347383 (DOI from memory).
    """
    if n < 2:
        return None, None
    from scipy.stats import chi2, norm  # here: SciPy costs start-up time

    a = 1.0 - confidence
    cp_ci = None
    if cp is not None:
        dof = n - 1
        cp_ci = (cp * math.sqrt(chi2.ppf(a / 2, dof) / dof), cp * math.sqrt(chi2.ppf(1 - a / 2, dof) / dof))
    cpk_ci = None
    if cpk is not None:
        half = float(norm.ppf(1 - a / 2)) * math.sqrt(1.0 / (9.0 * n) + cpk * cpk / (2.0 * (n - 1)))
        cpk_ci = (cpk - half, cpk + half)
    return cp_ci, cpk_ci


def _as_float_array(values: Sequence[float | None], what: str) -> np.ndarray:
    try:
        return np.array([np.nan if v is None else float(v) for v in values], dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{what}: values must be numbers or None ({exc})") from None


def individuals_chart(values: Sequence[float | None]) -> IndividualsChart:
    """Individuals and moving-range chart limits of a sequence.

    1. The centre line is the mean of the finite values.
    2. Moving ranges are the absolute differences of consecutive values; a
       range touching a missing value is itself missing.
    3. ``sigma = mean(MR) / d2`` with ``d2 = 1.128``; X limits are
       ``mean ± 2.66 mean(MR)``; the MR upper limit is ``3.267 mean(MR)`` [1]_ [2]_.

    Parameters
    ----------
    values : sequence of float or None
        Measurements in production order; None or NaN marks a missing one.

    Returns
    -------
    IndividualsChart

    Raises
    ------
    InputError
        Fewer than two finite values, or no two consecutive finite values (no
        moving range to estimate the spread from).

    References
    ----------
    .. [1] D. C. Montgomery, *Introduction to Statistical Quality Control*,
       7th ed., Wiley, 2013, ch. 6.4. ISBN 978-1-118-14681-1.
    .. [2] ASTM E2587-16, doi:10.1520/E2587-16
    """
    x = _as_float_array(values, "individuals chart")
    finite = np.isfinite(x)
    if finite.sum() < 2:
        raise InputError(f"individuals chart: needs at least 2 finite values (got {int(finite.sum())} of {x.size})")
    mr = np.abs(np.diff(x))  # NaN propagates where a neighbour is missing
    mr_finite = np.isfinite(mr)
    if not mr_finite.any():
        raise InputError("individuals chart: needs two consecutive finite values to form a moving range (got none)")
    center = float(x[finite].mean())
    mr_bar = float(mr[mr_finite].mean())
    half_width = INDIVIDUALS_LIMIT_FACTOR * mr_bar
    ucl, lcl = center + half_width, center - half_width
    mr_ucl = D4_MOVING_RANGE * mr_bar
    with np.errstate(invalid="ignore"):
        outside = finite & ((x > ucl) | (x < lcl))
        mr_outside = mr_finite & (mr > mr_ucl)
    return IndividualsChart(
        values=tuple(float(v) for v in x),
        center=center,
        mr=tuple(float(v) for v in mr),
        mr_bar=mr_bar,
        sigma=mr_bar / D2_MOVING_RANGE,
        ucl=ucl,
        lcl=lcl,
        mr_ucl=mr_ucl,
        out_of_limits=tuple(int(i) for i in np.flatnonzero(outside)),
        mr_out_of_limits=tuple(int(i) for i in np.flatnonzero(mr_outside)),
    )


def capability(
    values: Sequence[float | None],
    lsl: float | None,
    usl: float | None,
    *,
    sigma: float | None = None,
) -> Capability:
    """Capability indices Cp and Cpk of a sequence against specification limits.

    ``Cp = (USL - LSL) / (6 sigma)`` and
    ``Cpk = min(USL - mean, mean - LSL) / (3 sigma)`` [1]_. With one limit only,
    Cpk is the one-sided index of that limit and Cp is None.

    Parameters
    ----------
    values : sequence of float or None
        Measurements in production order; None or NaN marks a missing one.
    lsl, usl : float or None
        Specification limits; at least one must be given, and ``lsl < usl``.
    sigma : float, optional
        Standard deviation to use. Default: the within sigma of the moving
        ranges (``mean(MR) / 1.128``), as for the individuals chart.

    Returns
    -------
    Capability
        ``cp`` and ``cpk`` are None when sigma is 0: with no observed spread
        the ratio is undefined, and an infinite index would read as a perfect
        process when the cause is usually a too-coarse gauge.

    Raises
    ------
    InputError
        No limit, ``lsl >= usl``, a negative or non-finite ``sigma``, or too
        few values (see :func:`individuals_chart`).

    References
    ----------
    .. [1] D. C. Montgomery, *Introduction to Statistical Quality Control*,
       7th ed., Wiley, 2013, ch. 8.2. ISBN 978-1-118-14681-1.
    """
    if lsl is None and usl is None:
        raise InputError("capability: give at least one specification limit (lsl or usl)")
    if lsl is not None and usl is not None and not float(lsl) < float(usl):
        raise InputError(f"capability: lsl must be below usl (got lsl={lsl}, usl={usl})")
    x = _as_float_array(values, "capability")
    finite = x[np.isfinite(x)]
    if sigma is None:
        sigma_used = individuals_chart(x).sigma  # raises on too few values
        source = "within"
    else:
        sigma_used = float(sigma)
        source = "given"
        if not math.isfinite(sigma_used) or sigma_used < 0:
            raise InputError(f"capability: sigma must be a finite number >= 0 (got {sigma})")
        if finite.size < 1:
            raise InputError(f"capability: needs at least 1 finite value (got 0 of {x.size})")
    mean = float(finite.mean())
    cp = cpk = None
    if sigma_used > 0:
        if lsl is not None and usl is not None:
            cp = (float(usl) - float(lsl)) / (6.0 * sigma_used)
        distances = []
        if usl is not None:
            distances.append(float(usl) - mean)
        if lsl is not None:
            distances.append(mean - float(lsl))
        cpk = min(distances) / (3.0 * sigma_used)
    n = int(finite.size)
    cp_ci, cpk_ci = capability_intervals(cp, cpk, n)
    warnings = ()
    if n < CAPABILITY_MIN_PARTS:
        warnings = (
            f"Cp/Cpk from {n} parts (fewer than {CAPABILITY_MIN_PARTS}): read them with their "
            f"{100 * CAPABILITY_CONFIDENCE:g}% confidence intervals",
        )
    return Capability(
        cp_interval=cp_ci,
        cpk_interval=cpk_ci,
        warnings=warnings,
        cp=cp,
        cpk=cpk,
        mean=mean,
        sigma=sigma_used,
        sigma_source=source,
        n=n,
        lsl=None if lsl is None else float(lsl),
        usl=None if usl is None else float(usl),
    )
