"""The plain-pandas peer: liftlag's check and panels as an analyst would write them in a notebook.

Usage: python bench/peers/pandas_peer.py EXPORT_DIR OUT_DIR

Reads the export that ``bench/generate_export.py`` wrote (its ``liftlag.toml`` names the files
and the column mapping) with ``pd.read_parquet`` / ``pd.read_csv`` into memory, then:

- the check: every row of transactions, promotions and assignments is accepted or rejected, a
  rejected row's reason being the first rejection rule it trips, in liftlag's order
  (missing_required, unparseable_value, timestamp_beyond_horizon, duplicate_row, duplicate_key,
  value_not_allowed, ends_before_starts, unknown_promotion); warnings (rows kept) are counted per
  rule (discount_deeper_than_depth, order_outside_promotion_dates, customer_in_both_arms,
  future_timestamp, net_above_list, unparseable_optional, return_sign_mismatch);
- all eight panels, with liftlag's columns and rules: campaign_assignments, orders,
  customer_periods, purchase_gaps, campaign_windows, customer_quarters,
  customer_quarter_behaviour, segment_days (its category segments need a products table, which
  the peers do not read: only the channel segments, as liftlag builds them without one).

Writes ``OUT_DIR/check.json`` (rows read, rejected rows per table and reason, warned rows per
table and rule, rows per panel, seconds per step) and ``OUT_DIR/<panel>.parquet``; prints the
JSON on one line.

Covered exactly for the benchmark exports (Parquet order lines, CSV promotions and assignments,
no customers or products table). Not covered, because pandas cannot tell them apart once read
or they are outside the benchmark: a Parquet NaN amount is read as missing (liftlag: unparseable),
text timestamps with a UTC offset are converted to UTC only when ISO 8601, and the customers and
products tables (first_seen_at, unit costs) are not read. Rejected-row details, examples and the
sanity gates are not produced (only their counts are compared).
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq

sys.path.insert(0, str(Path(__file__).resolve().parent))
from export_config import ALLOWED, CONTRACT, REJECT_RULES, Export, Table, load  # noqa: E402

NAT = np.iinfo(np.int64).min


# ---------------------------------------------------------------- reading and typing

def read_raw(table: Table) -> pd.DataFrame:
    """All files of one table, under contract names, in file order."""
    wanted = {table.export_column(c): c for c, _, _ in CONTRACT[table.name]}
    if table.format == "parquet":
        present = set(pq.read_schema(table.files[0]).names)
        frames = [pd.read_parquet(f, columns=[c for c in wanted if c in present]) for f in table.files]
    else:
        frames = [pd.read_csv(f, dtype=str, keep_default_na=False) for f in table.files]
        frames = [f[[c for c in wanted if c in f.columns]] for f in frames]
    df = pd.concat(frames, ignore_index=True) if len(frames) > 1 else frames[0]
    return df.rename(columns=wanted)


def blank(s: pd.Series) -> pd.Series:
    if s.dtype == object:
        return s.isna() | (s.str.strip(" ") == "")
    return s.isna()


def far_times(s: pd.Series, failed: pd.Series) -> pd.Series:
    """Times that parse but lie outside pandas' nanosecond range (1677-2262), as numpy values.

    pandas turns a placeholder such as 2999-01-01 into NaT; liftlag reads it and rejects it as
    beyond the horizon, not as unparseable. Only the (few) rows pandas could not parse are tried.
    """
    far = pd.Series(None, index=s.index, dtype=object)
    for i, text in s[failed].items():
        try:
            far[i] = np.datetime64(str(text).strip().replace(" ", "T"), "us")
        except ValueError:
            pass
    return far


def stage(table: Table, raw: pd.DataFrame) -> pd.DataFrame:
    """Typed columns plus the row facts the rules need: missing, unparseable, unparseable_optional."""
    csv = table.format == "csv"
    out = pd.DataFrame(index=raw.index)
    missing = np.zeros(len(raw), dtype=bool)
    unparseable = np.zeros(len(raw), dtype=bool)
    optional_bad = np.zeros(len(raw), dtype=bool)
    for name, kind, required in CONTRACT[table.name]:
        if name not in raw.columns:
            out[name] = pd.Series(np.nan if kind == "number" else None, index=raw.index,
                                  dtype="datetime64[ns]" if kind == "time" else None)
            continue
        s = raw[name]
        is_blank = blank(s)
        if kind == "text":
            value = s.str.strip(" ") if csv else s
            if name in table.values:
                value = value.map(lambda v, m=table.values[name]: m.get(v, v))
            typed = value.where(~is_blank, None)
        elif kind == "time":
            if s.dtype == object:
                typed = pd.to_datetime(s, errors="coerce", format="ISO8601", utc=True).dt.tz_localize(None)
            else:
                typed = pd.to_datetime(s)
            typed = typed.astype("datetime64[ns]").where(~is_blank)
            out["_far_" + name] = far_times(s, ~is_blank & typed.isna())
        else:
            typed = pd.to_numeric(s, errors="coerce") if s.dtype == object else s.astype(float)
            typed = typed.where(np.isfinite(typed) & ~is_blank)
        out[name] = typed
        bad = (~is_blank & typed.isna()).to_numpy()
        if kind == "time":
            bad &= out["_far_" + name].isna().to_numpy()
        if required:
            missing |= is_blank.to_numpy()
            unparseable |= bad
        else:
            optional_bad |= bad
    out["_missing"] = missing
    out["_unparseable"] = unparseable
    out["_unparseable_optional"] = optional_bad
    # The original text stands for the row in the duplicate test where a value did not parse.
    problem = missing | unparseable | optional_bad
    out["_raw_problem"] = None
    if problem.any():
        out.loc[problem, "_raw_problem"] = raw[problem].astype(str).agg("|".join, axis=1)
    return out


# ---------------------------------------------------------------- the check

class Reasons:
    """First-rule-wins reasons of one table's rows."""

    def __init__(self, rows: int):
        self.code = np.full(rows, -1, dtype=np.int8)

    def hit(self, rule: str, mask) -> None:
        mask = np.asarray(mask, dtype=bool)
        self.code[mask & (self.code < 0)] = REJECT_RULES.index(rule)

    @property
    def accepted(self) -> np.ndarray:
        return self.code < 0

    def counts(self) -> dict[str, int]:
        values, counts = np.unique(self.code[self.code >= 0], return_counts=True)
        return {REJECT_RULES[v]: int(c) for v, c in zip(values, counts)}


def beyond(df: pd.DataFrame, column: str, earliest, latest) -> np.ndarray:
    s = df[column]
    hit = (s.notna() & ((s > latest) | (s < earliest))).to_numpy()
    far = df["_far_" + column] if "_far_" + column in df else pd.Series(dtype=object)
    for i, value in far.dropna().items():
        hit[df.index.get_loc(i)] = value > np.datetime64(latest, "us") or value < np.datetime64(earliest, "us")
    return hit


def check(ex: Export, staged: dict[str, pd.DataFrame]):
    reasons = {name: Reasons(len(df)) for name, df in staged.items()}
    warnings: dict[str, dict[str, np.ndarray]] = {name: {} for name in staged}
    for name, df in staged.items():
        r = reasons[name]
        r.hit("missing_required", df["_missing"])
        r.hit("unparseable_value", df["_unparseable"])
        cols = [c for c, _, _ in CONTRACT[name]] + [c for c in df.columns if c.startswith(("_raw", "_far"))]
        if name == "promotions":
            late = ex.horizon_promotion_latest
            r.hit("timestamp_beyond_horizon", beyond(df, "starts_at", ex.horizon_earliest, late)
                  | beyond(df, "ends_at", ex.horizon_earliest, late))
        else:
            stamp = "ordered_at" if name == "transactions" else "assigned_at"
            r.hit("timestamp_beyond_horizon", beyond(df, stamp, ex.horizon_earliest, ex.horizon_latest))
        r.hit("duplicate_row", df.duplicated(subset=cols, keep="first"))
        if name == "promotions":
            key = df["promotion_id"]
            r.hit("duplicate_key", key.notna() & key.duplicated(keep="first"))
        for (table, column), allowed in ALLOWED.items():
            if table == name:
                r.hit("value_not_allowed", df[column].notna() & ~df[column].isin(allowed))
        if name == "promotions":
            r.hit("ends_before_starts", df["ends_at"].dt.normalize() < df["starts_at"].dt.normalize())
        warnings[name]["unparseable_optional"] = df["_unparseable_optional"].to_numpy()
    promotions = staged["promotions"][reasons["promotions"].accepted]
    known = set(promotions["promotion_id"])
    for name in ("transactions", "assignments"):
        pid = staged[name]["promotion_id"]
        reasons[name].hit("unknown_promotion", pid.notna() & ~pid.isin(known))

    t = staged["transactions"]
    w = warnings["transactions"]
    with_depth = promotions[promotions["depth"].notna()].set_index("promotion_id")
    mechanic = t["promotion_id"].map(with_depth["mechanic"])
    depth = t["promotion_id"].map(with_depth["depth"])
    discount = t["discount_amount"].fillna(t["list_amount"] - t["net_amount"])
    w["discount_deeper_than_depth"] = (
        ((mechanic == "percent_off") & (t["list_amount"] > 0) & (discount / t["list_amount"] > depth + 0.005))
        | ((mechanic == "amount_off") & (discount > depth + 0.005))).to_numpy()
    days = promotions.set_index("promotion_id")
    ordered_on = t["ordered_at"].dt.normalize()
    first_day = t["promotion_id"].map(days["starts_at"].dt.normalize())
    last_day = t["promotion_id"].map(days["ends_at"].dt.normalize())
    w["order_outside_promotion_dates"] = (
        t["promotion_id"].notna() & ordered_on.notna() & (t["quantity"] >= 0)
        & first_day.notna() & ((ordered_on < first_day) | (ordered_on > last_day))).to_numpy()
    w["future_timestamp"] = (t["ordered_at"] > ex.now).to_numpy()
    w["net_above_list"] = (t["net_amount"].abs() > t["list_amount"].abs() + 0.01).to_numpy()
    w["return_sign_mismatch"] = ((t["quantity"] < 0) & (t["net_amount"] > 0)).to_numpy()
    a = staged["assignments"]
    complete = a.dropna(subset=["promotion_id", "customer_id", "arm"])
    arms = complete.groupby(["promotion_id", "customer_id"])["arm"].nunique()
    both = arms[arms > 1].index
    pair = pd.MultiIndex.from_frame(a[["promotion_id", "customer_id"]])
    warnings["assignments"]["customer_in_both_arms"] = pair.isin(both)
    warnings["assignments"]["future_timestamp"] = (a["assigned_at"] > ex.now).to_numpy()

    summary = {"rows_read": {n: len(df) for n, df in staged.items()},
               "rejects": {n: r.counts() for n, r in reasons.items() if r.counts()},
               "warnings": {}}
    for name, rules in warnings.items():
        kept = reasons[name].accepted
        counts = {rule: int((mask & kept).sum()) for rule, mask in rules.items()}
        counts = {rule: n for rule, n in counts.items() if n}
        if counts:
            summary["warnings"][name] = counts
    accepted = {n: staged[n][reasons[n].accepted].drop(columns=[c for c in staged[n].columns if c.startswith("_")])
                for n in staged}
    tx = accepted["transactions"]
    list_amount = tx["list_amount"].fillna(tx["net_amount"] + tx["discount_amount"]).fillna(tx["net_amount"])
    tx["discount_amount"] = tx["discount_amount"].fillna(tx["list_amount"] - tx["net_amount"]).fillna(0.0)
    tx["list_amount"] = list_amount
    return summary, accepted


# ---------------------------------------------------------------- the panels

def week_start(d: pd.Series) -> pd.Series:
    return d - pd.to_timedelta(d.dt.weekday, unit="D")


def build_orders(ex: Export, t: pd.DataFrame) -> pd.DataFrame:
    margin = ex.margin_rate
    lines = t.assign(
        cost_amount=t["list_amount"] * (1 - margin) if margin is not None else np.nan,
        deal_line=t["promotion_id"].notna() | (t["discount_amount"] > 0),
    )
    lines["cost_missing"] = lines["cost_amount"].isna()
    o = lines.groupby(["customer_id", "order_id"], sort=False).agg(
        ordered_at=("ordered_at", "min"), lines=("ordered_at", "size"), quantity=("quantity", "sum"),
        net_amount=("net_amount", "sum"), list_amount=("list_amount", "sum"),
        discount_amount=("discount_amount", "sum"), cost_amount=("cost_amount", "sum"),
        cost_missing=("cost_missing", "any"), is_deal=("deal_line", "any"),
    )
    # min() of text with missing values fails in pandas: the promoted lines alone.
    promoted = lines[lines["promotion_id"].notna()]
    o["promotion_id"] = promoted.groupby(["customer_id", "order_id"])["promotion_id"].min()
    o = o.reset_index()
    o.loc[o["cost_missing"], "cost_amount"] = np.nan
    o["ordered_on"] = o["ordered_at"].dt.normalize()
    o["margin_amount"] = o["net_amount"] - o["cost_amount"]
    o["is_return"] = o["net_amount"] < -0.005  # as liftlag: below minus half a cent
    o["depth"] = np.where(o["list_amount"] > 0, o["discount_amount"].clip(lower=0) / o["list_amount"], 0.0)
    return o[["order_id", "customer_id", "ordered_at", "ordered_on", "lines", "quantity", "net_amount",
              "list_amount", "discount_amount", "cost_amount", "margin_amount", "is_deal", "is_return",
              "promotion_id", "depth"]]


def build_campaign_assignments(a: pd.DataFrame, p: pd.DataFrame) -> pd.DataFrame:
    first = (a.sort_values(["promotion_id", "customer_id", "assigned_at", "arm"], na_position="first")
              .drop_duplicates(["promotion_id", "customer_id"], keep="first"))
    promos = p[["promotion_id", "audience", "starts_at", "ends_at"]].assign(
        starts_on=p["starts_at"].dt.normalize(), ends_on=p["ends_at"].dt.normalize())
    ca = first[["promotion_id", "customer_id", "arm", "assigned_at"]].merge(
        promos[["promotion_id", "audience", "starts_on", "ends_on"]], on="promotion_id", how="inner")
    return ca


def promotion_weeks(p: pd.DataFrame) -> pd.DataFrame:
    rows = []
    for promo in p.itertuples():
        weeks = pd.date_range(promo.starts_at.normalize() - pd.Timedelta(days=promo.starts_at.weekday()),
                              promo.ends_at.normalize() - pd.Timedelta(days=promo.ends_at.weekday()), freq="7D")
        rows += [(promo.promotion_id, promo.audience, w) for w in weeks]
    return pd.DataFrame(rows, columns=["promotion_id", "audience", "week_on"])


def build_customer_periods(o: pd.DataFrame, ca: pd.DataFrame, p: pd.DataFrame) -> pd.DataFrame:
    weekly = (o.assign(week_on=week_start(o["ordered_on"]), purchase=~o["is_return"],
                       deal=o["is_deal"] & ~o["is_return"])
               .groupby(["customer_id", "week_on"], sort=False)
               .agg(orders=("purchase", "sum"), net_amount=("net_amount", "sum"),
                    discount_amount=("discount_amount", "sum"), deal_orders=("deal", "sum"))
               .reset_index())
    pw = promotion_weeks(p)
    broadcast = set(pw.loc[pw["audience"] == "broadcast", "week_on"])
    assigned = (ca.merge(pw[["promotion_id", "week_on"]], on="promotion_id")
                  .assign(is_coupon_active=lambda d: d["arm"] == "treatment",
                          is_holdout_active=lambda d: d["arm"] == "holdout")
                  .groupby(["customer_id", "week_on"], sort=False)[["is_coupon_active", "is_holdout_active"]].any()
                  .reset_index())
    treated = ca[ca["arm"] == "treatment"]
    arrivals = (treated.assign(week_on=week_start(treated["assigned_at"].dt.normalize()))
                       .groupby(["customer_id", "week_on"], sort=False).size().rename("coupons").reset_index())
    facts = pd.concat([weekly, assigned, arrivals], ignore_index=True)
    facts[["orders", "net_amount", "discount_amount", "deal_orders", "coupons"]] = facts[
        ["orders", "net_amount", "discount_amount", "deal_orders", "coupons"]].fillna(0)
    for col in ("is_coupon_active", "is_holdout_active"):
        facts[col] = facts[col].eq(True)
    weeks = (facts.groupby(["customer_id", "week_on"])
                  .agg(orders=("orders", "sum"), net_amount=("net_amount", "sum"),
                       discount_amount=("discount_amount", "sum"), deal_orders=("deal_orders", "sum"),
                       is_coupon_active=("is_coupon_active", "any"), is_holdout_active=("is_holdout_active", "any"),
                       coupons=("coupons", "sum"))
                  .reset_index())  # sorted by customer, then week
    weeks["coupons_received"] = weeks.groupby("customer_id")["coupons"].cumsum().astype("int64")
    weeks["is_broadcast_running"] = weeks["week_on"].isin(broadcast)
    weeks["orders"] = weeks["orders"].astype("int64")
    weeks["deal_orders"] = weeks["deal_orders"].astype("int64")
    return weeks[["customer_id", "week_on", "orders", "net_amount", "discount_amount", "deal_orders",
                  "is_broadcast_running", "is_coupon_active", "is_holdout_active", "coupons_received"]]


def as_ints(s: pd.Series) -> np.ndarray:
    return s.to_numpy(dtype="datetime64[ns]").view("int64")


def build_purchase_gaps(o: pd.DataFrame, ca: pd.DataFrame, p: pd.DataFrame) -> pd.DataFrame:
    purchases = o.loc[~o["is_return"], ["customer_id", "order_id", "ordered_at", "ordered_on", "is_deal", "depth",
                                        "promotion_id"]].rename(columns={"ordered_at": "event_at"})
    purchases["kind"] = 1
    coupons = ca.loc[ca["arm"] == "treatment", ["customer_id", "assigned_at", "starts_on", "ends_on"]]
    coupons = coupons.rename(columns={"assigned_at": "event_at"}).assign(kind=0)
    ev = pd.concat([purchases, coupons], ignore_index=True)
    ev = ev.sort_values(["customer_id", "event_at", "kind", "order_id"], na_position="first", kind="stable")
    is_coupon = (ev["kind"] == 0).to_numpy()
    ev["coupon"] = is_coupon.astype("int64")
    ev["coupon_at"] = np.where(is_coupon, as_ints(ev["event_at"]), NAT)
    ev["held_starts"] = np.where(is_coupon, as_ints(ev["starts_on"]), NAT)
    ev["held_ends"] = np.where(is_coupon, as_ints(ev["ends_on"]), NAT)
    g = ev.groupby("customer_id", sort=False)
    ev["coupons_received"] = g["coupon"].cumsum()
    for col in ("coupon_at", "held_starts", "held_ends"):
        ev[col] = g[col].cummax()
    gaps = ev[ev["kind"] == 1].copy()
    for col in ("coupon_at", "held_starts", "held_ends"):
        gaps[col] = pd.to_datetime(gaps[col].where(gaps[col] != NAT))
    gaps["next_ordered_on"] = gaps.groupby("customer_id", sort=False)["ordered_on"].shift(-1)
    export_end = o["ordered_on"].max()
    gaps["days_to_next_order"] = (gaps["next_ordered_on"].fillna(export_end) - gaps["ordered_on"]).dt.days.astype("int32")
    gaps["is_next_observed"] = gaps["next_ordered_on"].notna()
    gaps["days_since_last_coupon"] = (gaps["ordered_on"] - gaps["coupon_at"].dt.normalize()).dt.days.astype("Int32")
    broadcast_day = np.zeros(len(gaps), dtype=bool)
    for promo in p[p["audience"] == "broadcast"].itertuples():
        broadcast_day |= ((gaps["ordered_on"] >= promo.starts_at.normalize())
                          & (gaps["ordered_on"] <= promo.ends_at.normalize())).to_numpy()
    held = (gaps["ordered_on"] >= gaps["held_starts"]) & (gaps["ordered_on"] <= gaps["held_ends"])
    gaps["is_promotion_running"] = broadcast_day | held.to_numpy()
    gaps["coupons_received"] = gaps["coupons_received"].astype("int64")
    return gaps[["customer_id", "order_id", "ordered_on", "next_ordered_on", "days_to_next_order", "is_next_observed",
                 "is_deal", "depth", "promotion_id", "days_since_last_coupon", "coupons_received",
                 "is_promotion_running"]]


def quarter_start(d: pd.Series) -> pd.Series:
    return pd.to_datetime(pd.DataFrame({"year": d.dt.year, "month": (d.dt.month - 1) // 3 * 3 + 1, "day": 1}))


def quarter_label(quarter_on: pd.Series) -> pd.Series:
    return quarter_on.dt.year.astype(str) + "Q" + quarter_on.dt.quarter.astype(str)


def build_customer_quarters(o: pd.DataFrame) -> pd.DataFrame:
    quarter_on = quarter_start(o["ordered_on"])
    purchase = ~o["is_return"]
    deal = purchase & o["is_deal"]
    q = (o.assign(quarter_on=quarter_on, purchase=purchase, deal=deal,
                  deal_net=o["net_amount"].where(o["is_deal"], 0.0), deal_depth=o["depth"].where(deal))
          .groupby(["customer_id", "quarter_on"], sort=False)
          .agg(orders=("purchase", "sum"), deal_orders=("deal", "sum"), net_amount=("net_amount", "sum"),
               deal_net_amount=("deal_net", "sum"), discount_amount=("discount_amount", "sum"),
               mean_depth=("deal_depth", "mean"))
          .reset_index())
    q["quarter"] = quarter_label(q["quarter_on"])
    return q[["customer_id", "quarter", "quarter_on", "orders", "deal_orders", "net_amount", "deal_net_amount",
              "discount_amount", "mean_depth"]]


def build_customer_quarter_behaviour(o: pd.DataFrame) -> pd.DataFrame:
    bought = o[~o["is_return"]]
    d = bought["ordered_on"]
    q = (bought.assign(quarter_on=quarter_start(d), week_on=week_start(d))
               .groupby(["customer_id", "quarter_on"], sort=False)
               .agg(orders=("order_id", "size"), purchase_days=("ordered_on", "nunique"),
                    purchase_weeks=("week_on", "nunique"), first_on=("ordered_on", "min"),
                    last_on=("ordered_on", "max"), lines=("lines", "sum"), quantity=("quantity", "sum"),
                    net_amount=("net_amount", "sum"), list_amount=("list_amount", "sum"),
                    discount_amount=("discount_amount", "sum"), deal_orders=("is_deal", "sum"),
                    max_depth=("depth", "max"))
               .reset_index())
    q["quarter"] = quarter_label(q["quarter_on"])
    q["active_span_days"] = (q["last_on"] - q["first_on"]).dt.days.astype("int32")
    q["max_depth"] = q["max_depth"].fillna(0.0)
    for col in ("orders", "purchase_days", "purchase_weeks", "lines", "deal_orders"):
        q[col] = q[col].astype("int64")
    return q[["customer_id", "quarter", "quarter_on", "orders", "purchase_days", "purchase_weeks", "active_span_days",
              "lines", "quantity", "net_amount", "list_amount", "discount_amount", "deal_orders", "max_depth"]]


def build_segment_days(t: pd.DataFrame) -> pd.DataFrame:
    # The peers read no products table, so no line has a category (as in liftlag without one).
    lines = t.assign(day_on=t["ordered_at"].dt.normalize(), category=None,
                     bought_order=t["order_id"].where(t["quantity"] > 0))
    segmented = pd.concat(
        [lines[lines[kind].notna()].assign(segment_kind=kind, segment=lines[kind]) for kind in ("category", "channel")],
        ignore_index=True)
    days = (segmented.groupby(["day_on", "segment_kind", "segment"], sort=False)
                     .agg(orders=("bought_order", "nunique"), net_amount=("net_amount", "sum"),
                          deal_lines=("promotion_id", "count"))
                     .reset_index())
    days["orders"] = days["orders"].astype("int64")
    days["deal_lines"] = days["deal_lines"].astype("int64")
    return days[["day_on", "segment_kind", "segment", "orders", "net_amount", "deal_lines"]]


def build_campaign_windows(ex: Export, o: pd.DataFrame, ca: pd.DataFrame, t: pd.DataFrame) -> pd.DataFrame:
    targeted = ca.loc[ca["audience"] == "targeted", ["promotion_id", "customer_id", "arm", "assigned_at",
                                                     "starts_on", "ends_on"]]
    pre = pd.Timedelta(days=ex.pre_period_days)
    holdouts = targeted.groupby("promotion_id")["arm"].agg(lambda s: (s == "holdout").sum())
    comparison = []
    for pid in holdouts[holdouts == 0].index:
        rows = targeted[targeted["promotion_id"] == pid]
        starts, ends = rows["starts_on"].min(), rows["ends_on"].min()
        buyers = o.loc[(o["ordered_on"] < starts) & (o["ordered_on"] >= starts - pre), "customer_id"].unique()
        buyers = np.setdiff1d(buyers, rows["customer_id"].to_numpy())
        comparison.append(pd.DataFrame({"promotion_id": pid, "customer_id": buyers, "arm": "comparison",
                                        "assigned_at": pd.NaT, "starts_on": starts, "ends_on": ends}))
    a = pd.concat([targeted, *comparison], ignore_index=True)
    a["assigned_at"] = a["assigned_at"].astype("datetime64[ns]")
    a["after_ends_on"] = a["ends_on"] + pd.Timedelta(days=ex.after_days)
    a["pre_period_on"] = a["starts_on"] - pre
    a["pre_window_on"] = a["starts_on"] - (a["ends_on"] - a["starts_on"] + pd.Timedelta(days=1))
    keys = ["promotion_id", "customer_id"]

    treated = ca.loc[ca["arm"] == "treatment", ["customer_id", "assigned_at"]].rename(columns={"assigned_at": "earlier_at"})
    past = a[keys + ["assigned_at"]].merge(treated, on="customer_id")
    past = past[past["earlier_at"] < past["assigned_at"]].groupby(keys).size().rename("past_coupons")

    first_seen = o.groupby("customer_id")["ordered_on"].min().rename("first_seen_on")

    placed = a[keys + ["starts_on", "ends_on", "after_ends_on", "pre_period_on", "pre_window_on"]].merge(
        o[["customer_id", "ordered_on", "net_amount", "margin_amount", "is_deal", "is_return"]], on="customer_id")
    placed = placed[(placed["ordered_on"] >= placed[["pre_period_on", "pre_window_on"]].min(axis=1))
                    & (placed["ordered_on"] <= placed["after_ends_on"])]
    purchase = ~placed["is_return"]
    stretch = {
        "pre": placed["ordered_on"] < placed["starts_on"],
        "window": (placed["ordered_on"] >= placed["pre_window_on"]) & (placed["ordered_on"] < placed["starts_on"]),
        "during": (placed["ordered_on"] >= placed["starts_on"]) & (placed["ordered_on"] <= placed["ends_on"]),
        "after": (placed["ordered_on"] > placed["ends_on"]) & (placed["ordered_on"] <= placed["after_ends_on"]),
    }
    cols = {
        "last_pre_order_on": placed["ordered_on"].where(stretch["pre"] & purchase),
        "frequency": stretch["pre"] & purchase,
        "monetary": placed["net_amount"].where(stretch["pre"], 0.0),
        "pre_period_deals": stretch["pre"] & purchase & placed["is_deal"],
    }
    for name, flag in (("pre", "window"), ("during", "during"), ("after", "after")):
        cols[f"{name}_orders"] = stretch[flag] & purchase
        cols[f"{name}_net_amount"] = placed["net_amount"].where(stretch[flag], 0.0)
        cols[f"{name}_margin_amount"] = placed["margin_amount"].where(stretch[flag], 0.0)
    s = pd.DataFrame(cols).assign(promotion_id=placed["promotion_id"], customer_id=placed["customer_id"])
    aggs = {c: ("max" if c == "last_pre_order_on" else "sum") for c in cols}
    s = s.groupby(keys).agg(aggs)

    lines = t.loc[t["promotion_id"].notna(), ["customer_id", "promotion_id", "ordered_at", "discount_amount"]]
    red = lines.merge(a[keys + ["starts_on", "ends_on"]], on=keys)
    day = red["ordered_at"].dt.normalize()
    red = red[(day >= red["starts_on"]) & (day <= red["ends_on"])].groupby(keys)["discount_amount"].sum()

    w = (a.merge(s, on=keys, how="left").merge(past, on=keys, how="left")
          .merge(first_seen, on="customer_id", how="left").merge(red.rename("redeemed_discount"), on=keys, how="left"))
    out = w[keys + ["arm"]].copy()
    out["is_treated"] = w["arm"] == "treatment"
    for c in ("assigned_at", "starts_on", "ends_on", "after_ends_on"):
        out[c] = w[c]
    out["recency_days"] = (w["starts_on"] - w["last_pre_order_on"]).dt.days.astype("Int32")
    frequency = w["frequency"].fillna(0).astype("int64")
    out["frequency"] = frequency
    out["monetary"] = w["monetary"].fillna(0.0)
    out["tenure_days"] = (w["starts_on"] - w["first_seen_on"]).dt.days.where(
        w["first_seen_on"] < w["starts_on"]).astype("Int32")
    out["past_deal_share"] = (w["pre_period_deals"] / frequency).where(frequency > 0)
    out["past_coupons"] = w["past_coupons"].fillna(0).astype("int64")
    for name in ("pre", "during", "after"):
        n = w[f"{name}_orders"].fillna(0).astype("int64")
        out[f"{name}_buyer"] = (n > 0).astype("int32")
        out[f"{name}_orders"] = n
        out[f"{name}_net_amount"] = w[f"{name}_net_amount"].fillna(0.0)
        out[f"{name}_margin_amount"] = w[f"{name}_margin_amount"].fillna(0.0)
    out["redeemed"] = w["redeemed_discount"].notna().astype("int32")
    out["discount_amount"] = w["redeemed_discount"].fillna(0.0)
    order = ["promotion_id", "customer_id", "arm", "is_treated", "assigned_at", "starts_on", "ends_on", "after_ends_on",
             "recency_days", "frequency", "monetary", "tenure_days", "past_deal_share", "past_coupons"]
    for name in ("pre", "during", "after"):
        order += [f"{name}_buyer", f"{name}_orders", f"{name}_net_amount", f"{name}_margin_amount"]
    return out[order + ["redeemed", "discount_amount"]]


# ---------------------------------------------------------------- run

def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("export", type=Path)
    ap.add_argument("out", type=Path)
    args = ap.parse_args()
    args.out.mkdir(parents=True, exist_ok=True)
    seconds = {}
    started = step = time.perf_counter()

    def lap(name: str) -> None:
        nonlocal step
        now = time.perf_counter()
        seconds[name] = round(now - step, 2)
        step = now

    ex = load(args.export.resolve())
    if set(ex.tables) - {"transactions", "promotions", "assignments"}:
        raise SystemExit("the peers read transactions, promotions and assignments only")
    staged = {name: stage(table, read_raw(table)) for name, table in ex.tables.items()}
    lap("read")
    summary, acc = check(ex, staged)
    del staged
    lap("check")
    t, p, a = acc["transactions"], acc["promotions"], acc["assignments"]
    panels = {"campaign_assignments": build_campaign_assignments(a, p)}
    ca = panels["campaign_assignments"]
    panels["orders"] = o = build_orders(ex, t)
    panels["customer_periods"] = build_customer_periods(o, ca, p)
    panels["purchase_gaps"] = build_purchase_gaps(o, ca, p)
    panels["campaign_windows"] = build_campaign_windows(ex, o, ca, t)
    panels["customer_quarters"] = build_customer_quarters(o)
    panels["customer_quarter_behaviour"] = build_customer_quarter_behaviour(o)
    panels["segment_days"] = build_segment_days(t)
    lap("panels")
    for name, df in panels.items():
        df.to_parquet(args.out / f"{name}.parquet", index=False)
    lap("write")
    summary["rows"] = {name: len(df) for name, df in panels.items()}
    summary["seconds"] = {**seconds, "total": round(time.perf_counter() - started, 2)}
    (args.out / "check.json").write_text(json.dumps(summary, indent=1))
    print(json.dumps(summary))


if __name__ == "__main__":
    main()
