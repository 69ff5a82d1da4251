"""Holdout comparisons: published experiments and statsmodels as references."""

from __future__ import annotations

import json
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from causaldata import nsw_mixtape, thornton_hiv
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint
from statsmodels.stats.weightstats import CompareMeans, DescrStatsW, ttest_ind

from toolkit.errors import AnalysisError, StatisticalWarning
from toolkit.effects.holdout import (
    HoldoutComparison,
    cuped_difference,
    mean_difference,
    newcombe_interval,
    wilson_interval,
)

REFERENCE = json.loads((Path(__file__).parents[1] / "reference" / "effects" / "published_values.json").read_text())


@pytest.fixture(scope="module")
def nsw() -> pd.DataFrame:
    data = nsw_mixtape.load_pandas().data
    return data.assign(re78=data["re78"].astype(float), treated=data["treat"].astype(bool))


@pytest.fixture(scope="module")
def thornton() -> pd.DataFrame:
    data = thornton_hiv.load_pandas().data.dropna(subset=["any", "got"])
    return data.assign(treated=data["any"].astype(bool), learned=data["got"].astype(float))


def test_lift_and_pooled_se_match_dehejia_wahba_1999_table3(nsw):
    """Dehejia & Wahba (1999), Table 3, NSW experimental row (from memory): 1,794 (633).

    The shipped `nsw_mixtape` is the Dehejia-Wahba subsample (185 treated, 260 controls). Its
    difference in 1978 earnings is 1,794.34; the published 633 is the classical pooled-variance
    standard error (632.85 on these rows). The Welch standard error, our default, is 670.997:
    larger because the treated arm's earnings vary more, so the memory of "633" matches the
    pooled formula, not Welch's.
    """
    ref = REFERENCE["nsw_experimental"]
    assert (int(nsw["treated"].sum()), int((~nsw["treated"]).sum())) == (ref["treated"], ref["control"])
    pooled = HoldoutComparison(variance="pooled").fit(nsw, outcome_col="re78", treatment_col="treated")
    row = pooled.summary.loc["pooled"]
    assert row["lift"] == pytest.approx(1794.34, abs=0.01)
    assert row["lift"] == pytest.approx(ref["difference_re78"], abs=0.5)
    assert row["treated_mean"] == pytest.approx(ref["mean_re78_treated"], abs=0.5)
    assert row["holdout_mean"] == pytest.approx(ref["mean_re78_control"], abs=0.5)
    assert row["lift_se"] == pytest.approx(ref["standard_error"], abs=0.5)
    welch = HoldoutComparison().fit(nsw, outcome_col="re78", treatment_col="treated").summary.loc["welch"]
    assert welch["lift_se"] == pytest.approx(671.0, abs=0.5)


def test_welch_and_pooled_match_statsmodels_compare_means(nsw):
    """statsmodels CompareMeans.tconfint_diff / ttest_ind as the reference implementation."""
    t = nsw.loc[nsw["treated"], "re78"].to_numpy()
    c = nsw.loc[~nsw["treated"], "re78"].to_numpy()
    compare = CompareMeans(DescrStatsW(t), DescrStatsW(c))
    for variance, usevar in (("welch", "unequal"), ("pooled", "pooled")):
        ours = mean_difference(t, c, variance=variance)
        for alpha in (0.05, 0.1):
            low, high = compare.tconfint_diff(alpha=alpha, usevar=usevar)
            assert ours.interval(alpha) == pytest.approx((low, high), rel=1e-10)
        stat, p_value, df = ttest_ind(t, c, usevar=usevar)
        assert ours.degrees_of_freedom == pytest.approx(df, rel=1e-10)
        assert ours.p_value == pytest.approx(p_value, rel=1e-8)
        assert ours.lift / ours.standard_error == pytest.approx(stat, rel=1e-10)


def test_relative_lift_delta_method_matches_bootstrap_on_nsw(nsw):
    """Delta-method SE of treated/holdout - 1 against a seeded bootstrap (common practice, no source)."""
    t = nsw.loc[nsw["treated"], "re78"].to_numpy()
    c = nsw.loc[~nsw["treated"], "re78"].to_numpy()
    rel, se = mean_difference(t, c).relative()
    assert rel == pytest.approx(t.mean() / c.mean() - 1, rel=1e-12)
    rng = np.random.default_rng(7)
    boots = [rng.choice(t, t.size).mean() / rng.choice(c, c.size).mean() - 1 for _ in range(4000)]
    assert se == pytest.approx(np.std(boots, ddof=1), rel=0.08)


def test_learned_result_shares_match_thornton_2008(thornton):
    """Thornton (2008, AER): 33.9% learned their result without an incentive, 78.9% with one (from memory)."""
    ref = REFERENCE["thornton_hiv"]
    fit = HoldoutComparison().fit(thornton, outcome_col="learned", treatment_col="treated")
    newcombe = fit.summary.loc["newcombe"]
    assert newcombe["holdout_mean"] == pytest.approx(ref["share_learned_without_incentive"], abs=0.0005)
    assert newcombe["treated_mean"] == pytest.approx(ref["share_learned_with_incentive"], abs=0.0005)
    assert newcombe["lift"] == pytest.approx(0.789236 - 0.338684, abs=1e-5)
    x1, n1 = int(thornton.loc[thornton["treated"], "learned"].sum()), int(thornton["treated"].sum())
    x0, n0 = int(thornton.loc[~thornton["treated"], "learned"].sum()), int((~thornton["treated"]).sum())
    low, high = confint_proportions_2indep(x1, n1, x0, n0, method="newcomb", compare="diff")
    assert (newcombe["lift_ci_low"], newcombe["lift_ci_high"]) == pytest.approx((low, high), rel=1e-10)
    assert newcombe["lift_ci_low"] > 0.40 and newcombe["lift_ci_high"] < 0.50


def test_newcombe_reproduces_newcombe_1998_example_and_statsmodels():
    """Newcombe (1998) example (a), 56/70 vs 48/80: 0.0524 to 0.3339 (from memory); statsmodels 'newcomb'."""
    ref = REFERENCE["newcombe_1998_example"]
    ours = newcombe_interval(ref["treated_count"], ref["treated_n"], ref["holdout_count"], ref["holdout_n"])
    assert ours == pytest.approx((ref["ci_low"], ref["ci_high"]), abs=5e-5)
    for counts in ((56, 70, 48, 80), (9, 10, 3, 10), (0, 25, 4, 30), (30, 30, 12, 40)):
        expected = confint_proportions_2indep(*counts, method="newcomb", compare="diff", alpha=0.1)
        assert newcombe_interval(*counts, alpha=0.1) == pytest.approx(expected, rel=1e-9, abs=1e-12)


def test_wilson_matches_statsmodels_proportion_confint():
    """statsmodels proportion_confint(method='wilson') as the reference."""
    for count, nobs in ((81, 263), (0, 12), (12, 12), (3, 1000)):
        assert wilson_interval(count, nobs) == pytest.approx(proportion_confint(count, nobs, method="wilson"), abs=1e-12)


def test_cuped_theta_and_variance_reduction_follow_deng_2013(panel_factory):
    """Deng et al. (2013): theta = cov(Y, X) / var(X) and the variance falls by corr(Y, X)^2 (exact identity)."""
    panel = panel_factory(customers=4000, seed=3)
    y = panel["during_net_amount"].to_numpy()
    x = panel["pre_net_amount"].to_numpy()
    t = panel["is_treated"].to_numpy()
    cuped = cuped_difference(y[t], y[~t], x[t], x[~t])
    assert cuped.variance_reduction == pytest.approx(np.corrcoef(y, x)[0, 1] ** 2, rel=1e-10)
    theta = np.cov(y, x)[0, 1] / np.var(x, ddof=1)
    adjusted = y - theta * (x - x.mean())
    plain = mean_difference(adjusted[t], adjusted[~t])
    assert cuped.lift == pytest.approx(plain.lift, rel=1e-12)
    assert cuped.standard_error == pytest.approx(plain.standard_error, rel=1e-12)


def test_cuped_interval_covers_known_effect_and_is_narrower(panel_factory):
    """On synthetic panels whose pre-period predicts the outcome, CUPED is unbiased and tighter (Deng et al. 2013)."""
    covered, narrower = 0, 0
    for seed in range(20):
        rng = np.random.default_rng(seed)
        n = 2000
        pre = rng.gamma(2.0, 20.0, n)
        treated = rng.random(n) < 0.7
        y = 0.8 * pre + rng.normal(0, 10, n) + 5.0 * treated
        frame = pd.DataFrame({"y": y, "pre": pre, "is_treated": treated})
        fit = HoldoutComparison().fit(frame, outcome_col="y", covariate_col="pre")
        row = fit.summary.loc["cuped"]
        covered += row["lift_ci_low"] <= 5.0 <= row["lift_ci_high"]
        narrower += row["lift_se"] < fit.summary.loc["welch", "lift_se"]
    assert covered >= 17  # 95% intervals: 19 of 20 expected
    assert narrower == 20


def test_conf_int_at_other_alpha_matches_statsmodels(nsw):
    fit = HoldoutComparison().fit(nsw, outcome_col="re78", treatment_col="treated")
    t = nsw.loc[nsw["treated"], "re78"].to_numpy()
    c = nsw.loc[~nsw["treated"], "re78"].to_numpy()
    expected = CompareMeans(DescrStatsW(t), DescrStatsW(c)).tconfint_diff(alpha=0.1, usevar="unequal")
    got = fit.conf_int(alpha=0.1).loc["welch"]
    assert (got["lift_ci_low"], got["lift_ci_high"]) == pytest.approx(expected, rel=1e-10)
    assert "newcombe" not in fit.conf_int().index  # earnings are not a 0/1 outcome
    assert "<table" in fit._repr_html_()


def test_constant_outcome_warns_and_has_no_interval():
    frame = pd.DataFrame({"y": np.zeros(40), "is_treated": np.r_[np.ones(20, bool), np.zeros(20, bool)]})
    with pytest.warns(StatisticalWarning, match="constant"):
        fit = HoldoutComparison().fit(frame, outcome_col="y")
    row = fit.summary.loc["welch"]
    assert row["lift"] == 0 and np.isnan(row["lift_ci_low"])


def test_empty_arm_and_missing_values_raise():
    frame = pd.DataFrame({"y": [1.0, 0.0, 1.0], "is_treated": [True, True, True]})
    with pytest.raises(AnalysisError, match="one arm is empty"):
        HoldoutComparison().fit(frame, outcome_col="y")
    frame = pd.DataFrame({"y": [1.0, np.nan, 1.0, 0.0], "is_treated": [True, True, False, False]})
    with pytest.raises(AnalysisError, match="missing values"):
        HoldoutComparison().fit(frame, outcome_col="y")
    with pytest.raises(AnalysisError, match="not in the frame"):
        HoldoutComparison().fit(frame, outcome_col="sales")
    with pytest.raises(AnalysisError, match="not fitted"):
        HoldoutComparison().summary
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with pytest.raises(ValueError, match="variance"):
            HoldoutComparison(variance="equal").fit(frame.fillna(0), outcome_col="y")
