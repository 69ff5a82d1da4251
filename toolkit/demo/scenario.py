"""The demo scenario's parameters: one frozen dataclass, and the ``effects`` variants.

Every number that shapes the invented retailer (Fernwick Home & Garden) lives here, so that the
truth file can state the parameters the data came from and a test can switch mechanisms off.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from dataclasses import dataclass
from datetime import date
from typing import Any

from ..errors import ConfigError

EFFECTS = ("all", "uplift_only", "none", "stationary", "learning")
"""The scenario variants.

``all``: every mechanism on. ``uplift_only``: the coupon and the broadcast sale still raise the
purchase hazard, but there is no post-promotion dip and no anticipation (a data set on which a
timing analysis must find nothing). ``none``: no mechanism at all; coupons and the sale change no
one's behaviour (an A/A data set on which every effect must come out null). ``stationary``: coupons
and the sale work as in ``all``, but nothing changes from one year to the next: no learning, no
new customers, one campaign a quarter on the same dates each year, a coupon response that does
not depend on the customer's purchase history, no anticipation (a data set on which the long-run
drift analyses must find nothing). ``learning``: ``all``, and customers learn from the coupons
they receive: their full-price hazard falls and their response to the next coupon rises, so
discount dependence rises over the quarters (``LEARNING`` gives the rates).
"""

#: The learning rates of the ``learning`` variant (per coupon received).
LEARNING = {"learning_full_price_per_coupon": 0.03, "learning_coupon_per_coupon": 0.15}


CALENDARS = ("regular", "irregular", "seasonal")
"""Calendar variants (:meth:`Scenario.for_variant`), each combinable with any of ``EFFECTS``.

``regular``: the default demo (a campaign every ``cadence_days`` from a Monday). ``irregular``:
campaigns from a Wednesday, 43 to 57 days apart (no fixed cadence), one period skipped (a 112-day
gap) and one extra campaign squeezed in 43 days after another. ``seasonal``: the regular calendar
with stronger yearly and weekly seasonality and a dip in everyone's purchases in the 7 days
before each campaign start (a calendar effect shared by all customers, which an anticipation
estimate must not mistake for customers waiting for the coupon).
"""

_CALENDAR_OVERRIDES: dict[str, dict[str, Any]] = {
    "regular": {},
    "irregular": {
        "first_campaign_on": date(2025, 2, 5),
        "campaign_start_offsets": (0, 52, 97, 151, 263, 306, 357, 410, 458, 515),
    },
    "seasonal": {
        "spring_peak_height": 1.2,
        "december_peak_height": 0.8,
        "december_peak_width": 14.0,
        "weekday_factors": (1.2, 1.0, 0.9, 0.85, 0.85, 1.05, 1.4),
        "pre_start_season_hr": 0.75,
    },
}


@dataclass(frozen=True)
class Scenario:
    """Parameters of the demo retailer and of its purchase process.

    Parameters
    ----------
    starts_on, ends_on : datetime.date
        First and last day of the order history.
    existing_share : float, default=0.65
        Share of customers first seen before ``starts_on`` (between ``existing_since`` and then).
    new_until : datetime.date
        The last day a new customer can be first seen.
    welcome_order_share : float, default=0.7
        Share of new customers who place an order on the day they are first seen.
    household_garden_share : float, default=0.4
        Share of customers with the ``household_garden`` flag.
    base_rate_mean : float, default=0.0165
        Mean baseline purchase hazard (orders per day, before seasonality).
    base_rate_shape : float, default=1.1
        Gamma shape of the baseline hazard across customers (smaller is more skewed).
    spring_peak_height, spring_peak_day, spring_peak_width : float
        Seasonality: a Gaussian bump in day-of-year (garden season).
    december_peak_height, december_peak_day, december_peak_width : float
        Seasonality: a second bump before the holidays.
    weekday_factors : tuple of float
        Monday..Sunday hazard factors (normalised to mean 1).
    products : int, default=300
        Number of products (the category mix is fixed, the count is scaled).
    mean_extra_lines : float, default=1.4
        Lines per order are 1 + Poisson(mean_extra_lines), capped at ``max_lines``.
    mean_extra_quantity : float, default=0.3
        Quantity per line is 1 + Poisson(mean_extra_quantity).
    return_line_share : float, default=0.03
        Share of purchase lines later partly or wholly returned (a negative line in the same basket).
    first_campaign_on : datetime.date
        Start of the first targeted campaign; the others follow every ``cadence_days``.
    cadence_days, campaign_days : int
        Days between campaign starts; days each campaign runs (inclusive window).
    depths : tuple of float
        Percent-off depths a campaign draws from.
    audience_share : float, default=0.6
        Share of the customers known before the assignment day that each campaign selects.
    holdout_share : float, default=0.2
        Probability that a selected customer is put in the holdout (independent per customer).
    assign_lead_days : int, default=2
        Assignments are made this many days before the campaign starts.
    cost_per_redemption : float, default=0.4
        Cost recorded per redemption for targeted campaigns (EUR).
    broadcast_starts_on : datetime.date
        First day of the broadcast sale.
    broadcast_days : int, default=7
    broadcast_depth : float, default=0.2
    broadcast_hr : float, default=1.8
        Factor on every customer's purchase hazard while the sale runs.
    uplift_base_hr : float, default=1.3
        Coupon hazard ratio of a customer who falls in no special group.
    uplift_garden_hr : float, default=1.6
        Extra factor for ``household_garden`` customers.
    uplift_recent_infrequent_hr : float, default=2.0
        Extra factor for recent-but-infrequent buyers: last order at most ``recent_days`` before
        the campaign starts and at most ``infrequent_max_orders`` orders in the pre-period.
    recent_days, infrequent_max_orders : int
    sure_thing_min_orders : int, default=10
        Customers with at least this many pre-period orders are sure things: coupon hazard ratio 1.
    do_not_disturb_channel : str, default="marketplace"
        Customers who signed up through this channel are put off by a coupon.
    do_not_disturb_hr : float, default=0.6
        Their coupon hazard ratio.
    post_promotion_dip_hr : float, default=0.5
        Factor on the hazard for ``dip_days`` days after each order placed with a targeted coupon.
    dip_days : int, default=21
    anticipation_hr : float, default=0.6
        Factor on the full-price hazard in the ``anticipation_days`` days before each scheduled
        campaign start, for customers who have received at least ``anticipation_min_coupons``
        coupons (treatment assignments of campaigns already started).
    anticipation_days, anticipation_min_coupons : int
    learning_full_price_per_coupon : float, default=0.0
        Customers learn to wait for deals: every day's purchase hazard is multiplied by
        ``exp(-learning_full_price_per_coupon x min(coupons learned, learning_cap))`` (coupons
        learned: treatment assignments received before the latest campaign start, so a coupon
        teaches from the next campaign on). 0 switches it off.
    learning_coupon_per_coupon : float, default=0.0
        ... and respond more to a coupon: a campaign's coupon hazard ratio, where above 1, is
        multiplied by ``exp(learning_coupon_per_coupon x min(coupons received before it,
        learning_cap))`` (sure things and do-not-disturb customers keep theirs).
    learning_cap : int, default=10
    welcome_offer_starts_on, welcome_offer_ends_on : datetime.date
        Days on which a new customer's welcome order may use the sign-up offer (a discount code
        with no promotion id in the export).
    welcome_offer_share : float, default=0.8
        Share of the welcome orders placed in that span that use the offer: those customers are
        deal-acquired.
    welcome_offer_depth : float, default=0.15
        Fraction off the welcome order.
    welcome_offer_rate_factor : float, default=0.5
        Factor on a deal-acquired customer's baseline hazard (the offer brings in customers who
        buy less often afterwards); 1 in the ``none`` variant.
    pre_period_days, after_days : int
        Pre-period used for the recency/frequency features; days after a campaign window over
        which the truth measures pull-forward.
    campaign_start_offsets : tuple of int, default=()
        Days from ``first_campaign_on`` to each campaign's start, for a calendar off any fixed
        cadence; empty: a campaign every ``cadence_days``.
    pre_start_season_hr : float, default=1.0
        Factor on every customer's hazard (coupon or not) in the ``pre_start_season_days`` days
        before each campaign start: a calendar effect shared by everyone, not anticipation.
    pre_start_season_days : int, default=7
    """

    starts_on: date = date(2025, 1, 1)
    ends_on: date = date(2026, 9, 30)
    existing_share: float = 0.65
    existing_since: date = date(2022, 1, 1)
    new_until: date = date(2026, 8, 31)
    welcome_order_share: float = 0.7
    household_garden_share: float = 0.4
    regions: tuple[str, ...] = ("north", "south", "east", "west", "central")
    region_weights: tuple[float, ...] = (0.22, 0.26, 0.18, 0.16, 0.18)
    signup_channels: tuple[str, ...] = ("web", "app", "social", "referral", "marketplace")
    signup_weights: tuple[float, ...] = (0.42, 0.25, 0.14, 0.11, 0.08)
    base_rate_mean: float = 0.0165
    base_rate_shape: float = 1.1
    spring_peak_height: float = 0.6
    spring_peak_day: float = 125.0
    spring_peak_width: float = 35.0
    december_peak_height: float = 0.35
    december_peak_day: float = 345.0
    december_peak_width: float = 10.0
    weekday_factors: tuple[float, ...] = (1.05, 1.0, 0.95, 0.95, 0.9, 1.0, 1.15)
    products: int = 300
    mean_extra_lines: float = 1.4
    max_lines: int = 8
    mean_extra_quantity: float = 0.3
    return_line_share: float = 0.03
    first_campaign_on: date = date(2025, 2, 17)
    cadence_days: int = 42
    campaign_days: int = 10
    depths: tuple[float, ...] = (0.10, 0.15, 0.20, 0.25)
    audience_share: float = 0.6
    holdout_share: float = 0.2
    assign_lead_days: int = 2
    cost_per_redemption: float = 0.4
    broadcast_starts_on: date = date(2025, 11, 21)
    broadcast_days: int = 7
    broadcast_depth: float = 0.2
    broadcast_hr: float = 1.8
    uplift_base_hr: float = 1.3
    uplift_garden_hr: float = 1.6
    uplift_recent_infrequent_hr: float = 2.0
    recent_days: int = 60
    infrequent_max_orders: int = 3
    sure_thing_min_orders: int = 10
    do_not_disturb_channel: str = "marketplace"
    do_not_disturb_hr: float = 0.6
    post_promotion_dip_hr: float = 0.5
    dip_days: int = 21
    anticipation_hr: float = 0.6
    anticipation_days: int = 7
    anticipation_min_coupons: int = 2
    learning_full_price_per_coupon: float = 0.0
    learning_coupon_per_coupon: float = 0.0
    learning_cap: int = 10
    pre_period_days: int = 365
    after_days: int = 28
    margin_rate: float = 0.38
    campaign_start_offsets: tuple[int, ...] = ()
    pre_start_season_hr: float = 1.0
    pre_start_season_days: int = 7
    welcome_offer_starts_on: date = date(2025, 4, 1)
    welcome_offer_ends_on: date = date(2025, 6, 30)
    welcome_offer_share: float = 0.8
    welcome_offer_depth: float = 0.15
    welcome_offer_rate_factor: float = 0.5

    @classmethod
    def for_effects(cls, effects: str = "all", **overrides: Any) -> "Scenario":
        """The scenario of one variant, with any parameter overridden by keyword.

        Parameters
        ----------
        effects : {"all", "uplift_only", "none", "stationary", "learning"}, default="all"
            ``uplift_only`` sets the dip and anticipation hazard ratios to 1 and their day counts
            to 0 (and switches learning off); ``none`` also sets every coupon and broadcast hazard
            ratio, and the welcome offer's rate factor, to 1; ``stationary`` and ``learning`` are described in
            :data:`EFFECTS`.
        **overrides
            Any field of :class:`Scenario`.

        Examples
        --------
        >>> Scenario.for_effects("none").post_promotion_dip_hr
        1.0
        """
        if effects not in EFFECTS:
            raise ConfigError(f"demo effects must be one of {', '.join(EFFECTS)}, found {effects!r}")
        unknown = sorted(set(overrides) - {f.name for f in dataclasses.fields(cls)})
        if unknown:
            raise ConfigError(f"unknown demo scenario parameter(s) {', '.join(unknown)}; see toolkit.demo.Scenario")
        values: dict[str, Any] = {}
        if effects in ("uplift_only", "none"):
            values.update(post_promotion_dip_hr=1.0, dip_days=0, anticipation_hr=1.0, anticipation_days=0)
        if effects == "learning":
            values.update(LEARNING)
        if effects == "stationary":
            values.update(
                existing_share=1.0,                # no new customers: the base does not grow or age
                cadence_days=91,                   # one campaign a quarter, on about the same dates each year
                first_campaign_on=date(2025, 2, 3),  # (ending before the broadcast sale)
                depths=(0.2,),                     # every campaign as deep as the last
                uplift_recent_infrequent_hr=1.0,   # the coupon response does not depend on the history,
                sure_thing_min_orders=10**6,       # which the export's start truncates
                anticipation_hr=1.0,               # anticipation needs coupons received: it would grow
                anticipation_days=0,
            )
        if effects == "none":
            values.update(
                uplift_base_hr=1.0,
                uplift_garden_hr=1.0,
                uplift_recent_infrequent_hr=1.0,
                do_not_disturb_hr=1.0,
                broadcast_hr=1.0,
                welcome_offer_rate_factor=1.0,
            )
        values.update(overrides)
        scenario = cls(**values)
        scenario.validate()
        return scenario

    @classmethod
    def for_variant(cls, effects: str = "all", calendar: str = "regular", **overrides: Any) -> "Scenario":
        """The scenario of an effects variant on a calendar variant (see ``EFFECTS`` and ``CALENDARS``).

        Examples
        --------
        >>> Scenario.for_variant("uplift_only", "irregular").campaign_start_offsets[:3]
        (0, 52, 97)
        """
        if calendar not in CALENDARS:
            raise ConfigError(f"demo calendar must be one of {', '.join(CALENDARS)}, found {calendar!r}")
        return cls.for_effects(effects, **{**_CALENDAR_OVERRIDES[calendar], **overrides})

    def validate(self) -> None:
        """Raise ConfigError naming the first parameter that cannot be simulated."""
        if self.ends_on <= self.starts_on:
            raise ConfigError(f"demo scenario: ends_on {self.ends_on} must be after starts_on {self.starts_on}")
        for name in ("existing_share", "welcome_order_share", "household_garden_share", "audience_share",
                     "holdout_share", "return_line_share", "welcome_offer_share", "welcome_offer_depth"):
            value = getattr(self, name)
            if not 0.0 <= value <= 1.0:
                raise ConfigError(f"demo scenario: {name} must be between 0 and 1, found {value!r}")
        for name in ("base_rate_mean", "base_rate_shape", "broadcast_hr", "uplift_base_hr", "uplift_garden_hr",
                     "uplift_recent_infrequent_hr", "do_not_disturb_hr", "post_promotion_dip_hr", "anticipation_hr",
                     "welcome_offer_rate_factor"):
            value = getattr(self, name)
            if not value > 0:
                raise ConfigError(f"demo scenario: {name} must be positive, found {value!r}")
        for name in ("learning_full_price_per_coupon", "learning_coupon_per_coupon", "learning_cap"):
            if getattr(self, name) < 0:
                raise ConfigError(f"demo scenario: {name} must be 0 or more, found {getattr(self, name)!r}")
        for name in ("dip_days", "anticipation_days", "after_days", "pre_period_days"):
            if getattr(self, name) < 0:
                raise ConfigError(f"demo scenario: {name} must be 0 or more, found {getattr(self, name)!r}")
        if self.campaign_days < 1 or self.cadence_days < self.campaign_days + self.after_days:
            raise ConfigError(
                f"demo scenario: cadence_days ({self.cadence_days}) must leave room for campaign_days "
                f"({self.campaign_days}) + after_days ({self.after_days}) so windows do not overlap"
            )
        offsets = self.campaign_start_offsets
        if offsets and (offsets[0] < 0 or any(b - a < self.campaign_days for a, b in zip(offsets, offsets[1:]))):
            raise ConfigError(
                f"demo scenario: campaign_start_offsets {offsets!r} must start at 0 or later and be at least "
                f"campaign_days ({self.campaign_days}) apart, in increasing order"
            )
        if not self.pre_start_season_hr > 0 or self.pre_start_season_days < 0:
            raise ConfigError("demo scenario: pre_start_season_hr must be positive and pre_start_season_days 0 or more")
        if len(self.regions) != len(self.region_weights) or len(self.signup_channels) != len(self.signup_weights):
            raise ConfigError("demo scenario: regions/signup_channels and their weights must have equal lengths")
        if len(self.weekday_factors) != 7:
            raise ConfigError(f"demo scenario: weekday_factors needs 7 values (Monday..Sunday), found {len(self.weekday_factors)}")
        if self.products < 20:
            raise ConfigError(f"demo scenario: products must be at least 20, found {self.products}")

    @property
    def has_dip(self) -> bool:
        return self.dip_days > 0 and self.post_promotion_dip_hr != 1.0

    @property
    def has_anticipation(self) -> bool:
        return self.anticipation_days > 0 and self.anticipation_hr != 1.0

    @property
    def has_learning(self) -> bool:
        return self.learning_full_price_per_coupon > 0 or self.learning_coupon_per_coupon > 0

    @property
    def has_uplift(self) -> bool:
        return any(
            v != 1.0
            for v in (self.uplift_base_hr, self.uplift_garden_hr, self.uplift_recent_infrequent_hr, self.do_not_disturb_hr)
        )

    def to_dict(self) -> dict[str, Any]:
        """Every parameter as JSON-ready values (dates as ISO text, tuples as lists)."""
        out: dict[str, Any] = {}
        for f in dataclasses.fields(self):
            value = getattr(self, f.name)
            if isinstance(value, date):
                value = value.isoformat()
            elif isinstance(value, tuple):
                value = list(value)
            out[f.name] = value
        return out

    def fingerprint(self) -> str:
        """A short hash of every parameter; equal fingerprints mean equal scenarios."""
        text = json.dumps(self.to_dict(), sort_keys=True)
        return hashlib.sha256(text.encode()).hexdigest()[:16]
