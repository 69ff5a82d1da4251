"""Small synthetic workspaces for the timing tests: panels with the contract's columns.

``workspace(orders, promotions, assignments)`` turns plain frames into an in-memory DuckDB
connection shaped like the real workspace: ``purchase_gaps`` and ``campaign_windows`` (only the
columns the timing SQL reads are filled with meaning, the rest are typed nulls) and the checked
``promotions`` in an attached database ``checked``.

``simulate_daily(...)`` draws purchases day by day from a known proportional hazard (promotion
available, post-redemption dip, anticipation before regular starts), so that a test can check the
whole pipeline recovers the hazard ratios it was given.
"""

from __future__ import annotations

from datetime import date, timedelta

import duckdb
import numpy as np
import pandas as pd

from toolkit.contract import PANELS

DUCK_TO_PANDAS = {"VARCHAR": "object", "DATE": "datetime64[ns]", "TIMESTAMP": "datetime64[ns]", "BOOLEAN": "boolean",
                  "INTEGER": "Int32", "BIGINT": "Int64", "DOUBLE": "float64"}


def _typed(panel: str, frame: pd.DataFrame) -> pd.DataFrame:
    out = pd.DataFrame(index=range(len(frame)))
    for column in PANELS[panel]:
        values = frame[column.name].to_numpy() if column.name in frame else [None] * len(frame)
        out[column.name] = pd.Series(values, dtype=DUCK_TO_PANDAS[column.type])
    return out


def purchase_gaps(orders: pd.DataFrame, export_end: date) -> pd.DataFrame:
    """The purchase_gaps panel from orders (customer_id, order_id, ordered_on, is_deal, promotion_id)."""
    data = orders.sort_values(["customer_id", "ordered_on", "order_id"]).reset_index(drop=True)
    data["ordered_on"] = pd.to_datetime(data["ordered_on"])
    data["next_ordered_on"] = data.groupby("customer_id")["ordered_on"].shift(-1)
    end = pd.Timestamp(export_end)
    data["days_to_next_order"] = (data["next_ordered_on"].fillna(end) - data["ordered_on"]).dt.days
    data["is_next_observed"] = data["next_ordered_on"].notna()
    data["depth"] = np.where(data["is_deal"], 0.2, 0.0)
    data["coupons_received"] = 0
    data["is_promotion_running"] = False
    return _typed("purchase_gaps", data)


def campaign_windows(assignments: pd.DataFrame, promotions: pd.DataFrame, orders: pd.DataFrame | None = None,
                     after_days: int = 28) -> pd.DataFrame:
    """campaign_windows from assignments (promotion_id, customer_id, arm, assigned_at), with the
    orders in the campaign window and in the ``after_days`` after it when ``orders`` are given."""
    data = assignments.merge(promotions[["promotion_id", "starts_at", "ends_at"]], on="promotion_id")
    data["is_treated"] = data["arm"] == "treatment"
    data["starts_on"] = pd.to_datetime(data["starts_at"]).dt.normalize()
    data["ends_on"] = pd.to_datetime(data["ends_at"]).dt.normalize()
    data["after_ends_on"] = data["ends_on"] + pd.Timedelta(days=after_days)
    data["assigned_at"] = pd.to_datetime(data["assigned_at"])
    if orders is not None:
        placed = data[["promotion_id", "customer_id", "starts_on", "ends_on", "after_ends_on"]].merge(
            orders.assign(ordered_on=pd.to_datetime(orders["ordered_on"]))[["customer_id", "ordered_on"]],
            on="customer_id")
        during = placed["ordered_on"].between(placed["starts_on"], placed["ends_on"])
        after = (placed["ordered_on"] > placed["ends_on"]) & (placed["ordered_on"] <= placed["after_ends_on"])
        keys = ["promotion_id", "customer_id"]
        counts = placed.assign(during_orders=during.astype(int), after_orders=after.astype(int)).groupby(keys)[
            ["during_orders", "after_orders"]].sum().reset_index()
        data = data.merge(counts, on=keys, how="left")
        data[["during_orders", "after_orders"]] = data[["during_orders", "after_orders"]].fillna(0).astype(int)
    return _typed("campaign_windows", data)


def workspace(orders: pd.DataFrame, promotions: pd.DataFrame, assignments: pd.DataFrame, export_end: date):
    """An in-memory connection shaped like the workspace (panels + ``checked``)."""
    con = duckdb.connect()
    con.execute("ATTACH ':memory:' AS checked")
    gaps = purchase_gaps(orders, export_end)
    windows = campaign_windows(assignments, promotions, orders)
    promos = promotions.copy()
    promos["starts_at"] = pd.to_datetime(promos["starts_at"])
    promos["ends_at"] = pd.to_datetime(promos["ends_at"])
    con.register("gaps_frame", gaps)
    con.register("windows_frame", windows)
    con.register("promotions_frame", promos)
    for panel, frame in (("purchase_gaps", "gaps_frame"), ("campaign_windows", "windows_frame")):
        columns = ", ".join(f'CAST("{c.name}" AS {c.type}) AS "{c.name}"' for c in PANELS[panel])
        con.execute(f"CREATE TABLE {panel} AS SELECT {columns} FROM {frame}")
    con.execute("CREATE TABLE checked.promotions AS SELECT * FROM promotions_frame")
    for name in ("gaps_frame", "windows_frame", "promotions_frame"):
        con.unregister(name)
    return con


def simulate_daily(
    *,
    customers: int = 1500,
    days: int = 420,
    seed: int = 7,
    base_rate: float = 0.03,
    rate_shape: float | None = None,
    promotion_hr: float = 1.8,
    dip_hr: float = 0.5,
    anticipation_hr: float = 0.6,
    dip_days: int = 21,
    anticipation_days: int = 7,
    min_coupons: int = 2,
    cadence_days: int = 35,
    campaign_days: int = 7,
    treated_share: float = 0.8,
    broadcast: tuple[int, int] | None = (208, 214),
    starts_on: date = date(2025, 1, 6),
    campaign_starts: list[int] | None = None,
    audience_share: float = 1.0,
):
    """Daily purchases from a known hazard; returns (orders, promotions, assignments, export_end).

    Hazard of customer i on day d: ``rate_i x promotion_hr^(coupon held or sale running)
    x dip_hr^(within dip_days after an order placed with a coupon) x anticipation_hr^(in the
    anticipation_days before a campaign start, at least min_coupons coupons, none held)``;
    an order happens with probability ``1 - exp(-hazard)``. Campaigns start every
    ``cadence_days`` days from day 21 and run ``campaign_days`` days; every customer is assigned,
    ``treated_share`` of them to the treatment arm (coupon usable from the campaign's first day).
    ``campaign_starts`` (days) replaces the regular schedule. With ``audience_share`` below 1 each
    campaign assigns only that random share of the customers (the others get no assignment), so
    some customers stay unexposed to coupons for longer.
    """
    rng = np.random.default_rng(seed)
    rate = (np.full(customers, base_rate) if rate_shape is None
            else rng.gamma(rate_shape, base_rate / rate_shape, customers))
    starts = list(campaign_starts) if campaign_starts is not None else list(range(21, days - campaign_days, cadence_days))
    sale = np.zeros(days, bool)
    if broadcast:
        sale[broadcast[0]:broadcast[1] + 1] = True
    anticipation_day = np.zeros(days, bool)
    for s in starts:
        anticipation_day[max(s - anticipation_days, 0):s] = True
    treated = rng.random((len(starts), customers)) < treated_share
    assigned = (rng.random((len(starts), customers)) < audience_share if audience_share < 1
                else np.ones((len(starts), customers), bool))
    treated &= assigned
    holding = np.zeros((customers, days), bool)
    coupons = np.zeros((customers, days), int)
    for k, s in enumerate(starts):
        holding[treated[k], s:s + campaign_days] = True
        coupons[treated[k], s:] += 1
    dip_until = np.full(customers, -10**6)
    customer_of, day_of, coupon_of = [], [], []
    for d in range(days):
        hazard = rate * np.where(holding[:, d] | sale[d], promotion_hr, 1.0)
        hazard = hazard * np.where(dip_until >= d, dip_hr, 1.0)
        hazard = hazard * np.where(anticipation_day[d] & (coupons[:, d] >= min_coupons) & ~holding[:, d],
                                   anticipation_hr, 1.0)
        who = np.flatnonzero(rng.random(customers) < -np.expm1(-hazard))
        with_coupon = holding[who, d]
        dip_until[who[with_coupon]] = d + dip_days
        customer_of.append(who)
        day_of.append(np.full(len(who), d))
        campaign_of = np.full(len(who), -1)
        if with_coupon.any():
            k = max(i for i, s in enumerate(starts) if s <= d)
            campaign_of[with_coupon] = k
        coupon_of.append(campaign_of)
    customer_of = np.concatenate(customer_of)
    day_of = np.concatenate(day_of)
    coupon_of = np.concatenate(coupon_of)
    ids = np.char.add("C", np.char.zfill(np.arange(customers).astype(str), 5))
    first = starts_on
    promotion_ids = [f"T{k + 1:02d}" for k in range(len(starts))]
    on_sale = sale[day_of] & (coupon_of < 0)
    promotion_of = np.where(coupon_of >= 0, np.array(promotion_ids + [""])[coupon_of], np.where(on_sale, "B01", None))
    orders = pd.DataFrame({
        "customer_id": ids[customer_of],
        "order_id": [f"O{i:07d}" for i in range(len(customer_of))],
        "ordered_on": [first + timedelta(days=int(d)) for d in day_of],
        "promotion_id": promotion_of,
    })
    orders["is_deal"] = orders["promotion_id"].notna()
    rows = [{"promotion_id": pid, "starts_at": pd.Timestamp(first + timedelta(days=s)),
             "ends_at": pd.Timestamp(first + timedelta(days=s + campaign_days - 1)), "mechanic": "percent_off",
             "depth": 0.2, "audience": "targeted", "cost_per_redemption": 0.0, "name": pid}
            for pid, s in zip(promotion_ids, starts)]
    if broadcast:
        rows.append({"promotion_id": "B01", "starts_at": pd.Timestamp(first + timedelta(days=broadcast[0])),
                     "ends_at": pd.Timestamp(first + timedelta(days=broadcast[1])), "mechanic": "percent_off",
                     "depth": 0.2, "audience": "broadcast", "cost_per_redemption": 0.0, "name": "sale"})
    promotions = pd.DataFrame(rows)
    assignment_rows = []
    for k, (pid, s) in enumerate(zip(promotion_ids, starts)):
        assignment_rows.append(pd.DataFrame({
            "promotion_id": pid, "customer_id": ids[assigned[k]],
            "arm": np.where(treated[k][assigned[k]], "treatment", "holdout"),
            "assigned_at": pd.Timestamp(first + timedelta(days=s - 2)),
        }))
    assignments = pd.concat(assignment_rows, ignore_index=True)
    export_end = first + timedelta(days=days - 1)
    return orders, promotions, assignments, export_end
