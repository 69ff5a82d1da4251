"""The data contract: the input tables liftlag reads and the panels it builds.

This module is the single written statement of both contracts. ``sources`` and ``checks`` read
the input half; ``tests/test_panel_contract.py`` keeps the panel half equal to what the SQL in
``sql/panels/`` produces, so the documented columns cannot drift from the code.
"""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass(frozen=True)
class Column:
    name: str
    type: str  # DuckDB type name
    required: bool = False
    description: str = ""


@dataclass(frozen=True)
class InputTable:
    name: str
    columns: tuple[Column, ...]
    optional: bool = False
    allowed_values: dict[str, tuple[str, ...]] = field(default_factory=dict)
    extra_columns: bool = False  # keep unmapped export columns (customer attributes)

    @property
    def required(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.columns if c.required)

    def column_is_required(self, name: str) -> bool:
        return name in self.required

    def column(self, name: str) -> Column:
        for c in self.columns:
            if c.name == name:
                return c
        raise KeyError(name)


MECHANICS = ("percent_off", "amount_off", "bundle", "free_shipping", "other")
AUDIENCES = ("targeted", "broadcast")
ARMS = ("treatment", "holdout")

INPUT_TABLES: dict[str, InputTable] = {
    t.name: t
    for t in (
        InputTable(
            "transactions",
            (
                Column("order_id", "VARCHAR", True, "order (basket) identifier"),
                Column("customer_id", "VARCHAR", True),
                Column("ordered_at", "TIMESTAMP", True),
                Column("product_id", "VARCHAR", True),
                Column("quantity", "DOUBLE", True, "negative for a returned line"),
                Column("net_amount", "DOUBLE", True, "amount paid, after discount"),
                Column("list_amount", "DOUBLE", False, "amount before discount"),
                Column("discount_amount", "DOUBLE", False),
                Column("promotion_id", "VARCHAR", False, "null when no promotion applied"),
                Column("channel", "VARCHAR"),
                Column("store_id", "VARCHAR"),
            ),
        ),
        InputTable(
            "promotions",
            (
                Column("promotion_id", "VARCHAR", True),
                Column("starts_at", "TIMESTAMP", True),
                Column("ends_at", "TIMESTAMP", True, "last day the promotion runs (inclusive)"),
                Column("mechanic", "VARCHAR", True, ", ".join(MECHANICS)),
                Column("depth", "DOUBLE", False, "fraction off for percent_off, amount for amount_off"),
                Column("audience", "VARCHAR", True, ", ".join(AUDIENCES)),
                Column("cost_per_redemption", "DOUBLE"),
                Column("name", "VARCHAR"),
            ),
            allowed_values={"mechanic": MECHANICS, "audience": AUDIENCES},
        ),
        InputTable(
            "assignments",
            (
                Column("promotion_id", "VARCHAR", True),
                Column("customer_id", "VARCHAR", True),
                Column("arm", "VARCHAR", True, ", ".join(ARMS)),
                Column("assigned_at", "TIMESTAMP", True),
            ),
            # Only targeted campaigns have assignments: a shop that runs only broadcast sales has
            # none, and its export is still usable (timing and the long-run analyses run).
            optional=True,
            allowed_values={"arm": ARMS},
        ),
        InputTable(
            "customers",
            (
                Column("customer_id", "VARCHAR", True),
                Column("first_seen_at", "TIMESTAMP"),
            ),
            optional=True,
            extra_columns=True,
        ),
        InputTable(
            "products",
            (
                Column("product_id", "VARCHAR", True),
                Column("category", "VARCHAR"),
                Column("unit_cost", "DOUBLE"),
            ),
            optional=True,
        ),
    )
}

REQUIRED_TABLES = tuple(n for n, t in INPUT_TABLES.items() if not t.optional)

# Panels: one table per file in sql/panels/, built in this order (each reads only earlier ones
# and the checked input tables).
PANELS: dict[str, tuple[Column, ...]] = {
    "campaign_assignments": (
        Column("promotion_id", "VARCHAR", description="one row per promotion x assigned customer"),
        Column("customer_id", "VARCHAR"),
        Column("arm", "VARCHAR", description="arm of the customer's earliest assignment to the promotion"),
        Column("assigned_at", "TIMESTAMP"),
        Column("audience", "VARCHAR"),
        Column("starts_on", "DATE", description="the promotion's first day"),
        Column("ends_on", "DATE", description="the promotion's last day (inclusive)"),
    ),
    "orders": (
        Column("order_id", "VARCHAR", description="one row per order (lines summed, returns netted)"),
        Column("customer_id", "VARCHAR"),
        Column("ordered_at", "TIMESTAMP", description="first line's timestamp"),
        Column("ordered_on", "DATE"),
        Column("lines", "BIGINT"),
        Column("quantity", "DOUBLE", description="net of returned lines"),
        Column("net_amount", "DOUBLE"),
        Column("list_amount", "DOUBLE"),
        Column("discount_amount", "DOUBLE"),
        Column("cost_amount", "DOUBLE", description="unit_cost x quantity, or list x (1 - margin_rate)"),
        Column("margin_amount", "DOUBLE", description="net_amount - cost_amount: margin after discount"),
        Column("is_deal", "BOOLEAN", description="any line carried a promotion or a discount"),
        Column("is_return", "BOOLEAN", description="net_amount below -0.005 (half a cent): the order is mostly a return"),
        Column("promotion_id", "VARCHAR", description="the promotion the order carried (the first id in sort order if several)"),
        Column("depth", "DOUBLE", description="discount_amount / list_amount (0 when no discount)"),
    ),
    "customer_periods": (
        Column("customer_id", "VARCHAR"),
        Column("week_on", "DATE", description="Monday of a week in which the customer ordered, received a coupon or was in a running campaign"),
        Column("orders", "BIGINT"),
        Column("net_amount", "DOUBLE"),
        Column("discount_amount", "DOUBLE"),
        Column("deal_orders", "BIGINT"),
        Column("is_broadcast_running", "BOOLEAN", description="a broadcast promotion ran on some day of the week"),
        Column("is_coupon_active", "BOOLEAN", description="the customer held a treatment-arm coupon that ran this week"),
        Column("is_holdout_active", "BOOLEAN", description="the customer was in a holdout of a campaign running this week"),
        Column("coupons_received", "BIGINT", description="treatment-arm assignments received up to the end of the week"),
    ),
    "purchase_gaps": (
        Column("customer_id", "VARCHAR"),
        Column("order_id", "VARCHAR"),
        Column("ordered_on", "DATE"),
        Column("next_ordered_on", "DATE", description="null when no later order is seen"),
        Column("days_to_next_order", "INTEGER", description="to the next order, or to the export's end when censored"),
        Column("is_next_observed", "BOOLEAN", description="event flag: false means censored at the export's end"),
        Column("is_deal", "BOOLEAN"),
        Column("depth", "DOUBLE"),
        Column("promotion_id", "VARCHAR"),
        Column("days_since_last_coupon", "INTEGER", description="days since the last treatment-arm assignment; null if none"),
        Column("coupons_received", "BIGINT", description="treatment-arm assignments received up to the order"),
        Column("is_promotion_running", "BOOLEAN", description="a broadcast sale, or a coupon the customer holds, runs on the order day"),
    ),
    "campaign_windows": (
        Column("promotion_id", "VARCHAR"),
        Column("customer_id", "VARCHAR"),
        Column("arm", "VARCHAR", description="treatment, holdout, or comparison (unassigned pre-period buyers, for a campaign without holdout)"),
        Column("is_treated", "BOOLEAN"),
        Column("assigned_at", "TIMESTAMP"),
        Column("starts_on", "DATE", description="first day of the campaign window"),
        Column("ends_on", "DATE", description="last day of the campaign window (inclusive)"),
        Column("after_ends_on", "DATE", description="last day of the window after it (ends_on + after_days)"),
        Column("recency_days", "INTEGER", description="days from the last pre-period order to starts_on; null if none"),
        Column("frequency", "BIGINT", description="orders in the pre-period (pre_period_days before starts_on)"),
        Column("monetary", "DOUBLE", description="net amount in the pre-period"),
        Column("tenure_days", "INTEGER", description="days from first seen (or first order) to starts_on; null if new"),
        Column("past_deal_share", "DOUBLE", description="deal orders / orders in the pre-period; null if no orders"),
        Column("past_coupons", "BIGINT", description="treatment-arm assignments received before this one"),
        Column("pre_buyer", "INTEGER", description="bought in the window of the campaign's length before it (CUPED covariate)"),
        Column("pre_orders", "BIGINT", description="orders in that window"),
        Column("pre_net_amount", "DOUBLE"),
        Column("pre_margin_amount", "DOUBLE"),
        Column("during_buyer", "INTEGER"),
        Column("during_orders", "BIGINT"),
        Column("during_net_amount", "DOUBLE"),
        Column("during_margin_amount", "DOUBLE"),
        Column("after_buyer", "INTEGER"),
        Column("after_orders", "BIGINT"),
        Column("after_net_amount", "DOUBLE"),
        Column("after_margin_amount", "DOUBLE"),
        Column("redeemed", "INTEGER", description="placed an order carrying this promotion_id in the campaign window"),
        Column("discount_amount", "DOUBLE", description="discount paid on this promotion's lines in the campaign window"),
    ),
    "customer_quarters": (
        Column("customer_id", "VARCHAR"),
        Column("quarter", "VARCHAR", description="e.g. 2026Q3"),
        Column("quarter_on", "DATE", description="first day of the quarter"),
        Column("orders", "BIGINT"),
        Column("deal_orders", "BIGINT"),
        Column("net_amount", "DOUBLE"),
        Column("deal_net_amount", "DOUBLE"),
        Column("discount_amount", "DOUBLE"),
        Column("mean_depth", "DOUBLE", description="mean depth of the quarter's deal orders; null if none"),
    ),
    "customer_quarter_behaviour": (
        Column("customer_id", "VARCHAR", description="one row per customer x quarter with a purchase"),
        Column("quarter", "VARCHAR", description="e.g. 2026Q3"),
        Column("quarter_on", "DATE", description="first day of the quarter"),
        Column("orders", "BIGINT", description="purchases (return-only orders left out)"),
        Column("purchase_days", "BIGINT", description="days with a purchase"),
        Column("purchase_weeks", "BIGINT", description="weeks (Monday start) with a purchase"),
        Column("active_span_days", "INTEGER", description="days from the quarter's first purchase to its last"),
        Column("lines", "BIGINT", description="order lines of the purchases"),
        Column("quantity", "DOUBLE", description="items, net of returned lines"),
        Column("net_amount", "DOUBLE"),
        Column("list_amount", "DOUBLE"),
        Column("discount_amount", "DOUBLE"),
        Column("deal_orders", "BIGINT"),
        Column("max_depth", "DOUBLE", description="deepest discount of the quarter's purchases (0 if none)"),
    ),
    "segment_days": (
        Column("day_on", "DATE", description="one row per day x segment with an order line"),
        Column("segment_kind", "VARCHAR", description="category (products.category) or channel (transactions.channel)"),
        Column("segment", "VARCHAR", description="the category or channel"),
        Column("orders", "BIGINT", description="orders with a purchased (not returned) line in the segment"),
        Column("net_amount", "DOUBLE", description="net amount of the segment's lines, returns netted in"),
        Column("deal_lines", "BIGINT", description="lines that carried a promotion_id"),
    ),
}
