"""The day-by-day purchase simulation, vectorised over customers.

Each day every known customer orders with probability ``1 - exp(-hazard)`` (see ``hazard``).
At each targeted campaign's assignment the customers' recency and frequency are read from the
orders simulated so far, exactly as a panel built from the export would read them, and set the
coupon's hazard ratio. The state at each campaign and sale start is kept for the truth.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .calendar import Calendar
from .hazard import coupon_hazard_ratio, coupon_learning, full_price_learning, order_probability, purchase_hazard
from .population import Customers
from .scenario import Scenario

_NEVER = -(10**9)


@dataclass(frozen=True)
class CampaignStart:
    """The assigned customers of one targeted campaign and their state on its first day."""

    campaign: int
    members: np.ndarray  # customer indices, ascending
    treated: np.ndarray  # bool per member
    recency_days: np.ndarray  # float, NaN when no order in the pre-period
    frequency: np.ndarray  # orders in the pre-period
    coupon_hr: np.ndarray
    uplift_group: np.ndarray
    coupons_before: np.ndarray  # coupons received from earlier campaigns
    dip_until: np.ndarray  # last day of a running dip (from an earlier coupon order), or very negative


@dataclass(frozen=True)
class BroadcastStart:
    """Every customer's state on a broadcast sale's first day."""

    broadcast: int
    dip_until: np.ndarray
    coupons: np.ndarray
    learned: np.ndarray | None = None  # coupons the full-price learning counts (see simulate)


@dataclass(frozen=True)
class Simulation:
    """Simulated orders (one per customer-day at most) and the states kept for the truth.

    ``order_promotion`` indexes the campaigns first, then the broadcasts; -1 means full price.
    """

    order_customer: np.ndarray
    order_day: np.ndarray
    order_promotion: np.ndarray
    campaign_starts: tuple[CampaignStart, ...]
    broadcast_starts: tuple[BroadcastStart, ...]


def simulate(
    scenario: Scenario,
    calendar: Calendar,
    customers: Customers,
    *,
    purchase_rng: np.random.Generator,
    assignment_rng: np.random.Generator,
) -> Simulation:
    """Run the purchase process over every day of the history."""
    n = len(customers)
    n_campaigns = len(calendar.campaigns)
    rate = customers.base_rate
    first_day = customers.first_day
    welcome = customers.welcome_order

    dip_until = np.full(n, _NEVER, dtype=np.int64)
    coupons = np.zeros(n, dtype=np.int64)
    # Coupons the full-price learning counts: those received before the latest campaign start (a
    # coupon teaches from the next campaign on, so a campaign's own window and after-window show
    # no learning contrast between its arms).
    learned = np.zeros(n, dtype=np.int64)
    holding = np.full(n, -1, dtype=np.int64)
    coupon_factor = np.ones(n)
    last_order = np.full(n, _NEVER, dtype=np.int64)

    starts = {c.start_day: k for k, c in enumerate(calendar.campaigns)}
    ends = {c.end_day: k for k, c in enumerate(calendar.campaigns)}
    broadcast_starts_on = {b.start_day: k for k, b in enumerate(calendar.broadcasts)}

    orders_by_day: list[np.ndarray] = []
    promo_by_day: list[np.ndarray] = []
    campaign_starts: list[CampaignStart] = []
    broadcast_starts: list[BroadcastStart] = []

    for day in range(calendar.days):
        if day in starts:
            k = starts[day]
            start = _start_campaign(scenario, k, day, customers, orders_by_day, last_order, coupons, dip_until, assignment_rng)
            campaign_starts.append(start)
            learned = coupons.copy()
            treated = start.members[start.treated]
            holding[treated] = k
            coupon_factor[treated] = start.coupon_hr[start.treated]
            coupons[treated] += 1
        if day in broadcast_starts_on:
            broadcast_starts.append(BroadcastStart(broadcast_starts_on[day], dip_until.copy(), coupons.copy(),
                                                   learned.copy()))

        base = rate * (calendar.season[day] * calendar.broadcast_factor[day]) * (first_day <= day)
        if scenario.has_learning:
            base = base * full_price_learning(scenario, learned)
        anticipating = calendar.anticipation_day[day] & (coupons >= scenario.anticipation_min_coupons) & (holding < 0)
        hazard = purchase_hazard(base, coupon_factor, anticipating, dip_until >= day, scenario)
        ordered = purchase_rng.random(n) < order_probability(hazard)
        ordered |= welcome & (first_day == day)
        who = np.flatnonzero(ordered)

        held = holding[who]
        sale = calendar.broadcast_index[day]
        promo = np.where(held >= 0, held, n_campaigns + sale if sale >= 0 else -1)
        dip_until[who[held >= 0]] = day + scenario.dip_days
        last_order[who] = day
        orders_by_day.append(who)
        promo_by_day.append(promo)

        if day in ends:
            finished = holding == ends[day]
            holding[finished] = -1
            coupon_factor[finished] = 1.0

    counts = np.array([len(w) for w in orders_by_day])
    return Simulation(
        order_customer=np.concatenate(orders_by_day),
        order_day=np.repeat(np.arange(calendar.days), counts),
        order_promotion=np.concatenate(promo_by_day).astype(np.int64),
        campaign_starts=tuple(campaign_starts),
        broadcast_starts=tuple(broadcast_starts),
    )


def _start_campaign(
    scenario: Scenario,
    campaign: int,
    day: int,
    customers: Customers,
    orders_by_day: list[np.ndarray],
    last_order: np.ndarray,
    coupons: np.ndarray,
    dip_until: np.ndarray,
    rng: np.random.Generator,
) -> CampaignStart:
    """Select the campaign's audience, randomise the holdout, and read the features."""
    n = len(customers)
    select_draw = rng.random(n)
    arm_draw = rng.random(n)
    eligible = customers.first_day < day - scenario.assign_lead_days  # known before the assignment
    members = np.flatnonzero(eligible & (select_draw < scenario.audience_share))
    treated = arm_draw[members] >= scenario.holdout_share

    low = max(day - scenario.pre_period_days, 0)
    window = orders_by_day[low:day]
    history = np.concatenate(window) if window else np.zeros(0, dtype=np.int64)
    frequency = np.bincount(history, minlength=n)[members]
    last = last_order[members]
    recency = np.where(last >= day - scenario.pre_period_days, day - last, np.nan).astype(float)

    ratio, group = coupon_hazard_ratio(
        scenario,
        household_garden=customers.household_garden[members],
        signup_channel=customers.signup_channel[members],
        recency_days=recency,
        frequency=frequency,
    )
    if scenario.has_learning:  # customers the coupon attracts respond more; sure things and do-not-disturb keep theirs
        ratio = np.where(ratio > 1.0, ratio * coupon_learning(scenario, coupons[members]), ratio)
    return CampaignStart(
        campaign=campaign,
        members=members,
        treated=treated,
        recency_days=recency,
        frequency=frequency,
        coupon_hr=ratio,
        uplift_group=group,
        coupons_before=coupons[members].copy(),
        dip_until=dip_until[members].copy(),
    )
