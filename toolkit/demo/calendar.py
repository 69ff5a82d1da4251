"""The demo's calendar: days, seasonality, and the promotion schedule.

Days are counted from ``Scenario.starts_on`` (day 0). Every per-day factor of the purchase
hazard that is the same for all customers is built here once.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, timedelta

import numpy as np

from .scenario import Scenario

_THEMES = {
    1: "New Year Home Refresh",
    2: "Seed Starter",
    3: "Spring Planting",
    4: "Spring Planting",
    5: "Patio Ready",
    6: "Summer Garden",
    7: "Outdoor Living",
    8: "Late Summer Harvest",
    9: "Autumn Bulbs",
    10: "Cosy Home",
    11: "Winter Prep",
    12: "Festive Home",
}


@dataclass(frozen=True)
class Promotion:
    """One promotion of the schedule; ``start_day``/``end_day`` are inclusive day indices."""

    promotion_id: str
    starts_on: date
    ends_on: date
    start_day: int
    end_day: int
    depth: float
    audience: str
    cost_per_redemption: float
    name: str


@dataclass(frozen=True)
class Calendar:
    """Per-day factors and the promotions, for one scenario.

    Attributes
    ----------
    days : int
        Number of days in the history.
    season : ndarray
        Seasonality times weekday factor per day (mean about 1 over a year).
    broadcast_factor : ndarray
        Hazard factor of the broadcast sale per day (1 outside it).
    broadcast_index : ndarray
        Index into ``broadcasts`` of the sale running per day, -1 when none.
    anticipation_day : ndarray of bool
        Day lies in the ``anticipation_days`` before a scheduled campaign start.
    campaigns, broadcasts : tuple of Promotion
    """

    starts_on: date
    days: int
    season: np.ndarray
    broadcast_factor: np.ndarray
    broadcast_index: np.ndarray
    anticipation_day: np.ndarray
    campaigns: tuple[Promotion, ...]
    broadcasts: tuple[Promotion, ...]

    def day_of(self, day: date) -> int:
        return (day - self.starts_on).days

    def date_of(self, day_index: int) -> date:
        return self.starts_on + timedelta(days=int(day_index))


def seasonality(scenario: Scenario, dates: np.ndarray) -> np.ndarray:
    """Season x weekday factor for each date (``datetime64[D]``), normalised over a calendar year."""

    def season_of(day_of_year: np.ndarray) -> np.ndarray:
        spring = scenario.spring_peak_height * np.exp(
            -0.5 * ((day_of_year - scenario.spring_peak_day) / scenario.spring_peak_width) ** 2
        )
        december = scenario.december_peak_height * np.exp(
            -0.5 * ((day_of_year - scenario.december_peak_day) / scenario.december_peak_width) ** 2
        )
        return 1.0 + spring + december

    year_mean = season_of(np.arange(1, 366, dtype=float)).mean()
    years = dates.astype("datetime64[Y]")
    day_of_year = (dates - years.astype("datetime64[D]")).astype(int) + 1
    weekday = (dates.astype("datetime64[D]").astype(int) + 3) % 7  # 1970-01-01 was a Thursday
    week = np.asarray(scenario.weekday_factors, dtype=float)
    week = week / week.mean()
    return season_of(day_of_year.astype(float)) / year_mean * week[weekday]


def _campaign_starts(scenario: Scenario):
    """Campaign start dates: ``first_campaign_on`` plus each offset, or every ``cadence_days``."""
    if scenario.campaign_start_offsets:
        for offset in scenario.campaign_start_offsets:
            yield scenario.first_campaign_on + timedelta(days=int(offset))
        return
    start = scenario.first_campaign_on
    while True:
        yield start
        start = start + timedelta(days=scenario.cadence_days)


def build_calendar(scenario: Scenario, rng: np.random.Generator) -> Calendar:
    """Lay out the days and the promotion schedule (campaign depths are drawn from ``rng``)."""
    days = (scenario.ends_on - scenario.starts_on).days + 1
    dates = np.datetime64(scenario.starts_on, "D") + np.arange(days)
    season = seasonality(scenario, dates)

    campaigns: list[Promotion] = []
    last_day = scenario.ends_on
    for start in _campaign_starts(scenario):
        if start + timedelta(days=scenario.campaign_days + scenario.after_days - 1) > last_day:
            break
        end = start + timedelta(days=scenario.campaign_days - 1)
        depth = float(rng.choice(np.asarray(scenario.depths)))
        number = len(campaigns) + 1
        campaigns.append(
            Promotion(
                promotion_id=f"FW-T{number:02d}",
                starts_on=start,
                ends_on=end,
                start_day=(start - scenario.starts_on).days,
                end_day=(end - scenario.starts_on).days,
                depth=depth,
                audience="targeted",
                cost_per_redemption=scenario.cost_per_redemption,
                name=f"{_THEMES[start.month]} {round(depth * 100)}% off",
            )
        )

    b_start = scenario.broadcast_starts_on
    b_end = b_start + timedelta(days=scenario.broadcast_days - 1)
    broadcasts = (
        Promotion(
            promotion_id="FW-B01",
            starts_on=b_start,
            ends_on=b_end,
            start_day=(b_start - scenario.starts_on).days,
            end_day=(b_end - scenario.starts_on).days,
            depth=scenario.broadcast_depth,
            audience="broadcast",
            cost_per_redemption=0.0,
            name=f"Autumn Garden Clearance {round(scenario.broadcast_depth * 100)}% off sitewide",
        ),
    )
    broadcast_factor = np.ones(days)
    broadcast_index = np.full(days, -1, dtype=np.int64)
    for index, promo in enumerate(broadcasts):
        for campaign in campaigns:
            if promo.start_day <= campaign.end_day and campaign.start_day <= promo.end_day:
                raise ValueError(f"broadcast {promo.promotion_id} overlaps campaign {campaign.promotion_id}")
        broadcast_factor[promo.start_day : promo.end_day + 1] = scenario.broadcast_hr
        broadcast_index[promo.start_day : promo.end_day + 1] = index

    if scenario.pre_start_season_hr != 1.0:
        season = season.copy()
        for campaign in campaigns:
            low = max(campaign.start_day - scenario.pre_start_season_days, 0)
            season[low : campaign.start_day] *= scenario.pre_start_season_hr

    anticipation_day = np.zeros(days, dtype=bool)
    for campaign in campaigns:
        low = max(campaign.start_day - scenario.anticipation_days, 0)
        anticipation_day[low : campaign.start_day] = True

    return Calendar(
        starts_on=scenario.starts_on,
        days=days,
        season=season,
        broadcast_factor=broadcast_factor,
        broadcast_index=broadcast_index,
        anticipation_day=anticipation_day,
        campaigns=tuple(campaigns),
        broadcasts=broadcasts,
    )
