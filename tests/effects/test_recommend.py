"""Next-time recommendation: targeting depth and holdout size."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.power import NormalIndPower
from statsmodels.stats.proportion import proportion_effectsize

from toolkit.effects.recommend import next_campaign_table, targeting_depth_table


def test_depth_stops_where_the_next_customers_lose_margin():
    """Top 30% earn +10 margin when treated, the rest lose 5: the best depth is 30% (worked by hand)."""
    rng = np.random.default_rng(2)
    n = 20000
    score = rng.random(n)
    treated = rng.random(n) < 0.8
    effect = np.where(score >= 0.7, 10.0, -5.0)
    margin = rng.normal(20.0, 2.0, n) + effect * treated
    depth = targeting_depth_table(score, treated, margin)
    assert depth.loc[depth["is_recommended"], "fraction_targeted"].tolist() == [pytest.approx(0.3)]
    best = depth[depth["is_recommended"]].iloc[0]
    assert best["incremental_margin"] == pytest.approx(0.3 * n * 10.0, rel=0.05)
    assert depth["incremental_margin"].iloc[-1] == pytest.approx(n * (0.3 * 10 - 0.7 * 5), rel=0.1)


def test_no_depth_when_nothing_earns_and_the_holdout_size_reaches_its_power():
    rng = np.random.default_rng(3)
    n = 5000
    score, treated = rng.random(n), rng.random(n) < 0.8
    depth = targeting_depth_table(score, treated, rng.normal(0, 1, n) - 3.0 * treated)
    row = next_campaign_table(promotion_id="P", depth=depth, n_treated=4000, n_holdout=1000, holdout_rate=0.15,
                              observed_lift=0.03, untargeted_share=0.2, alpha=0.05).iloc[0]
    assert row["recommended_depth"] == 0.0 and "do not repeat this offer" in row["recommendation"]
    h = float(proportion_effectsize(0.15 + row["mde_buyers"], 0.15))
    assert NormalIndPower().power(effect_size=h, nobs1=1000, ratio=4.0, alpha=0.05) == pytest.approx(0.8, abs=1e-3)
    h_target = abs(float(proportion_effectsize(0.18, 0.15)))
    power = NormalIndPower().power(effect_size=h_target, nobs1=row["holdout_needed"], ratio=4000 / row["holdout_needed"],
                                   alpha=0.05)
    assert power == pytest.approx(0.8, abs=2e-3)
    assert f"{math.ceil(row['holdout_needed']):,}" in row["recommendation"]
    assert row["untargeted_share"] == 0.2 and isinstance(depth, pd.DataFrame)
