"""The hazard pieces: the coupon's hazard-ratio rule and the daily order probability."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from toolkit.demo import Scenario
from toolkit.demo.hazard import coupon_hazard_ratio, order_probability, purchase_hazard


def test_order_probability_matches_scipy_poisson_chance_of_any_event():
    # Reference: scipy.stats.poisson.sf(0, mu) = P(N >= 1) for a Poisson count with mean mu.
    hazard = np.array([1e-6, 0.003, 0.02, 0.4, 2.5])
    np.testing.assert_allclose(order_probability(hazard), stats.poisson.sf(0, hazard), rtol=1e-12)


def test_coupon_rule_groups_and_precedence():
    scenario = Scenario.for_effects("all")
    ratio, group = coupon_hazard_ratio(
        scenario,
        household_garden=np.array([0, 1, 0, 1, 1, 1, 0]),
        signup_channel=np.array(["web", "web", "app", "app", "web", "marketplace", "social"]),
        recency_days=np.array([np.nan, 200.0, 10.0, 30.0, 5.0, 5.0, 61.0]),
        frequency=np.array([0, 4, 2, 3, 12, 1, 1]),
    )
    base, garden, recent = scenario.uplift_base_hr, scenario.uplift_garden_hr, scenario.uplift_recent_infrequent_hr
    expected = [base, base * garden, base * recent, base * garden * recent, 1.0, scenario.do_not_disturb_hr, base]
    np.testing.assert_allclose(ratio, expected, rtol=1e-12)
    assert list(group) == [
        "base", "garden", "recent_infrequent", "recent_infrequent_garden", "sure_thing", "do_not_disturb", "base",
    ]


@pytest.mark.parametrize("effects", ["uplift_only", "none"])
def test_dip_and_anticipation_factors_do_nothing_when_switched_off(effects):
    scenario = Scenario.for_effects(effects)
    base = np.array([0.01, 0.02])
    np.testing.assert_array_equal(purchase_hazard(base, 1.0, np.array([True, True]), np.array([True, True]), scenario), base)


def test_dip_and_anticipation_multiply_the_hazard():
    scenario = Scenario.for_effects("all")
    base = np.array([0.01, 0.01, 0.01, 0.01])
    hazard = purchase_hazard(base, 2.0, np.array([False, True, False, True]), np.array([False, False, True, True]), scenario)
    a, d = scenario.anticipation_hr, scenario.post_promotion_dip_hr
    np.testing.assert_allclose(hazard, [0.02, 0.02 * a, 0.02 * d, 0.02 * a * d], rtol=1e-12)
