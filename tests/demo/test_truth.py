"""The truth: its exact expectations against references, and its agreement with itself."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from toolkit.demo import Scenario
from toolkit.demo.hazard import order_probability, purchase_hazard
from toolkit.demo.truth import expected_orders


def _run(scenario, rate, day_factor, holding, coupon_hr, dip_left):
    n, span = holding.shape
    return expected_orders(
        scenario,
        rate=rate,
        day_factor=day_factor,
        active=np.ones((n, span), bool),
        forced=np.zeros((n, span), bool),
        coupon_factor=np.where(holding, coupon_hr[:, None], 1.0),
        holding=holding,
        anticipating=np.zeros((n, span), bool),
        dip_days_left=dip_left,
    )


def test_constant_hazard_matches_scipy_binomial():
    # Reference: with no dip, daily orders are independent Bernoulli(p) draws, so the count over
    # the span is scipy.stats.binom(span, p): mean span*p, and P(at least one) = binom.sf(0).
    scenario = Scenario.for_effects("none")
    rate = np.array([0.005, 0.03, 0.2])
    span = 17
    result = _run(scenario, rate, np.ones(span), np.zeros((3, span), bool), np.ones(3), np.zeros(3, int))
    p = order_probability(rate)
    np.testing.assert_allclose(result.orders.sum(axis=1), stats.binom(span, p).mean(), rtol=1e-12)
    np.testing.assert_allclose(1 - result.no_order_yet[:, -1], stats.binom(span, p).sf(0), rtol=1e-12)


def test_dip_chain_matches_brute_force_simulation():
    # Reference: a direct Monte Carlo of the same process (coupon held on days 0-9, a dip of
    # dip_days after every coupon order), written as a plain state loop. Tolerance: 4.5 Monte
    # Carlo standard errors per customer.
    scenario = Scenario.for_effects("all", dip_days=6)
    rng = np.random.default_rng(11)
    rate = np.array([0.02, 0.08, 0.3, 0.15])
    coupon_hr = np.array([2.0, 1.0, 1.5, 0.6])
    dip_left = np.array([0, 3, 0, 6])
    span, window = 24, 10
    day_factor = 1.0 + 0.3 * np.sin(np.arange(span))
    holding = np.broadcast_to(np.arange(span) < window, (4, span))
    exact = _run(scenario, rate, day_factor, holding, coupon_hr, dip_left)

    reps = 40000
    dip_until = np.repeat((dip_left - 1)[:, None], reps, axis=1)  # last dipped day, relative to day 0
    counts = np.zeros((4, reps, span))
    for day in range(span):
        factor = coupon_hr[:, None] if day < window else 1.0
        hazard = purchase_hazard(rate[:, None] * day_factor[day], factor, False, dip_until >= day, scenario)
        ordered = rng.random((4, reps)) < order_probability(hazard)
        counts[:, :, day] = ordered
        if day < window:
            dip_until = np.where(ordered, day + scenario.dip_days, dip_until)
    during, after = counts[:, :, :window].sum(axis=2), counts[:, :, window:].sum(axis=2)
    for simulated, expected in ((during, exact.orders[:, :window].sum(1)), (after, exact.orders[:, window:].sum(1))):
        se = simulated.std(axis=1) / np.sqrt(reps)
        assert np.all(np.abs(simulated.mean(axis=1) - expected) < 4.5 * se + 1e-12)
    buyer = (during > 0).mean(axis=1)
    se = np.sqrt(buyer * (1 - buyer) / reps)
    assert np.all(np.abs(buyer - (1 - exact.no_order_yet[:, window - 1])) < 4.5 * se)


def test_campaign_truth_equals_mean_of_customer_truth(export_all):
    table = export_all.uplift
    for campaign in export_all.truth["campaigns"]:
        rows = table[table["promotion_id"] == campaign["promotion_id"]]
        assert len(rows) == campaign["assigned"]
        assert rows["true_uplift_buyer"].mean() == pytest.approx(campaign["during_buyer"]["effect"], abs=2e-6)
        assert rows["true_uplift_orders_during"].mean() == pytest.approx(campaign["during_orders"]["effect"], abs=2e-6)
        assert rows["true_uplift_orders_after"].mean() == pytest.approx(campaign["after_orders"]["effect"], abs=2e-6)
        assert (rows["arm"] == "holdout").sum() == campaign["holdout"]


def test_truth_table_matches_assignments(export_all):
    truth = export_all.uplift[["promotion_id", "customer_id", "arm"]]
    assigned = export_all.assignments[["promotion_id", "customer_id", "arm"]].assign(
        arm=lambda f: f["arm"].map({"T": "treatment", "H": "holdout"})
    )
    assert truth.sort_values(["promotion_id", "customer_id"]).reset_index(drop=True).equals(
        assigned.sort_values(["promotion_id", "customer_id"]).reset_index(drop=True)
    )


def test_all_variant_has_positive_bump_and_negative_after_effect(export_all):
    for campaign in export_all.truth["campaigns"]:
        assert campaign["during_buyer"]["effect"] > 0
        assert campaign["during_orders"]["effect"] > 0
        assert campaign["after_orders"]["effect"] < 0
    sale = export_all.truth["broadcasts"][0]
    assert sale["during_orders"]["incremental"] > 0
    assert sale["hazard_ratio"] == export_all.truth["scenario"]["broadcast_hr"]


def test_uplift_groups_have_the_sign_their_rule_gives(export_all):
    by_group = export_all.uplift.groupby("uplift_group")["true_uplift_buyer"]
    assert by_group.max()["do_not_disturb"] < 0
    assert by_group.min()["sure_thing"] == 0 and by_group.max()["sure_thing"] == 0
    responsive = ["base", "garden", "recent_infrequent", "recent_infrequent_garden"]
    assert (by_group.min()[responsive] > 0).all()
    assert by_group.mean()["recent_infrequent_garden"] > by_group.mean()["base"]


def test_none_variant_has_no_effect_and_no_active_mechanism(export_none):
    truth = export_none.truth
    assert not any(m["active"] for m in truth["mechanisms"].values())
    assert truth["mechanisms"]["post_promotion_dip"]["post_promotion_dip_hr"] == 1.0
    assert truth["mechanisms"]["anticipation"]["anticipation_hr"] == 1.0
    for campaign in truth["campaigns"]:
        for outcome in ("during_buyer", "during_orders", "after_orders", "total_orders"):
            assert campaign[outcome]["effect"] == 0.0
    assert truth["broadcasts"][0]["during_orders"]["incremental"] == 0.0
    assert (export_none.uplift["true_uplift_buyer"] == 0).all()
