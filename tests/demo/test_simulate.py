"""The simulated data against its own truth: what the export shows agrees with what was built in.

Tolerances are sampling tolerances (common practice, no source): 4 standard errors for
differences of means, and stated margins for ratios whose expected value the mechanism fixes.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from demo_helpers import pooled_difference


def _truth_mean(export, outcome):
    campaigns = export.truth["campaigns"]
    weights = np.array([c["assigned"] for c in campaigns], float)
    return float(np.average([c[outcome]["effect"] for c in campaigns], weights=weights))


def test_treated_buy_more_than_holdout_as_the_truth_says(export_all):
    outcomes = export_all.campaign_outcomes()
    realised, se = pooled_difference(outcomes, "during_buyer")
    truth = _truth_mean(export_all, "during_buyer")
    assert truth > 0 and realised > 0
    assert abs(realised - truth) < 4 * se
    for campaign in export_all.truth["campaigns"]:
        one, one_se = pooled_difference(outcomes[outcomes["promotion_id"] == campaign["promotion_id"]], "during_buyer")
        assert abs(one - campaign["during_buyer"]["effect"]) < 4 * one_se, campaign["promotion_id"]


def test_after_window_shows_the_pull_forward_the_truth_says(export_all):
    outcomes = export_all.campaign_outcomes()
    realised, se = pooled_difference(outcomes, "after_orders")
    truth = _truth_mean(export_all, "after_orders")
    assert truth < 0 and realised < 0
    assert abs(realised - truth) < 4 * se


def test_none_variant_shows_no_difference_between_arms(export_none):
    outcomes = export_none.campaign_outcomes()
    for outcome in ("during_buyer", "during_orders", "after_orders"):
        realised, se = pooled_difference(outcomes, outcome)
        assert abs(realised) < 4 * se, outcome


def _post_order_ratio(export, days=21):
    """Sure things (coupon hazard ratio 1): orders in the `days` after their first in-window
    order, treatment redeemers over holdout in-window buyers. Both arms bought in the window with
    the same chance, so without a dip the ratio is about 1."""
    outcomes = export.campaign_outcomes().merge(
        export.uplift[["promotion_id", "customer_id", "uplift_group"]], on=["promotion_id", "customer_id"]
    )
    buyers = outcomes[(outcomes["uplift_group"] == "sure_thing") & outcomes["first_during_on"].notna()]
    pairs = buyers[["promotion_id", "customer_id", "arm", "first_during_on"]].merge(
        export.orders[["customer_id", "ordered_on"]], on="customer_id"
    )
    later = pairs[(pairs["ordered_on"] > pairs["first_during_on"]) & (pairs["ordered_on"] <= pairs["first_during_on"] + pd.Timedelta(days=days))]
    counts = later.groupby(["promotion_id", "customer_id"]).size()
    post = pd.Series(counts.reindex(list(zip(buyers["promotion_id"], buyers["customer_id"])), fill_value=0).to_numpy(), index=buyers.index)
    means = post.groupby(buyers["arm"]).mean()
    return means["T"] / means["H"], buyers["arm"].value_counts()


def test_redeemers_order_less_in_the_dip_window_than_comparable_holdout(export_all, export_none):
    dip_hr = export_all.truth["mechanisms"]["post_promotion_dip"]["post_promotion_dip_hr"]
    ratio, sizes = _post_order_ratio(export_all, days=export_all.truth["mechanisms"]["post_promotion_dip"]["dip_days"])
    assert sizes.min() > 100
    assert ratio < 0.75 and abs(ratio - dip_hr) < 0.2
    null_ratio, _ = _post_order_ratio(export_none)
    assert 0.8 < null_ratio < 1.3


def _anticipation_ratio(export):
    """Orders in the 7 days before each campaign start over the 7 days before those, for customers
    holding at least 2 coupons who did not redeem the previous campaign (so no dip runs).
    Pairs of weeks that touch the broadcast sale are left out."""
    promos = export.promotions
    targeted = promos[promos["audience"] == "targeted"].sort_values("starts_at").reset_index(drop=True)
    sale = promos[promos["audience"] == "broadcast"].iloc[0]
    assigned = export.assignments.merge(promos[["promotion_id", "starts_at"]], on="promotion_id")
    orders = export.orders
    near = far = 0
    for k in range(1, len(targeted)):
        start = targeted.loc[k, "starts_at"]
        low, high = start - pd.Timedelta(days=14), start - pd.Timedelta(days=1)
        if low <= sale["ends_at"] and sale["starts_at"] <= high:
            continue
        coupons = assigned[(assigned["arm"] == "T") & (assigned["starts_at"] < start)].groupby("customer_id").size()
        redeemed = set(orders.loc[orders["promo_code"] == targeted.loc[k - 1, "promotion_id"], "customer_id"])
        group = orders[orders["customer_id"].isin(set(coupons[coupons >= 2].index) - redeemed)]["ordered_on"]
        near += int(group.between(start - pd.Timedelta(days=7), high).sum())
        far += int(group.between(low, start - pd.Timedelta(days=8)).sum())
    return near / far, far


def test_experienced_customers_wait_before_a_campaign_only_when_anticipation_is_on(export_all, export_none):
    ratio, base = _anticipation_ratio(export_all)
    assert base > 1000
    assert ratio < 0.75
    null_ratio, _ = _anticipation_ratio(export_none)
    assert 0.85 < null_ratio < 1.17


def test_truth_features_are_what_the_export_shows(export_all):
    # recency_days and frequency in the truth table are read from the exported orders:
    # orders in the 365 days before the start, and days since the last of them.
    orders = export_all.orders
    pre = export_all.truth["scenario"]["pre_period_days"]
    for promo in export_all.promotions[export_all.promotions["audience"] == "targeted"].iloc[[0, 6, -1]].itertuples():
        window = orders[(orders["ordered_on"] >= promo.starts_at - pd.Timedelta(days=pre)) & (orders["ordered_on"] < promo.starts_at)]
        truth = export_all.uplift[export_all.uplift["promotion_id"] == promo.promotion_id].set_index("customer_id")
        frequency = window.groupby("customer_id").size().reindex(truth.index, fill_value=0)
        recency = (promo.starts_at - window.groupby("customer_id")["ordered_on"].max()).dt.days.reindex(truth.index)
        assert (frequency == truth["frequency"]).all()
        np.testing.assert_array_equal(recency.to_numpy(float), truth["recency_days"].to_numpy(float))
