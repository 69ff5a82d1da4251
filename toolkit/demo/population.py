"""The demo's customers and products (all invented)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .scenario import Scenario

# category, share of the assortment, median list price (EUR), lognormal sigma of price, is garden
_CATEGORIES = (
    ("garden_tools", 0.13, 24.0, 0.6, True),
    ("plants_and_seeds", 0.20, 6.5, 0.5, True),
    ("outdoor_furniture", 0.08, 160.0, 0.5, True),
    ("outdoor_cooking", 0.07, 55.0, 0.6, True),
    ("lighting", 0.10, 32.0, 0.5, False),
    ("kitchen", 0.13, 19.0, 0.6, False),
    ("home_decor", 0.13, 26.0, 0.6, False),
    ("textiles", 0.09, 29.0, 0.5, False),
    ("storage_and_cleaning", 0.07, 14.0, 0.5, False),
)

WAREHOUSES = {"north": "WH-NTH", "south": "WH-STH", "east": "WH-MID", "central": "WH-MID", "west": "WH-WST"}


@dataclass(frozen=True)
class Customers:
    """Customer attributes, one array entry per customer (index = position).

    ``first_day`` is the day index (from ``Scenario.starts_on``) of ``first_seen_at``; it is negative
    for customers known before the history starts. ``first_second`` is the second of that day.
    ``base_rate`` is the latent baseline purchase hazard (orders per day) and is not exported.
    ``welcome_deal`` marks the customers whose welcome order used the sign-up offer (their
    ``base_rate`` already carries ``welcome_offer_rate_factor``).
    """

    customer_id: np.ndarray
    first_day: np.ndarray
    first_second: np.ndarray
    welcome_order: np.ndarray
    region: np.ndarray
    signup_channel: np.ndarray
    household_garden: np.ndarray
    base_rate: np.ndarray
    app_share: np.ndarray
    welcome_deal: np.ndarray | None = None

    def __len__(self) -> int:
        return len(self.customer_id)


@dataclass(frozen=True)
class Products:
    """Product attributes; ``weight_garden``/``weight_other`` are choice weights (sum 1)."""

    product_id: np.ndarray
    category: np.ndarray
    price_cents: np.ndarray
    unit_cost: np.ndarray
    is_dropship: np.ndarray
    weight_garden: np.ndarray
    weight_other: np.ndarray

    def __len__(self) -> int:
        return len(self.product_id)


def make_customers(scenario: Scenario, count: int, rng: np.random.Generator) -> Customers:
    """Draw ``count`` customers: arrival day, attributes and latent baseline hazard."""
    history_days = (scenario.ends_on - scenario.starts_on).days + 1
    before_days = (scenario.starts_on - scenario.existing_since).days
    new_days = (scenario.new_until - scenario.starts_on).days + 1
    is_existing = rng.random(count) < scenario.existing_share
    first_day = np.where(
        is_existing,
        -rng.integers(1, before_days + 1, size=count),
        rng.integers(0, min(new_days, history_days), size=count),
    )
    first_second = rng.integers(6 * 3600, 22 * 3600, size=count)
    welcome = (~is_existing) & (rng.random(count) < scenario.welcome_order_share)
    region = rng.choice(np.asarray(scenario.regions), size=count, p=_normalised(scenario.region_weights))
    channel = rng.choice(np.asarray(scenario.signup_channels), size=count, p=_normalised(scenario.signup_weights))
    garden = (rng.random(count) < scenario.household_garden_share).astype(np.int64)
    base_rate = rng.gamma(scenario.base_rate_shape, scenario.base_rate_mean / scenario.base_rate_shape, size=count)
    app_share = np.where(channel == "app", 0.75, 0.3)
    # Drawn last, so that every earlier draw is the same as before the welcome offer existed.
    offer_start = (scenario.welcome_offer_starts_on - scenario.starts_on).days
    offer_end = (scenario.welcome_offer_ends_on - scenario.starts_on).days
    welcome_deal = (
        welcome & (first_day >= offer_start) & (first_day <= offer_end)
        & (rng.random(count) < scenario.welcome_offer_share)
    )
    base_rate = np.where(welcome_deal, base_rate * scenario.welcome_offer_rate_factor, base_rate)
    order = np.arange(count)
    customer_id = np.char.add("FW", np.char.zfill((order + 100001).astype(str), 6))
    return Customers(
        customer_id=customer_id,
        first_day=first_day.astype(np.int64),
        first_second=first_second.astype(np.int64),
        welcome_order=welcome,
        region=region,
        signup_channel=channel,
        household_garden=garden,
        base_rate=base_rate,
        app_share=app_share,
        welcome_deal=welcome_deal,
    )


def make_products(scenario: Scenario, rng: np.random.Generator) -> Products:
    """Draw the assortment: category, list price, unit cost, popularity."""
    shares = np.array([c[1] for c in _CATEGORIES])
    counts = np.floor(shares / shares.sum() * scenario.products).astype(int)
    counts[np.argmax(shares)] += scenario.products - counts.sum()
    category = np.repeat(np.array([c[0] for c in _CATEGORIES]), counts)
    median = np.repeat(np.array([c[2] for c in _CATEGORIES]), counts)
    sigma = np.repeat(np.array([c[3] for c in _CATEGORIES]), counts)
    is_garden = np.repeat(np.array([c[4] for c in _CATEGORIES]), counts)
    n = len(category)
    price = median * np.exp(sigma * rng.standard_normal(n))
    price_cents = np.maximum(np.round(price, 0) * 100 - 1, 99).astype(np.int64)  # EUR x.99 price points
    margin = rng.uniform(0.25, 0.55, size=n)
    unit_cost = np.round(price_cents / 100.0 * (1.0 - margin), 2)
    is_dropship = (category == "outdoor_furniture") | (rng.random(n) < 0.08)
    popularity = rng.lognormal(0.0, 1.0, size=n) / np.sqrt(price_cents / 100.0)
    weight_other = popularity / popularity.sum()
    garden_popularity = popularity * np.where(is_garden, 2.0, 1.0)
    weight_garden = garden_popularity / garden_popularity.sum()
    shuffle = rng.permutation(n)
    product_id = np.char.add("SKU-", (10001 + np.arange(n)).astype(str))
    return Products(
        product_id=product_id,
        category=category[shuffle],
        price_cents=price_cents[shuffle],
        unit_cost=unit_cost[shuffle],
        is_dropship=is_dropship[shuffle],
        weight_garden=weight_garden[shuffle],
        weight_other=weight_other[shuffle],
    )


def _normalised(weights: tuple[float, ...]) -> np.ndarray:
    w = np.asarray(weights, dtype=float)
    return w / w.sum()
