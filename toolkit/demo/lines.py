"""Order lines from simulated orders: baskets, products, quantities, prices, discounts, returns.

Amounts are computed in whole cents so that list = net + discount holds on every line; a coupon's
or a sale's discount is ``depth x list`` rounded down to the cent on each line of an order that
carries it (so no line is deeper than its promotion).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .calendar import Calendar
from .population import WAREHOUSES, Customers, Products
from .scenario import Scenario
from .simulate import Simulation

# Hour-of-day weights for order times (evening peak).
_HOUR_WEIGHTS = np.array(
    [0.4, 0.2, 0.1, 0.1, 0.1, 0.2, 0.6, 1.2, 1.8, 2.2, 2.4, 2.5, 2.6, 2.4, 2.2, 2.2, 2.3, 2.6, 3.0, 3.4, 3.6, 3.2, 2.2, 1.2]
)


@dataclass(frozen=True)
class Lines:
    """Order lines in time order, in export terms but with numpy types."""

    order_number: np.ndarray  # int, 1.. in order of purchase time
    customer: np.ndarray  # customer index
    created_at: np.ndarray  # datetime64[s]
    product: np.ndarray  # product index
    quantity: np.ndarray
    list_cents: np.ndarray
    discount_cents: np.ndarray
    promotion: np.ndarray  # promotion index (campaigns, then broadcasts), -1 when none
    is_app: np.ndarray
    is_return: np.ndarray
    orders: int


def make_lines(
    scenario: Scenario,
    calendar: Calendar,
    customers: Customers,
    products: Products,
    simulation: Simulation,
    rng: np.random.Generator,
) -> Lines:
    """Expand each simulated order into lines, and add the returned lines."""
    cust = simulation.order_customer
    day = simulation.order_day
    promo = simulation.order_promotion
    n_orders = len(cust)

    hour = rng.choice(24, size=n_orders, p=_HOUR_WEIGHTS / _HOUR_WEIGHTS.sum())
    second = hour * 3600 + rng.integers(0, 3600, size=n_orders)
    first_day = customers.first_day[cust] == day
    late_enough = customers.first_second[cust] + rng.integers(60, 1800, size=n_orders)
    second = np.where(first_day, np.maximum(second, np.minimum(late_enough, 86399)), second)
    is_app = rng.random(n_orders) < customers.app_share[cust]

    # Basket numbers follow purchase time.
    time_order = np.lexsort((cust, second, day))
    cust, day, promo, second, is_app = (a[time_order] for a in (cust, day, promo, second, is_app))
    order_number = np.arange(1, n_orders + 1)

    n_lines = np.minimum(1 + rng.poisson(scenario.mean_extra_lines, size=n_orders), scenario.max_lines)
    line_order = np.repeat(np.arange(n_orders), n_lines)
    garden = customers.household_garden[cust[line_order]] == 1
    product = _draw_products(products, line_order, garden, rng)
    quantity = 1 + rng.poisson(scenario.mean_extra_quantity, size=len(line_order))
    list_cents = quantity * products.price_cents[product]
    depths = np.array([c.depth for c in calendar.campaigns] + [b.depth for b in calendar.broadcasts] + [0.0])
    line_promo = promo[line_order]
    # Rounded down to the cent, so no line is ever deeper than its promotion (index -1 is the 0.0).
    line_depth = depths[line_promo]
    if customers.welcome_deal is not None:
        # The sign-up offer: the welcome order of a deal-acquired customer, with no promotion id.
        welcome_deal = customers.welcome_deal[cust] & first_day[time_order] & (promo == -1)
        line_depth = np.where(welcome_deal[line_order], scenario.welcome_offer_depth, line_depth)
    discount_cents = np.floor(line_depth * list_cents + 1e-6).astype(np.int64)
    start = np.datetime64(scenario.starts_on, "s")
    created = start + (day[line_order] * 86400 + second[line_order]).astype("timedelta64[s]")

    # Returns: a negative line in the same basket, booked 3-21 days later, for part or all of a line.
    returned = rng.random(len(line_order)) < scenario.return_line_share
    back_qty = np.minimum(rng.integers(1, 3, size=len(line_order)), quantity)
    delay = rng.integers(3 * 86400, 22 * 86400, size=len(line_order)).astype("timedelta64[s]")
    end = np.datetime64(scenario.ends_on, "s") + np.timedelta64(86399, "s")
    returned &= created + delay <= end
    r = np.flatnonzero(returned)
    r_qty = -back_qty[r]
    r_list = -(back_qty[r] * products.price_cents[product[r]])
    r_discount = -np.floor(discount_cents[r] * back_qty[r] / quantity[r] + 1e-6).astype(np.int64)

    all_order = np.concatenate([line_order, line_order[r]])
    all_created = np.concatenate([created, created[r] + delay[r]])
    is_return = np.concatenate([np.zeros(len(line_order), bool), np.ones(len(r), bool)])
    sequence = np.concatenate([np.arange(len(line_order)), r])
    keep = np.lexsort((is_return, sequence, all_created))  # by time, then original line order
    return Lines(
        order_number=order_number[all_order][keep],
        customer=cust[all_order][keep],
        created_at=all_created[keep],
        product=np.concatenate([product, product[r]])[keep],
        quantity=np.concatenate([quantity, r_qty])[keep],
        list_cents=np.concatenate([list_cents, r_list])[keep],
        discount_cents=np.concatenate([discount_cents, r_discount])[keep],
        promotion=np.concatenate([line_promo, line_promo[r]])[keep],
        is_app=is_app[all_order][keep],
        is_return=is_return[keep],
        orders=n_orders,
    )


def store_ids(lines: Lines, customers: Customers, products: Products) -> np.ndarray:
    """The fulfilling warehouse code per line (None for products shipped by the supplier)."""
    codes = np.array([WAREHOUSES[r] for r in customers.region[lines.customer]], dtype=object)
    codes[products.is_dropship[lines.product]] = None
    return codes


def _draw_products(products: Products, line_order: np.ndarray, garden: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """One product per line, from the customer's weights, with no product twice in a basket."""
    n_products = len(products)
    cum_garden = np.cumsum(products.weight_garden)
    cum_other = np.cumsum(products.weight_other)
    product = np.empty(len(line_order), dtype=np.int64)
    todo = np.arange(len(line_order))
    while len(todo):
        u = rng.random(len(todo))
        pick = np.where(
            garden[todo],
            np.searchsorted(cum_garden, u * cum_garden[-1], side="right"),
            np.searchsorted(cum_other, u * cum_other[-1], side="right"),
        )
        product[todo] = np.minimum(pick, n_products - 1)
        key = line_order * n_products + product
        order = np.argsort(key, kind="stable")
        dup = np.zeros(len(key), dtype=bool)
        dup[order[1:]] = key[order[1:]] == key[order[:-1]]
        todo = np.flatnonzero(dup)
    return product
