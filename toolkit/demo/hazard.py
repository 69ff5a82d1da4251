"""The purchase hazard of the demo process: one place that both the simulation and the truth use.

A customer's chance of ordering on a day is ``1 - exp(-hazard)`` (at most one order a day), with

    hazard = base_rate x season(day) x broadcast(day)
             x coupon_hazard_ratio        while holding a targeted coupon (treatment, in window)
             x anticipation_hr            on anticipation days, if coupons received >= minimum
                                          and no coupon is held
             x post_promotion_dip_hr      for dip_days days after an order placed with a coupon
             x full_price_learning(coupons received)   customers learn to wait for deals

and a campaign's coupon hazard ratio is multiplied by ``coupon_learning(coupons received before
it)`` (see ``Scenario.learning_*``).
"""

from __future__ import annotations

import numpy as np

from .scenario import Scenario

UPLIFT_GROUPS = ("do_not_disturb", "sure_thing", "recent_infrequent_garden", "recent_infrequent", "garden", "base")


def coupon_hazard_ratio(
    scenario: Scenario,
    *,
    household_garden: np.ndarray,
    signup_channel: np.ndarray,
    recency_days: np.ndarray,
    frequency: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """The factor a targeted coupon puts on each customer's hazard, and the rule group behind it.

    Parameters
    ----------
    scenario : Scenario
    household_garden : ndarray of int
        The customer flag (1 = has a garden).
    signup_channel : ndarray of str
    recency_days : ndarray of float
        Days from the last order before the campaign start to the start; NaN when none.
    frequency : ndarray of int
        Orders in the ``pre_period_days`` before the start.

    Returns
    -------
    hazard_ratio : ndarray of float
    group : ndarray of str
        One of ``UPLIFT_GROUPS``. Precedence: do_not_disturb, then sure_thing, then the
        multiplicative responsive groups.
    """
    garden = np.asarray(household_garden) == 1
    recent_infrequent = (
        ~np.isnan(recency_days)
        & (np.nan_to_num(recency_days, nan=np.inf) <= scenario.recent_days)
        & (frequency >= 1)
        & (frequency <= scenario.infrequent_max_orders)
    )
    sure_thing = frequency >= scenario.sure_thing_min_orders
    do_not_disturb = np.asarray(signup_channel) == scenario.do_not_disturb_channel

    ratio = np.full(len(frequency), scenario.uplift_base_hr)
    ratio = np.where(garden, ratio * scenario.uplift_garden_hr, ratio)
    ratio = np.where(recent_infrequent, ratio * scenario.uplift_recent_infrequent_hr, ratio)
    ratio = np.where(sure_thing, 1.0, ratio)
    ratio = np.where(do_not_disturb, scenario.do_not_disturb_hr, ratio)

    group = np.where(
        recent_infrequent & garden,
        "recent_infrequent_garden",
        np.where(recent_infrequent, "recent_infrequent", np.where(garden, "garden", "base")),
    )
    group = np.where(sure_thing, "sure_thing", group)
    group = np.where(do_not_disturb, "do_not_disturb", group)
    return ratio, group.astype(object)


def purchase_hazard(
    base: np.ndarray,
    coupon_factor: np.ndarray | float,
    anticipating: np.ndarray | bool,
    dipping: np.ndarray | bool,
    scenario: Scenario,
) -> np.ndarray:
    """Combine the day's base hazard with the coupon, anticipation and dip factors."""
    hazard = base * coupon_factor
    if scenario.has_anticipation:
        hazard = np.where(anticipating, hazard * scenario.anticipation_hr, hazard)
    if scenario.has_dip:
        hazard = np.where(dipping, hazard * scenario.post_promotion_dip_hr, hazard)
    return hazard


def order_probability(hazard: np.ndarray) -> np.ndarray:
    """Chance of at least one order on a day with this hazard: ``1 - exp(-hazard)``."""
    return -np.expm1(-hazard)


def full_price_learning(scenario: Scenario, coupons: np.ndarray) -> np.ndarray:
    """Factor on every day's hazard of a customer who has received ``coupons`` coupons (1 without learning)."""
    capped = np.minimum(np.asarray(coupons, dtype=float), scenario.learning_cap)
    return np.exp(-scenario.learning_full_price_per_coupon * capped)


def coupon_learning(scenario: Scenario, coupons_before: np.ndarray) -> np.ndarray:
    """Factor on a coupon's hazard ratio for a customer who received ``coupons_before`` coupons before it."""
    capped = np.minimum(np.asarray(coupons_before, dtype=float), scenario.learning_cap)
    return np.exp(scenario.learning_coupon_per_coupon * capped)
