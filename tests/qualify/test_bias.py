"""Bias and linearity against known nominal angles, checked against scipy and statsmodels."""

import numpy as np
import pytest

from surfinspect.errors import InputError
from surfinspect.qualify.bias import bias_study


def test_bias_per_nominal_on_hand_worked_values_and_scipy():
    # Nominal 0: measured 0.1, 0.3, 179.8 -> deviations 0.1, 0.3, -0.2 (axial wrap)
    #   bias = 0.2 / 3 = 0.066667; s = sqrt(((0.033333)^2 + (0.233333)^2 + (0.266667)^2) / 2) = 0.251661
    stats = pytest.importorskip("scipy.stats")
    study = bias_study([0, 0, 0, 30, 30, 30], [0.1, 0.3, 179.8, 30.2, 30.4, 30.3])
    zero, thirty = study.per_nominal
    assert zero.bias_deg == pytest.approx(0.066667, abs=1e-6)
    assert zero.repeatability_deg == pytest.approx(0.251661, abs=1e-6)
    assert zero.mean_measured_deg == pytest.approx(0.066667, abs=1e-6)
    # Reference: scipy's one-sample t test of the deviations against 0
    ref = stats.ttest_1samp([0.1, 0.3, -0.2], 0.0)
    assert zero.t == pytest.approx(ref.statistic, rel=1e-9)
    assert zero.p_value == pytest.approx(ref.pvalue, rel=1e-9)
    assert zero.ci_deg == pytest.approx(tuple(ref.confidence_interval(0.95)), rel=1e-9)
    assert thirty.bias_deg == pytest.approx(0.3, abs=1e-9)


def test_linearity_agrees_with_statsmodels_ols():
    # Reference: statsmodels OLS of deviation on nominal, conf_int(alpha=0.05).
    sm = pytest.importorskip("statsmodels.api")
    rng = np.random.default_rng(2)
    nominals = np.repeat([0.0, 30.0, 60.0, 90.0, 120.0], 4)
    deviations = 0.05 + 0.002 * nominals + rng.normal(0, 0.03, nominals.size)
    study = bias_study(nominals, nominals + deviations)
    fit = sm.OLS(deviations, sm.add_constant(nominals)).fit()
    ci = fit.conf_int(alpha=0.05)
    lin = study.linearity
    assert lin.intercept == pytest.approx(fit.params[0], rel=1e-9)
    assert lin.slope == pytest.approx(fit.params[1], rel=1e-9)
    assert lin.intercept_ci == pytest.approx(tuple(ci[0]), rel=1e-9)
    assert lin.slope_ci == pytest.approx(tuple(ci[1]), rel=1e-9)
    assert lin.slope_p_value == pytest.approx(fit.pvalues[1], rel=1e-6)
    assert [b.nominal_deg for b in study.per_nominal] == [0, 30, 60, 90, 120]


def test_single_nominal_has_no_linearity_and_single_measurement_no_spread():
    study = bias_study([45.0], [45.2])
    assert study.linearity is None
    (only,) = study.per_nominal
    assert only.bias_deg == pytest.approx(0.2)
    assert only.repeatability_deg is None and only.ci_deg is None


@pytest.mark.parametrize(
    ("nominals", "measured", "message"),
    [
        ([0, 30], [0.1], "2 nominal angles for 1 measurements"),
        ([], [], "no measurements"),
        ([0, 30], [0.1, float("nan")], "finite"),
    ],
)
def test_bias_study_bad_input(nominals, measured, message):
    with pytest.raises(InputError, match=message):
        bias_study(nominals, measured)
