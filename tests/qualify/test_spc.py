"""Individuals / moving-range charts and capability, checked on tables worked by hand.

Formulas (Montgomery, Introduction to Statistical Quality Control, 7th ed., ch. 6.4
and 8.2; ASTM E2587): sigma = MR-bar / 1.128, X limits mean ± 2.66 MR-bar,
MR upper limit 3.267 MR-bar, Cp = (USL - LSL) / 6 sigma,
Cpk = min(USL - mean, mean - LSL) / 3 sigma.
"""

import math

import numpy as np
import pytest

from surfinspect.errors import InputError
from surfinspect.qualify.spc import (
    D2_MOVING_RANGE,
    D4_MOVING_RANGE,
    INDIVIDUALS_LIMIT_FACTOR,
    capability,
    individuals_chart,
)

# Worked by hand:
#   values          10   12   11   15   12        sum 60, mean 12
#   moving ranges        2    1    4    3         sum 10, MR-bar 10/4 = 2.5
#   sigma  = 2.5 / 1.128          = 2.216312
#   UCL    = 12 + 2.66 * 2.5      = 12 + 6.65 = 18.65
#   LCL    = 12 - 6.65            = 5.35
#   MR UCL = 3.267 * 2.5          = 8.1675
TABLE = [10, 12, 11, 15, 12]


def test_chart_constants_follow_the_normal_range_distribution():
    # Analytic: the range of two standard normals is |Z| * sqrt(2), so
    # d2 = E = 2/sqrt(pi) and d3 = sd = sqrt(2 - 4/pi); D4 = 1 + 3 d3/d2.
    d2 = 2 / math.sqrt(math.pi)
    d3 = math.sqrt(2 - 4 / math.pi)
    assert D2_MOVING_RANGE == pytest.approx(d2, abs=5e-4)
    assert D4_MOVING_RANGE == pytest.approx(1 + 3 * d3 / d2, abs=5e-4)
    assert INDIVIDUALS_LIMIT_FACTOR == pytest.approx(3 / d2, abs=5e-3)


def test_individuals_chart_on_hand_worked_table():
    chart = individuals_chart(TABLE)
    assert chart.center == pytest.approx(12.0, rel=1e-12)
    assert chart.mr == pytest.approx((2.0, 1.0, 4.0, 3.0), rel=1e-12)
    assert chart.mr_bar == pytest.approx(2.5, rel=1e-12)
    assert chart.sigma == pytest.approx(2.216312, abs=1e-6)
    assert chart.ucl == pytest.approx(18.65, rel=1e-12)
    assert chart.lcl == pytest.approx(5.35, rel=1e-12)
    assert chart.mr_ucl == pytest.approx(8.1675, rel=1e-12)
    assert chart.out_of_limits == ()
    assert chart.mr_out_of_limits == ()
    assert chart.n == 5


def test_individuals_chart_flags_points_and_ranges_outside_limits():
    # Worked by hand:
    #   values 5 5 5 5 5 5 5 5 6 5       sum 51, mean 5.1
    #   MR     0 0 0 0 0 0 0 1 1         sum 2, MR-bar 2/9 = 0.22222
    #   UCL = 5.1 + 2.66 * 0.22222 = 5.69111 -> value 6 (index 8) is above
    #   LCL = 4.50889 -> no value below
    #   MR UCL = 3.267 * 0.22222 = 0.72600 -> MR 1 at indices 7 and 8 are above
    chart = individuals_chart([5, 5, 5, 5, 5, 5, 5, 5, 6, 5])
    assert chart.center == pytest.approx(5.1)
    assert chart.mr_bar == pytest.approx(2 / 9)
    assert chart.ucl == pytest.approx(5.691111, abs=1e-6)
    assert chart.mr_ucl == pytest.approx(0.726, abs=1e-6)
    assert chart.out_of_limits == (8,)
    assert chart.mr_out_of_limits == (7, 8)


def test_missing_values_keep_their_place_and_break_the_moving_range():
    chart = individuals_chart([10, None, 12, float("nan"), 11, 13])
    # finite values 10, 12, 11, 13: mean 11.5; every moving range touches a
    # missing value except |13 - 11| = 2, so MR-bar = 2
    assert chart.center == pytest.approx(11.5)
    assert np.isnan(chart.mr[0]) and np.isnan(chart.mr[1]) and np.isnan(chart.mr[2]) and np.isnan(chart.mr[3])
    assert chart.mr[4] == pytest.approx(2.0)
    assert chart.mr_bar == pytest.approx(2.0)
    assert len(chart.values) == 6 and chart.n == 4


@pytest.mark.parametrize("values", [[], [3.0], [3.0, None, float("nan")]])
def test_too_few_values_is_an_input_error(values):
    with pytest.raises(InputError, match="at least 2 finite values"):
        individuals_chart(values)


def test_no_consecutive_pair_is_an_input_error():
    with pytest.raises(InputError, match="two consecutive finite values"):
        individuals_chart([1.0, None, 2.0])


def test_non_numeric_value_is_an_input_error():
    with pytest.raises(InputError, match="must be numbers"):
        individuals_chart([1.0, "a lot"])


def test_capability_on_hand_worked_table():
    # sigma = 2.5 / 1.128 = 2.216312, 3 sigma = 6.648936, 6 sigma = 13.297872
    # LSL 6, USL 24, mean 12:
    #   Cp  = 18 / 13.297872          = 1.353600
    #   Cpk = min(24-12, 12-6) / 6.648936 = 6 / 6.648936 = 0.902400
    cap = capability(TABLE, 6.0, 24.0)
    assert cap.sigma_source == "within"
    assert cap.mean == pytest.approx(12.0)
    assert cap.sigma == pytest.approx(2.216312, abs=1e-6)
    assert cap.cp == pytest.approx(1.353600, abs=1e-6)
    assert cap.cpk == pytest.approx(0.902400, abs=1e-6)
    assert cap.n == 5


def test_capability_with_given_sigma_and_one_sided_limit():
    # sigma 2: Cp = 18 / 12 = 1.5; Cpk = min(12, 6) / 6 = 1.0
    cap = capability(TABLE, 6.0, 24.0, sigma=2.0)
    assert (cap.cp, cap.cpk, cap.sigma_source) == (pytest.approx(1.5), pytest.approx(1.0), "given")
    # upper limit only: Cpk = (20 - 12) / 6 = 1.333333, Cp undefined
    upper = capability(TABLE, None, 20.0, sigma=2.0)
    assert upper.cp is None
    assert upper.cpk == pytest.approx(4 / 3)
    # mean outside the limits gives a negative Cpk: (12 - 13) / 6
    assert capability(TABLE, 13.0, 30.0, sigma=2.0).cpk == pytest.approx(-1 / 6)


def test_capability_with_zero_sigma_is_undefined_not_infinite():
    cap = capability([2.0, 2.0, 2.0], 0.0, 4.0)
    assert cap.sigma == 0.0
    assert cap.cp is None and cap.cpk is None


@pytest.mark.parametrize(
    ("lsl", "usl", "sigma", "message"),
    [
        (None, None, None, "at least one specification limit"),
        (5.0, 5.0, None, "lsl must be below usl"),
        (0.0, 10.0, -1.0, "sigma must be a finite number"),
        (0.0, 10.0, float("inf"), "sigma must be a finite number"),
    ],
)
def test_capability_bad_arguments(lsl, usl, sigma, message):
    with pytest.raises(InputError, match=message):
        capability(TABLE, lsl, usl, sigma=sigma)


# ---------------------------------------------------------------- confidence intervals of Cp and Cpk


def test_cp_interval_is_the_chi_square_interval():
    # Montgomery, Introduction to SQC, 7th ed., ch. 8.3.5: Cp sqrt(chi2(a/2, n-1)/(n-1)) .. sqrt(chi2(1-a/2)/(n-1)),
    # computed here with scipy.stats for n = 20, Cp = 1.33
    from scipy.stats import chi2

    from surfinspect.qualify.spc import capability_intervals

    (lo, hi), _ = capability_intervals(1.33, 1.2, 20)
    assert lo == pytest.approx(1.33 * np.sqrt(chi2.ppf(0.025, 19) / 19))
    assert hi == pytest.approx(1.33 * np.sqrt(chi2.ppf(0.975, 19) / 19))
    # the quantiles by hand, from a printed chi-square table (19 dof: 8.907 and 32.852)
    assert lo == pytest.approx(1.33 * np.sqrt(8.907 / 19), abs=1e-3)
    assert hi == pytest.approx(1.33 * np.sqrt(32.852 / 19), abs=1e-3)


def test_cp_and_cpk_intervals_cover_the_true_index_about_95_percent_of_the_time():
    # Monte Carlo: normal samples of 30 parts, mean 0.5, sigma 1, limits -3 .. 3 (true Cp 1, Cpk 0.8333),
    # sigma from the sample standard deviation (n - 1 degrees of freedom, as both intervals assume).
    # The chi-square interval is exact; Bissell's is an approximation good to a point or two at this n.
    from surfinspect.qualify.spc import capability

    rng = np.random.default_rng(20240601)
    hits_cp = hits_cpk = 0
    runs = 1500
    for _ in range(runs):
        x = rng.normal(0.5, 1.0, 30)
        cap = capability(x, -3.0, 3.0, sigma=float(np.std(x, ddof=1)))
        hits_cp += cap.cp_interval[0] <= 1.0 <= cap.cp_interval[1]
        hits_cpk += cap.cpk_interval[0] <= 2.5 / 3 <= cap.cpk_interval[1]
    assert 0.93 <= hits_cp / runs <= 0.97
    assert 0.92 <= hits_cpk / runs <= 0.975


def test_fewer_than_25_parts_warn():
    from surfinspect.qualify.spc import capability

    rng = np.random.default_rng(3)
    few = capability(rng.normal(0, 1, 24), -3, 3)
    enough = capability(rng.normal(0, 1, 25), -3, 3)
    assert few.warnings == ("Cp/Cpk from 24 parts (fewer than 25): read them with their 95% confidence intervals",)
    assert enough.warnings == ()
