"""Randomisation checks: sample ratio mismatch and covariate balance."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from causaldata import thornton_hiv
from scipy import stats

from toolkit.effects.balance import RandomisationCheck, covariate_balance, sample_ratio_test


def test_skewed_split_trips_the_sample_ratio_check_and_a_fair_one_does_not():
    """Chi-square goodness of fit against the planned split; alarm at p < 0.001 (Fabijan et al. 2019)."""
    fair = sample_ratio_test(8010, 1990, 0.2)
    assert fair["passed"] is True and fair["p_value"] > 0.5
    skewed = sample_ratio_test(8400, 1600, 0.2)  # 16% holdout where 20% was planned
    assert skewed["passed"] is False
    assert "SAMPLE RATIO MISMATCH" in skewed["detail"]
    # hand formula: sum (observed - expected)^2 / expected with expected 8000 / 2000
    assert skewed["statistic"] == pytest.approx(400**2 / 8000 + 400**2 / 2000, rel=1e-12)
    assert skewed["p_value"] == pytest.approx(stats.chi2.sf(100.0, 1), rel=1e-9)


def test_sample_ratio_check_is_not_run_without_a_planned_split_on_thornton():
    """Thornton (2008) randomised incentives, but no planned share is configured: the check says so."""
    data = thornton_hiv.load_pandas().data.dropna(subset=["any", "got"])
    treated = data["any"].astype(bool)
    result = sample_ratio_test(int(treated.sum()), int((~treated).sum()), None)
    assert result["passed"] is None
    assert result["detail"].startswith("not run: no planned split in the config")


def test_smd_matches_austin_2009_formula_by_hand():
    """SMD = (mean_t - mean_c) / sqrt((var_t + var_c) / 2) (Austin 2009)."""
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0, 4.0, 2.0, 2.0, 3.0, 5.0],
                          "is_treated": [True, True, True, True, False, False, False, False]})
    # treated: mean 2.5, var 5/3; holdout: mean 3.0, var 2.0
    expected = (2.5 - 3.0) / np.sqrt((5 / 3 + 2.0) / 2)
    table = covariate_balance(frame, ["x"])
    assert table.loc[0, "statistic"] == pytest.approx(expected, rel=1e-12)


def test_imbalanced_feature_fails_and_missing_share_is_compared():
    rng = np.random.default_rng(11)
    n = 6000
    treated = rng.random(n) < 0.8
    frame = pd.DataFrame({
        "is_treated": treated,
        "frequency": rng.poisson(3, n) + np.where(treated, 1, 0),  # treated buy more often before: SMD ~ +0.55
        "monetary": rng.gamma(2, 20, n),
        "recency_days": np.where(rng.random(n) < 0.1, np.nan, rng.integers(1, 365, n)),
    })
    check = RandomisationCheck().fit(frame, features=["frequency", "monetary", "recency_days"], planned_holdout_share=0.2)
    assert check.status_ == "failed" and not check.passed_
    summary = check.summary_.set_index("feature")
    assert summary.loc["frequency", "passed"] == False  # noqa: E712
    assert summary.loc["monetary", "passed"] == True  # noqa: E712
    assert "recency_days (missing)" in summary.index
    assert any("IMBALANCED" in reason for reason in check.reasons_)


def test_chance_imbalance_in_a_small_campaign_does_not_fail(panel_factory):
    """A small randomised campaign often has some |SMD| near 0.1 by chance; the Bonferroni-corrected test keeps it passing."""
    failures = 0
    for seed in range(30):
        panel = panel_factory(customers=800, seed=100 + seed)
        check = RandomisationCheck().fit(panel, features=["frequency", "monetary", "recency_days", "tenure_days",
                                                          "past_deal_share", "past_coupons", "pre_buyer"],
                                         planned_holdout_share=0.25)
        failures += check.status_ == "failed"
    assert failures <= 3
