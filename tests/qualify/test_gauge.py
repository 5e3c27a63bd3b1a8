"""Gauge R&R by the ANOVA method, checked on hand-worked tables and against statsmodels (study tables: test_study_table; bias: test_bias; the PDF page: tests/report)."""

import numpy as np
import pytest

from surfinspect.errors import InputError
from surfinspect.qualify.gauge import D4_BY_SUBGROUP, GaugeVerdict, gauge_rr
from surfinspect.qualify.gauge_forms import gauge_to_dict


def _table(cell_means, half_spread=0.5):
    """(parts, appraisers, 2) values: each cell's two trials at mean -/+ half_spread."""
    m = np.asarray(cell_means, dtype=float)
    return np.stack([m - half_spread, m + half_spread], axis=2)


# Worked by hand (3 parts x 2 appraisers x 2 trials, trials at cell mean -/+ 0.5):
#   cell means      A    B    part mean
#   P1              2    4    3
#   P2              6    6    6
#   P3             10   14   12
#   appraiser mean  6    8    grand 7
# SS_part  = o r sum (part mean - 7)^2      = 4 (16 + 1 + 25) = 168, df 2, MS 84
# SS_appr  = p r sum (appr mean - 7)^2      = 6 (1 + 1)       = 12,  df 1, MS 12
# interaction residuals cell - part - appr + 7: P1: 0, 0; P2: 1, -1; P3: -1, 1
# SS_int   = r sum residual^2               = 2 * 4           = 8,   df 2, MS 4
# SS_error = 12 values * 0.5^2              = 3,  df 6, MS 0.5
# SS_total = 191 (= 168 + 12 + 8 + 3)
# F_int = 4 / 0.5 = 8 -> p = 0.020 < 0.25: interaction kept
# EV^2 = 0.5; interaction (4 - 0.5) / 2 = 1.75; appraiser (12 - 4) / (3 * 2) = 1.333333;
# part (84 - 4) / (2 * 2) = 20; AV^2 = 3.083333; GRR^2 = 3.583333; TV^2 = 23.583333
# %GRR of TV = 100 sqrt(3.583333 / 23.583333) = 38.980; %GRR of T=30: 600 * 1.892969 / 30 = 37.859
# ndc = floor(1.41 * 4.472136 / 1.892969) = floor(3.3311) = 3
INTERACTION_TABLE = _table([[2, 4], [6, 6], [10, 14]])


def test_anova_and_components_on_hand_worked_table_with_interaction():
    study = gauge_rr(INTERACTION_TABLE, tolerance=30.0)
    a = study.anova_interaction
    assert [a.row(s).ss for s in ("part", "appraiser", "part x appraiser", "repeatability", "total")] == pytest.approx(
        [168, 12, 8, 3, 191], rel=1e-12
    )
    assert [a.row(s).df for s in ("part", "appraiser", "part x appraiser", "repeatability", "total")] == [
        2,
        1,
        2,
        6,
        11,
    ]
    assert a.row("part x appraiser").f == pytest.approx(8.0)
    assert a.row("part").f == pytest.approx(84 / 4)  # random effects: parts against the interaction
    assert a.row("appraiser").f == pytest.approx(12 / 4)
    assert study.model == "interaction"
    assert "significant" in study.model_reason and "kept" in study.model_reason
    v = {c.name: c.variance for c in study.components}
    assert v["repeatability"] == pytest.approx(0.5)
    assert v["part x appraiser"] == pytest.approx(1.75)
    assert v["appraiser"] == pytest.approx(4 / 3)
    assert v["reproducibility"] == pytest.approx(3.083333, abs=1e-6)
    assert v["grr"] == pytest.approx(3.583333, abs=1e-6)
    assert v["part"] == pytest.approx(20.0)
    assert v["total"] == pytest.approx(23.583333, abs=1e-6)
    assert study.grr_percent_of_total_variation == pytest.approx(38.980, abs=1e-3)
    assert study.grr_percent_of_tolerance == pytest.approx(37.859, abs=1e-3)
    assert study.ndc == 3
    assert study.verdict is GaugeVerdict.NOT_ACCEPTABLE
    assert study.component("grr").percent_contribution == pytest.approx(100 * 3.583333 / 23.583333, abs=1e-4)


def test_negative_component_is_set_to_zero():
    # Worked by hand: cell means P1 (2, 4), P2 (6, 4), P3 (10, 10); appraiser means 6 and 6,
    # so SS_appr = 0, MS_appr = 0; interaction residuals -1, 1, 1, -1, 0, 0 -> MS_int = 2*4/2 = 4;
    # appraiser component (0 - 4) / 6 < 0 -> 0. SS_part = 4 (9 + 1 + 16) = 104, MS 52,
    # part component (52 - 4) / 4 = 12; interaction (4 - 0.5) / 2 = 1.75.
    study = gauge_rr(_table([[2, 4], [6, 4], [10, 10]]), tolerance=30.0)
    assert study.model == "interaction"
    assert study.component("appraiser").variance == 0.0
    assert study.component("part").variance == pytest.approx(12.0)
    assert study.component("part x appraiser").variance == pytest.approx(1.75)
    assert study.component("reproducibility").variance == pytest.approx(1.75)


def test_pooled_model_on_hand_worked_table():
    # Worked by hand (2 parts x 2 appraisers x 2 trials, trials at cell mean -/+ 1):
    #   cell means P1 (2, 4), P2 (8, 12); part means 3, 10; appraiser means 5, 8; grand 6.5
    #   SS_part = 4 (12.25 + 12.25) = 98; SS_appr = 4 (2.25 + 2.25) = 18;
    #   residuals +-0.5 -> SS_int = 2 * 4 * 0.25 = 2, MS 2; SS_error = 8 * 1 = 8, df 4, MS 2
    #   F_int = 1 -> p = 0.374 >= 0.25: pooled; pooled error SS 10, df 5, MS 2
    #   EV^2 = 2; appraiser (18 - 2) / 4 = 4; part (98 - 2) / 4 = 24; interaction 0
    study = gauge_rr(_table([[2, 4], [8, 12]], half_spread=1.0), tolerance=60.0)
    assert study.anova_interaction.row("part x appraiser").f == pytest.approx(1.0)
    assert study.model == "pooled"
    assert "not significant" in study.model_reason and "0.25" in study.model_reason
    pooled = study.anova_pooled.row("repeatability")
    assert (pooled.df, pooled.ss, pooled.ms) == (5, pytest.approx(10.0), pytest.approx(2.0))
    assert study.anova.row("part").f == pytest.approx(98 / 2)
    v = {c.name: c.variance for c in study.components}
    assert (v["repeatability"], v["appraiser"], v["part"], v["part x appraiser"]) == (
        pytest.approx(2.0),
        pytest.approx(4.0),
        pytest.approx(24.0),
        0.0,
    )


def _random_study(seed, parts=10, appraisers=3, trials=3, interaction=0.0):
    rng = np.random.default_rng(seed)
    part = rng.normal(0, 2.0, parts)[:, None, None]
    appraiser = rng.normal(0, 0.3, appraisers)[None, :, None]
    cross = rng.normal(0, interaction, (parts, appraisers, 1)) if interaction else 0.0
    return part + appraiser + cross + rng.normal(0, 0.2, (parts, appraisers, trials))


def _frame(values):
    pd = pytest.importorskip("pandas")
    p, o, r = values.shape
    return pd.DataFrame(
        [
            {"part": f"P{i}", "appraiser": f"A{j}", "trial": k, "value": values[i, j, k]}
            for i in range(p)
            for j in range(o)
            for k in range(r)
        ]
    )


@pytest.mark.parametrize("seed", [1, 7])
def test_anova_agrees_with_statsmodels(seed):
    # Reference: statsmodels anova_lm on ols('value ~ C(part)*C(appraiser)'). Its F values are
    # all against the residual (fixed effects); the random-effects F of parts and appraisers
    # is the ratio of the same library's mean squares to the interaction mean square.
    smf = pytest.importorskip("statsmodels.formula.api")
    from statsmodels.stats.anova import anova_lm

    values = _random_study(seed, interaction=0.4)
    ref = anova_lm(smf.ols("value ~ C(part)*C(appraiser)", data=_frame(values)).fit())
    study = gauge_rr(values, tolerance=20.0)
    a = study.anova_interaction
    names = {
        "part": "C(part)",
        "appraiser": "C(appraiser)",
        "part x appraiser": "C(part):C(appraiser)",
        "repeatability": "Residual",
    }
    for ours, theirs in names.items():
        assert a.row(ours).ms == pytest.approx(ref.loc[theirs, "mean_sq"], rel=1e-9)
        assert a.row(ours).df == int(ref.loc[theirs, "df"])
    assert a.row("part x appraiser").f == pytest.approx(ref.loc["C(part):C(appraiser)", "F"], rel=1e-9)
    assert a.row("part x appraiser").p == pytest.approx(ref.loc["C(part):C(appraiser)", "PR(>F)"], rel=1e-9)
    ms_int = ref.loc["C(part):C(appraiser)", "mean_sq"]
    assert a.row("part").f == pytest.approx(ref.loc["C(part)", "mean_sq"] / ms_int, rel=1e-9)
    assert a.row("appraiser").f == pytest.approx(ref.loc["C(appraiser)", "mean_sq"] / ms_int, rel=1e-9)


def test_pooled_anova_agrees_with_statsmodels_additive_model():
    # Reference: statsmodels anova_lm on ols('value ~ C(part)+C(appraiser)'): the pooled model.
    smf = pytest.importorskip("statsmodels.formula.api")
    from statsmodels.stats.anova import anova_lm

    values = _random_study(3)
    ref = anova_lm(smf.ols("value ~ C(part) + C(appraiser)", data=_frame(values)).fit())
    study = gauge_rr(values, tolerance=20.0)
    pooled = study.anova_pooled
    for ours, theirs in {"part": "C(part)", "appraiser": "C(appraiser)", "repeatability": "Residual"}.items():
        assert pooled.row(ours).ms == pytest.approx(ref.loc[theirs, "mean_sq"], rel=1e-9)
    for ours, theirs in {"part": "C(part)", "appraiser": "C(appraiser)"}.items():
        assert pooled.row(ours).f == pytest.approx(ref.loc[theirs, "F"], rel=1e-9)
        assert pooled.row(ours).p == pytest.approx(ref.loc[theirs, "PR(>F)"], rel=1e-9)


def test_json_has_the_required_keys_and_matches_the_components():
    values = _random_study(11)  # part sigma 2, appraiser 0.3, repeatability 0.2
    study = gauge_rr(values, tolerance=40.0)
    d = gauge_to_dict(study)
    for key in ("grr_percent_of_total_variation", "grr_percent_of_tolerance", "ndc", "components", "model", "verdict"):
        assert key in d
    assert set(d["components"]) >= {"repeatability", "reproducibility", "part", "grr", "total"}
    assert d["components"]["grr"]["percent_total_variation"] == pytest.approx(d["grr_percent_of_total_variation"])
    assert d["components"]["grr"]["percent_tolerance"] == pytest.approx(d["grr_percent_of_tolerance"])
    # appraiser sigma 0.3 against part sigma 2 puts %GRR of TV in the 10-30 % band
    assert 10 <= study.grr_percent_of_total_variation <= 30 and study.grr_percent_of_tolerance < 10
    assert study.ndc >= 5
    assert d["verdict"] == "conditional"
    # judged on total variation alone it stays conditional; on tolerance alone it is acceptable
    assert gauge_rr(values, tolerance=40.0, basis="tolerance").verdict is GaugeVerdict.ACCEPTABLE


@pytest.mark.parametrize(
    ("percent", "ndc", "expected"),
    [
        (9.99, 5, GaugeVerdict.ACCEPTABLE),
        (10.0, 5, GaugeVerdict.CONDITIONAL),  # 10-30 % is acceptable only with a reason
        (30.0, 5, GaugeVerdict.CONDITIONAL),
        (30.01, 50, GaugeVerdict.NOT_ACCEPTABLE),
        (5.0, 4, GaugeVerdict.NOT_ACCEPTABLE),  # fewer than 5 distinct categories
        (5.0, None, GaugeVerdict.ACCEPTABLE),  # no measurement spread: ndc undefined, said in the reasons
    ],
)
def test_verdict_thresholds(percent, ndc, expected):
    from surfinspect.qualify.gauge import _judge

    verdict, reasons = _judge(percent, percent / 2, ndc, 0.01, "given", 1.0, "larger")
    assert verdict is expected
    assert reasons[0].startswith("%GRR (larger of total variation and tolerance)")


def test_resolution_coarser_than_tenth_of_tolerance_is_not_acceptable():
    values = np.round(_random_study(11), 0)  # recorded in whole units
    study = gauge_rr(values, tolerance=8.0)
    assert study.resolution == pytest.approx(1.0)
    assert study.verdict is GaugeVerdict.NOT_ACCEPTABLE
    assert any("resolution 1 > tolerance/10 = 0.8" in r for r in study.reasons)


def test_range_chart_constants_match_simulated_ranges():
    # D4 = 1 + 3 sd(R) / mean(R) of the range R of n standard normals, by simulation
    # (100 000 subgroups: standard error of the estimate below 0.01).
    rng = np.random.default_rng(5)
    for n, d4 in D4_BY_SUBGROUP.items():
        x = rng.standard_normal((100_000, n))
        r = x.max(axis=1) - x.min(axis=1)
        assert d4 == pytest.approx(1 + 3 * r.std() / r.mean(), abs=0.02), n


@pytest.mark.parametrize(
    ("values", "kwargs", "message"),
    [
        (np.zeros((2, 2)), {"tolerance": 1.0}, r"shape \(parts, appraisers, trials\)"),
        (np.zeros((2, 1, 2)), {"tolerance": 1.0}, "each at least 2"),
        (np.full((2, 2, 2), np.nan), {"tolerance": 1.0}, "finite"),
        (np.arange(8.0).reshape(2, 2, 2), {"tolerance": 0.0}, "tolerance: must be a width > 0"),
        (np.arange(8.0).reshape(2, 2, 2), {"tolerance": 1.0, "basis": "best"}, "basis: unknown"),
        (np.ones((2, 2, 2)), {"tolerance": 1.0}, "no variation"),
    ],
)
def test_gauge_rr_bad_input(values, kwargs, message):
    with pytest.raises(InputError, match=message):
        gauge_rr(values, **kwargs)


def test_setting_errors_do_not_name_the_table():
    # a bad setting is not a problem of the file it came with
    with pytest.raises(InputError, match=r"^tolerance: must be a width > 0 \(got -2\)$"):
        gauge_rr(np.arange(8.0).reshape(2, 2, 2), tolerance=-2.0, source="gauge.csv")
    with pytest.raises(InputError, match=r"^resolution: must be a number >= 0 \(got -0.1\)$"):
        gauge_rr(np.arange(8.0).reshape(2, 2, 2), tolerance=2.0, resolution=-0.1, source="gauge.csv")
