"""Power: Cohen's tables (from memory) and statsmodels' power functions as references."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from statsmodels.stats.power import NormalIndPower, TTestIndPower
from statsmodels.stats.proportion import proportion_effectsize

from toolkit.effects.power import (
    holdout_size_needed,
    minimum_detectable_effect,
    minimum_detectable_rate_lift,
    rate_sample_size_per_arm,
    sample_size_per_arm,
)

REFERENCE = json.loads((Path(__file__).parents[1] / "reference" / "effects" / "published_values.json").read_text())


def test_sample_size_matches_cohen_1988_table_2_4_1():
    """Cohen (1988): n = 393 per group for d = 0.2, two-sided alpha 0.05, power 0.8 (from memory).

    The exact t-test solution is 393.4; Cohen's table rounds it to 393.
    """
    ref = REFERENCE["cohen_1988_t_test"]
    n = sample_size_per_arm(ref["effect_size"], alpha=ref["alpha"], power=ref["power"])
    assert round(n) == ref["n_per_group"]
    assert n == pytest.approx(393.4, abs=0.05)


def test_rate_sample_size_matches_cohen_1988_table_6_4_1():
    """Cohen (1988): n = 392 per group for h = 0.2 (normal approximation; from memory)."""
    ref = REFERENCE["cohen_1988_proportions"]
    p0 = 0.30
    p1 = math.sin(math.asin(math.sqrt(p0)) + ref["effect_size_h"] / 2) ** 2  # h = 0.2 exactly
    assert float(proportion_effectsize(p1, p0)) == pytest.approx(0.2, abs=1e-12)
    n = rate_sample_size_per_arm(holdout_rate=p0, target_lift=p1 - p0, alpha=ref["alpha"], power=ref["power"])
    assert math.ceil(n) == 393 and round(n) == ref["n_per_group"]


def test_minimum_detectable_effect_inverts_the_sample_size():
    """At the MDE of given arms, statsmodels gives back the power asked for (up to the solver tolerance)."""
    mde = minimum_detectable_effect(n_treated=8000, n_holdout=2000, outcome_sd=12.0, alpha=0.05, power=0.8)
    power = TTestIndPower().power(effect_size=mde / 12.0, nobs1=2000, ratio=4.0, alpha=0.05)
    assert power == pytest.approx(0.8, abs=1e-4)
    lift = minimum_detectable_rate_lift(n_treated=8000, n_holdout=2000, holdout_rate=0.15)
    h = float(proportion_effectsize(0.15 + lift, 0.15))
    assert NormalIndPower().power(effect_size=h, nobs1=2000, ratio=4.0, alpha=0.05) == pytest.approx(0.8, abs=1e-4)


def test_holdout_size_needed_reaches_the_power_beside_fixed_treated():
    needed = holdout_size_needed(target_lift=0.03, n_treated=10000, holdout_rate=0.15, alpha=0.05, power=0.8)
    h = abs(float(proportion_effectsize(0.18, 0.15)))
    achieved = NormalIndPower().power(effect_size=h, nobs1=needed, ratio=10000 / needed, alpha=0.05)
    assert achieved == pytest.approx(0.8, abs=2e-3)
    # more treated customers need a smaller holdout; too few treated cannot reach it at all
    assert holdout_size_needed(target_lift=0.03, n_treated=40000, holdout_rate=0.15) < needed
    assert holdout_size_needed(target_lift=0.01, n_treated=500, holdout_rate=0.15) == math.inf
    assert np.isnan(holdout_size_needed(target_lift=0.0, n_treated=500, holdout_rate=0.15))
    by_mean = holdout_size_needed(target_lift=2.0, n_treated=5000, outcome_sd=20.0)
    assert TTestIndPower().power(effect_size=0.1, nobs1=by_mean, ratio=5000 / by_mean, alpha=0.05) == pytest.approx(0.8, abs=2e-3)
