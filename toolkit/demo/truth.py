"""The known truth of a demo scenario, computed from the generating process.

Every effect is an exact expectation under the process in ``hazard``, conditional on each
customer's state at the start of the campaign (or sale): their latent base rate, features, coupons
received and any running dip. The only path-dependence in the process is the post-promotion dip,
which starts after an order placed with a coupon; its state (days of dip left, 0..dip_days) is a
small Markov chain, so expected orders are found by propagating each customer's distribution over
that state day by day (no Monte Carlo noise). The chance of at least one order in a window is
``1 - exp(-sum of hazards)`` along the no-order path, on which the dip state is known.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .calendar import Calendar
from .hazard import full_price_learning, order_probability, purchase_hazard
from .population import Customers
from .scenario import Scenario
from .simulate import BroadcastStart, CampaignStart, Simulation


@dataclass(frozen=True)
class ExpectedOrders:
    """Per customer and day: expected orders, and the chance of no order from the first day so far."""

    orders: np.ndarray  # (customers, days)
    no_order_yet: np.ndarray  # (customers, days): P(no order on days 0..j)


def expected_orders(
    scenario: Scenario,
    *,
    rate: np.ndarray,
    day_factor: np.ndarray,
    active: np.ndarray,
    forced: np.ndarray,
    coupon_factor: np.ndarray,
    holding: np.ndarray,
    anticipating: np.ndarray,
    dip_days_left: np.ndarray,
) -> ExpectedOrders:
    """Propagate the dip-state distribution of each customer over a run of days.

    Parameters
    ----------
    scenario : Scenario
    rate : ndarray, shape (customers,)
        Latent base hazard.
    day_factor : ndarray, shape (days,)
        Season x broadcast factor of each day.
    active, forced, holding, anticipating : ndarray of bool, shape (customers, days)
        Customer is known; a welcome order is certain; holds a targeted coupon; anticipates.
    coupon_factor : ndarray, shape (customers, days)
        The coupon's hazard ratio on days the coupon is held, else 1.
    dip_days_left : ndarray of int, shape (customers,)
        Days of a running dip left on the first day (0 = none), at most ``dip_days``.

    Returns
    -------
    ExpectedOrders
    """
    n, span = active.shape
    dip = scenario.dip_days if scenario.has_dip else 0
    states = np.zeros((dip + 1, n))  # states[s, i]: chance customer i has s dip days left
    start_state = np.clip(dip_days_left, 0, dip)
    states[start_state, np.arange(n)] = 1.0
    path_state = start_state.copy()  # dip state on the no-order path, known exactly
    no_order = np.ones(n)
    orders = np.zeros((n, span))
    no_order_yet = np.zeros((n, span))
    for j in range(span):
        base = rate * day_factor[j] * active[:, j]
        q_free = order_probability(purchase_hazard(base, coupon_factor[:, j], anticipating[:, j], False, scenario))
        q_dip = order_probability(purchase_hazard(base, coupon_factor[:, j], anticipating[:, j], True, scenario))
        q_free = np.where(forced[:, j], 1.0, q_free)
        q_dip = np.where(forced[:, j], 1.0, q_dip)
        ordering = states * q_dip
        ordering[0] = states[0] * q_free
        orders[:, j] = ordering.sum(axis=0)
        no_order = no_order * (1.0 - np.where(path_state > 0, q_dip, q_free))
        no_order_yet[:, j] = no_order
        path_state = np.maximum(path_state - 1, 0)
        if dip:
            held = holding[:, j]
            stay = states - ordering * held  # an order with a coupon restarts the dip
            moved = np.empty_like(states)
            moved[0] = stay[0] + stay[1]
            moved[1:dip] = stay[2:]
            moved[dip] = orders[:, j] * held
            states = moved
    return ExpectedOrders(orders=orders, no_order_yet=no_order_yet)


def campaign_potential_outcomes(
    scenario: Scenario, calendar: Calendar, customers: Customers, start: CampaignStart, *, treated: bool
) -> dict[str, np.ndarray]:
    """Expected outcomes of every assigned customer of one campaign under one arm.

    Returns ``during_buyer`` (chance of at least one order in the window), ``during_orders``
    and ``after_orders`` (expected orders in the window and in the ``after_days`` after it).
    """
    campaign = calendar.campaigns[start.campaign]
    window = scenario.campaign_days
    span = window + scenario.after_days
    day_index = campaign.start_day + np.arange(span)
    members = start.members
    n = len(members)
    in_window = np.broadcast_to(np.arange(span) < window, (n, span))
    holding = in_window & treated
    coupon_factor = np.where(holding, start.coupon_hr[:, None], 1.0)
    coupons = start.coupons_before + (1 if treated else 0)
    anticipating = (
        calendar.anticipation_day[day_index][None, :]
        & (coupons >= scenario.anticipation_min_coupons)[:, None]
        & ~holding
    )
    if scenario.has_learning:  # learning counts the coupons before this campaign in both arms (no start in the span)
        coupon_factor = coupon_factor * full_price_learning(scenario, start.coupons_before)[:, None]
    first_day = customers.first_day[members][:, None]
    result = expected_orders(
        scenario,
        rate=customers.base_rate[members],
        day_factor=calendar.season[day_index] * calendar.broadcast_factor[day_index],
        active=first_day <= day_index[None, :],
        forced=customers.welcome_order[members][:, None] & (first_day == day_index[None, :]),
        coupon_factor=coupon_factor,
        holding=holding,
        anticipating=anticipating,
        dip_days_left=np.maximum(start.dip_until - campaign.start_day + 1, 0),
    )
    return {
        "during_buyer": 1.0 - result.no_order_yet[:, window - 1],
        "during_orders": result.orders[:, :window].sum(axis=1),
        "after_orders": result.orders[:, window:].sum(axis=1),
    }


def broadcast_expected_orders(
    scenario: Scenario,
    calendar: Calendar,
    customers: Customers,
    simulation: Simulation,
    start: BroadcastStart,
    *,
    with_sale: bool,
) -> tuple[np.ndarray, np.ndarray]:
    """Expected orders of every customer during a sale and in the ``after_days`` after it.

    Later campaigns that overlap the span keep their realised audiences and coupon hazard
    ratios in both arms (the truth is the sale's effect with targeting held fixed).
    """
    sale = calendar.broadcasts[start.broadcast]
    length = sale.end_day - sale.start_day + 1
    span = min(length + scenario.after_days, calendar.days - sale.start_day)
    day_index = sale.start_day + np.arange(span)
    n = len(customers)
    holding = np.zeros((n, span), dtype=bool)
    coupon_factor = np.ones((n, span))
    coupons = np.repeat(start.coupons[:, None], span, axis=1)
    for campaign_start in simulation.campaign_starts:
        campaign = calendar.campaigns[campaign_start.campaign]
        treated = campaign_start.members[campaign_start.treated]
        days_held = (day_index >= campaign.start_day) & (day_index <= campaign.end_day)
        if campaign.start_day > sale.start_day and campaign.start_day <= day_index[-1]:
            coupons[np.ix_(treated, day_index >= campaign.start_day)] += 1
        if days_held.any():
            holding[np.ix_(treated, days_held)] = True
            coupon_factor[np.ix_(treated, days_held)] = campaign_start.coupon_hr[campaign_start.treated][:, None]
    anticipating = calendar.anticipation_day[day_index][None, :] & (coupons >= scenario.anticipation_min_coupons) & ~holding
    if scenario.has_learning:
        # learning counts the coupons received before the latest campaign start (see simulate)
        learned = np.repeat(start.learned[:, None], span, axis=1)
        for campaign_start in simulation.campaign_starts:
            j = calendar.campaigns[campaign_start.campaign].start_day - sale.start_day
            if 0 < j < span:
                learned[:, j:] = coupons[:, j - 1][:, None]
        coupon_factor = coupon_factor * full_price_learning(scenario, learned)
    factor = calendar.season[day_index] * (calendar.broadcast_factor[day_index] if with_sale else 1.0)
    first_day = customers.first_day[:, None]
    result = expected_orders(
        scenario,
        rate=customers.base_rate,
        day_factor=factor,
        active=first_day <= day_index[None, :],
        forced=customers.welcome_order[:, None] & (first_day == day_index[None, :]),
        coupon_factor=coupon_factor,
        holding=holding,
        anticipating=anticipating,
        dip_days_left=np.maximum(start.dip_until - sale.start_day + 1, 0),
    )
    return result.orders[:, :length].sum(axis=1), result.orders[:, length:].sum(axis=1)


def build_truth(
    scenario: Scenario, calendar: Calendar, customers: Customers, simulation: Simulation
) -> tuple[list[dict], list[dict], pd.DataFrame]:
    """Per-campaign truth, per-sale truth and the per-customer uplift table."""
    campaigns: list[dict] = []
    tables: list[pd.DataFrame] = []
    for start in simulation.campaign_starts:
        promo = calendar.campaigns[start.campaign]
        arm_t = campaign_potential_outcomes(scenario, calendar, customers, start, treated=True)
        arm_h = campaign_potential_outcomes(scenario, calendar, customers, start, treated=False)
        entry: dict = {
            "promotion_id": promo.promotion_id,
            "starts_on": promo.starts_on.isoformat(),
            "ends_on": promo.ends_on.isoformat(),
            "depth": promo.depth,
            "assigned": int(len(start.members)),
            "treated": int(start.treated.sum()),
            "holdout": int((~start.treated).sum()),
        }
        entry["holdout_share_realised"] = _round(entry["holdout"] / max(entry["assigned"], 1))
        for outcome in ("during_buyer", "during_orders", "after_orders"):
            entry[outcome] = _contrast(arm_t[outcome], arm_h[outcome])
        total_t = arm_t["during_orders"] + arm_t["after_orders"]
        total_h = arm_h["during_orders"] + arm_h["after_orders"]
        entry["total_orders"] = _contrast(total_t, total_h)
        during_effect = float(np.mean(arm_t["during_orders"] - arm_h["during_orders"]))
        after_effect = float(np.mean(arm_t["after_orders"] - arm_h["after_orders"]))
        entry["pull_forward_share"] = _round(-after_effect / during_effect) if during_effect > 0 else None
        groups, counts = np.unique(start.uplift_group.astype(str), return_counts=True)
        entry["uplift_groups"] = {str(g): int(c) for g, c in zip(groups, counts)}
        campaigns.append(entry)
        tables.append(
            pd.DataFrame(
                {
                    "promotion_id": promo.promotion_id,
                    "customer_id": customers.customer_id[start.members],
                    "arm": np.where(start.treated, "treatment", "holdout"),
                    "true_uplift_buyer": arm_t["during_buyer"] - arm_h["during_buyer"],
                    "buyer_prob_treatment": arm_t["during_buyer"],
                    "buyer_prob_holdout": arm_h["during_buyer"],
                    "true_uplift_orders_during": arm_t["during_orders"] - arm_h["during_orders"],
                    "true_uplift_orders_after": arm_t["after_orders"] - arm_h["after_orders"],
                    "coupon_hazard_ratio": start.coupon_hr,
                    "uplift_group": start.uplift_group.astype(str),
                    "recency_days": start.recency_days,
                    "frequency": start.frequency.astype(np.int64),
                    "coupons_before": start.coupons_before.astype(np.int64),
                }
            )
        )

    broadcasts: list[dict] = []
    for start in simulation.broadcast_starts:
        promo = calendar.broadcasts[start.broadcast]
        during_sale, after_sale = broadcast_expected_orders(scenario, calendar, customers, simulation, start, with_sale=True)
        during_none, after_none = broadcast_expected_orders(scenario, calendar, customers, simulation, start, with_sale=False)
        broadcasts.append(
            {
                "promotion_id": promo.promotion_id,
                "starts_on": promo.starts_on.isoformat(),
                "ends_on": promo.ends_on.isoformat(),
                "depth": promo.depth,
                "hazard_ratio": scenario.broadcast_hr,
                "customers_known": int((customers.first_day <= promo.end_day).sum()),
                "during_orders": _sale_contrast(during_sale, during_none),
                "after_orders": _sale_contrast(after_sale, after_none),
                "total_orders": _sale_contrast(during_sale + after_sale, during_none + after_none),
            }
        )
    table = pd.concat(tables, ignore_index=True) if tables else pd.DataFrame()
    return campaigns, broadcasts, table


def _contrast(treatment: np.ndarray, holdout: np.ndarray) -> dict:
    """Means under each arm over the assigned customers, and their difference."""
    return {
        "treatment_mean": _round(float(np.mean(treatment))),
        "holdout_mean": _round(float(np.mean(holdout))),
        "effect": _round(float(np.mean(treatment - holdout))),
    }


def _sale_contrast(with_sale: np.ndarray, without_sale: np.ndarray) -> dict:
    """Expected totals over all customers with and without the sale, and the increment."""
    return {
        "actual_expected": _round(float(with_sale.sum())),
        "counterfactual_expected": _round(float(without_sale.sum())),
        "incremental": _round(float((with_sale - without_sale).sum())),
    }


def _round(value: float) -> float:
    return round(float(value), 6)
