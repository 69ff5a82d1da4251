"""The polars peer: liftlag's check and panels as an analyst would write them with polars.

Usage: python bench/peers/polars_peer.py EXPORT_DIR OUT_DIR

Reads the export that ``bench/generate_export.py`` wrote (its ``liftlag.toml`` names the files
and the column mapping) with ``pl.scan_parquet`` / ``pl.scan_csv`` (lazy), types the columns and
collects each table once with its row facts, then computes:

- the check: every row of transactions, promotions and assignments is accepted or rejected, a
  rejected row's reason being the first rejection rule it trips, in liftlag's order
  (missing_required, unparseable_value, timestamp_beyond_horizon, duplicate_row, duplicate_key,
  value_not_allowed, ends_before_starts, unknown_promotion); warnings (rows kept) are counted per
  rule (discount_deeper_than_depth, order_outside_promotion_dates, customer_in_both_arms,
  future_timestamp, net_above_list, unparseable_optional, return_sign_mismatch);
- all eight panels, with liftlag's columns and rules, as lazy queries over the accepted rows:
  campaign_assignments, orders, customer_periods, purchase_gaps, campaign_windows,
  customer_quarters, customer_quarter_behaviour, segment_days (its category segments need a
  products table, which the peers do not read: only the channel segments, as liftlag builds
  them without one).

Writes ``OUT_DIR/check.json`` (rows read, rejected rows per table and reason, warned rows per
table and rule, rows per panel, seconds per step) and ``OUT_DIR/<panel>.parquet``; prints the
JSON on one line.

Covered exactly for the benchmark exports (Parquet order lines, CSV promotions and assignments,
no customers or products table). Not covered: text timestamps are parsed in the ISO layouts
``YYYY-MM-DD[ HH:MM:SS[.f]]`` and ``YYYY-MM-DDTHH:MM:SS`` only (no UTC offsets); a Parquet NaN
amount counts as unparseable, as in liftlag; the customers and products tables (first_seen_at,
unit costs) are not read. Rejected-row details, examples and the sanity gates are not produced
(only their counts are compared).
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import polars as pl

sys.path.insert(0, str(Path(__file__).resolve().parent))
from export_config import ALLOWED, CONTRACT, REJECT_RULES, Export, Table, load  # noqa: E402

DATE = pl.Date
TIME = pl.Datetime("us")


# ---------------------------------------------------------------- reading and typing

def scan(table: Table) -> pl.LazyFrame:
    wanted = {table.export_column(c): c for c, _, _ in CONTRACT[table.name]}
    if table.format == "parquet":
        lf = pl.scan_parquet(table.files)
    else:
        lf = pl.concat([pl.scan_csv(f, infer_schema=False) for f in table.files],
                       how="diagonal")
    present = [c for c in lf.collect_schema().names() if c in wanted]
    return lf.select(present).rename({c: wanted[c] for c in present})


def parse_time(col: pl.Expr) -> pl.Expr:
    text = col.str.strip_chars(" ")
    zoned = [text.str.to_datetime(f, strict=False, time_unit="us", time_zone="UTC").dt.replace_time_zone(None)
             for f in ("%Y-%m-%dT%H:%M:%S%.f%z", "%Y-%m-%d %H:%M:%S%.f%z")]  # an offset: the time in UTC
    return pl.coalesce(
        *zoned,
        text.str.to_datetime("%Y-%m-%d %H:%M:%S%.f", strict=False, time_unit="us"),
        text.str.to_datetime("%Y-%m-%dT%H:%M:%S%.f", strict=False, time_unit="us"),
        text.str.to_date("%Y-%m-%d", strict=False).cast(TIME),
    )


def stage(table: Table) -> pl.DataFrame:
    """Typed columns plus the row facts the rules need, collected once."""
    lf = scan(table)
    schema = lf.collect_schema()
    csv = table.format == "csv"
    typed, missing, unparseable, optional_bad, raws = [], [], [], [], []
    for name, kind, required in CONTRACT[table.name]:
        if name not in schema:
            dtype = {"text": pl.String, "time": TIME, "number": pl.Float64}[kind]
            typed.append(pl.lit(None, dtype=dtype).alias(name))
            continue
        raw = pl.col(name)
        is_text = schema[name] == pl.String
        blank = (raw.is_null() | (raw.str.strip_chars(" ") == "")) if is_text else raw.is_null()
        if kind == "text":
            value = raw.str.strip_chars(" ") if csv else raw
            if name in table.values:
                value = value.replace(table.values[name])
        elif kind == "time":
            value = parse_time(raw) if is_text else raw.cast(TIME)
        else:
            number = raw.cast(pl.Float64, strict=False)
            value = pl.when(number.is_finite()).then(number)
        value = pl.when(blank).then(None).otherwise(value)
        typed.append(value.alias(name))
        bad = ~blank & value.is_null()
        (missing.append(blank) if required else None)
        (unparseable if required else optional_bad).append(bad)
        raws.append(raw.cast(pl.String).fill_null(""))
    facts = [
        pl.any_horizontal(missing).alias("_missing") if missing else pl.lit(False).alias("_missing"),
        pl.any_horizontal(unparseable).alias("_unparseable") if unparseable else pl.lit(False).alias("_unparseable"),
        pl.any_horizontal(optional_bad).alias("_unparseable_optional") if optional_bad
        else pl.lit(False).alias("_unparseable_optional"),
    ]
    staged = lf.with_row_index("_row").with_columns(*facts)
    problem = pl.col("_missing") | pl.col("_unparseable") | pl.col("_unparseable_optional")
    # The original text stands for the row in the duplicate test where a value did not parse.
    staged = staged.with_columns(
        pl.when(problem).then(pl.concat_str(raws, separator="|")).alias("_raw_problem"), *typed)
    return staged.collect()


# ---------------------------------------------------------------- the check

def first_reason(hits: list[tuple[str, pl.Expr]]) -> pl.Expr:
    expr = pl.lit(None, dtype=pl.String)
    for rule, hit in reversed(hits):
        expr = pl.when(hit.fill_null(False)).then(pl.lit(rule)).otherwise(expr)
    return expr.alias("_reason")


def beyond(col: str, earliest, latest) -> pl.Expr:
    c = pl.col(col)
    return c.is_not_null() & ((c > latest) | (c < earliest))


def check(ex: Export, staged: dict[str, pl.DataFrame]):
    cols = {n: [c for c, _, _ in CONTRACT[n]] + ["_raw_problem"] for n in staged}
    base = [("missing_required", pl.col("_missing")), ("unparseable_value", pl.col("_unparseable"))]
    p = staged["promotions"]
    allowed = {col: pl.col(col).is_not_null() & ~pl.col(col).is_in(list(values))
               for (tbl, col), values in ALLOWED.items()}
    p = p.with_columns(first_reason(base + [
        ("timestamp_beyond_horizon", beyond("starts_at", ex.horizon_earliest, ex.horizon_promotion_latest)
         | beyond("ends_at", ex.horizon_earliest, ex.horizon_promotion_latest)),
        ("duplicate_row", ~pl.struct(cols["promotions"]).is_first_distinct()),
        ("duplicate_key", pl.col("promotion_id").is_not_null() & ~pl.col("promotion_id").is_first_distinct()),
        ("value_not_allowed", allowed["mechanic"] | allowed["audience"]),
        ("ends_before_starts", pl.col("ends_at").dt.date() < pl.col("starts_at").dt.date()),
    ]))
    promotions = p.filter(pl.col("_reason").is_null())
    known = promotions["promotion_id"].implode()
    unknown = ("unknown_promotion", pl.col("promotion_id").is_not_null() & ~pl.col("promotion_id").is_in(known))
    t = staged["transactions"].with_columns(first_reason(base + [
        ("timestamp_beyond_horizon", beyond("ordered_at", ex.horizon_earliest, ex.horizon_latest)),
        ("duplicate_row", ~pl.struct(cols["transactions"]).is_first_distinct()),
        unknown,
    ]))
    a = staged["assignments"].with_columns(first_reason(base + [
        ("timestamp_beyond_horizon", beyond("assigned_at", ex.horizon_earliest, ex.horizon_latest)),
        ("duplicate_row", ~pl.struct(cols["assignments"]).is_first_distinct()),
        ("value_not_allowed", allowed["arm"]),
        unknown,
    ]))

    depths = promotions.filter(pl.col("depth").is_not_null()).select(
        "promotion_id", pl.col("mechanic").alias("_mechanic"), pl.col("depth").alias("_depth"))
    days = promotions.select("promotion_id", pl.col("starts_at").dt.date().alias("_first_day"),
                             pl.col("ends_at").dt.date().alias("_last_day"))
    discount = pl.coalesce("discount_amount", pl.col("list_amount") - pl.col("net_amount"))
    on = pl.col("ordered_at").dt.date()
    t_warn = {
        "discount_deeper_than_depth":
            ((pl.col("_mechanic") == "percent_off") & (pl.col("list_amount") > 0)
             & (discount / pl.col("list_amount") > pl.col("_depth") + 0.005))
            | ((pl.col("_mechanic") == "amount_off") & (discount > pl.col("_depth") + 0.005)),
        "order_outside_promotion_dates":
            pl.col("promotion_id").is_not_null() & on.is_not_null() & (pl.col("quantity") >= 0)
            & pl.col("_first_day").is_not_null() & ((on < pl.col("_first_day")) | (on > pl.col("_last_day"))),
        "future_timestamp": pl.col("ordered_at") > ex.now,
        "net_above_list": pl.col("net_amount").abs() > pl.col("list_amount").abs() + 0.01,
        "unparseable_optional": pl.col("_unparseable_optional"),
        "return_sign_mismatch": (pl.col("quantity") < 0) & (pl.col("net_amount") > 0),
    }
    both = (a.filter(pl.col("promotion_id").is_not_null() & pl.col("customer_id").is_not_null()
                     & pl.col("arm").is_not_null())
             .group_by("promotion_id", "customer_id").agg(pl.col("arm").n_unique().alias("_arms"))
             .filter(pl.col("_arms") > 1))
    a_warn = {"customer_in_both_arms": pl.col("_arms").is_not_null(), "future_timestamp": pl.col("assigned_at") > ex.now}
    p_warn = {"unparseable_optional": pl.col("_unparseable_optional")}
    kept = pl.col("_reason").is_null()
    warn_frames = {
        "transactions": t.lazy().filter(kept).join(depths.lazy(), on="promotion_id", how="left")
                         .join(days.lazy(), on="promotion_id", how="left"),
        "assignments": a.lazy().filter(kept).join(both.lazy(), on=["promotion_id", "customer_id"], how="left"),
        "promotions": p.lazy().filter(kept),
    }
    rules = {"transactions": t_warn, "assignments": a_warn, "promotions": p_warn}
    summary = {"rows_read": {n: df.height for n, df in staged.items()}, "rejects": {}, "warnings": {}}
    for name, df in (("transactions", t), ("promotions", p), ("assignments", a)):
        counts = df.filter(pl.col("_reason").is_not_null()).group_by("_reason").len()
        if counts.height:
            summary["rejects"][name] = {r: int(n) for r, n in counts.iter_rows()}
        warned = warn_frames[name].select(
            [expr.fill_null(False).sum().alias(rule) for rule, expr in rules[name].items()]).collect().row(0, named=True)
        warned = {rule: int(n) for rule, n in warned.items() if n}
        if warned:
            summary["warnings"][name] = warned
    drop = [c for c in t.columns if c.startswith("_")]
    t_acc = t.lazy().filter(kept).select(pl.exclude(drop)).with_columns(
        pl.coalesce("list_amount", pl.col("net_amount") + pl.col("discount_amount"), "net_amount").alias("list_amount"),
        pl.coalesce("discount_amount", pl.col("list_amount") - pl.col("net_amount"), pl.lit(0.0)).alias("discount_amount"),
    )
    accepted = {"transactions": t_acc,
                "promotions": promotions.lazy().select(pl.exclude([c for c in p.columns if c.startswith("_")])),
                "assignments": a.lazy().filter(kept).select(pl.exclude([c for c in a.columns if c.startswith("_")]))}
    return summary, accepted


# ---------------------------------------------------------------- the panels

def build_orders(ex: Export, t: pl.LazyFrame) -> pl.LazyFrame:
    cost = pl.col("list_amount") * (1 - ex.margin_rate) if ex.margin_rate is not None else pl.lit(None, dtype=pl.Float64)
    return (
        t.with_columns(cost.alias("cost_amount"))
        .group_by("customer_id", "order_id")
        .agg(
            pl.col("ordered_at").min(), pl.len().alias("lines"), pl.col("quantity").sum(), pl.col("net_amount").sum(),
            pl.col("list_amount").sum(), pl.col("discount_amount").sum(),
            pl.when(pl.col("cost_amount").null_count() == 0).then(pl.col("cost_amount").sum()).alias("cost_amount"),
            (pl.col("promotion_id").is_not_null() | (pl.col("discount_amount") > 0)).any().alias("is_deal"),
            pl.col("promotion_id").min(),
        )
        .select(
            "order_id", "customer_id", "ordered_at", pl.col("ordered_at").dt.date().alias("ordered_on"), "lines",
            "quantity", "net_amount", "list_amount", "discount_amount", "cost_amount",
            (pl.col("net_amount") - pl.col("cost_amount")).alias("margin_amount"), "is_deal",
            (pl.col("net_amount") < -0.005).alias("is_return"), "promotion_id",
            pl.when(pl.col("list_amount") > 0).then(pl.col("discount_amount").clip(lower_bound=0) / pl.col("list_amount"))
            .otherwise(0.0).alias("depth"),
        )
    )


def build_campaign_assignments(a: pl.LazyFrame, p: pl.LazyFrame) -> pl.LazyFrame:
    first = (a.sort("promotion_id", "customer_id", "assigned_at", "arm", nulls_last=False)
              .unique(["promotion_id", "customer_id"], keep="first", maintain_order=True))
    promos = p.select("promotion_id", "audience", pl.col("starts_at").dt.date().alias("starts_on"),
                      pl.col("ends_at").dt.date().alias("ends_on"))
    return first.select("promotion_id", "customer_id", "arm", "assigned_at").join(promos, on="promotion_id")


def week(col: pl.Expr) -> pl.Expr:
    return col.dt.truncate("1w")  # Monday


def build_customer_periods(o: pl.LazyFrame, ca: pl.LazyFrame, p: pl.LazyFrame) -> pl.LazyFrame:
    purchase = ~pl.col("is_return")
    weekly = o.group_by("customer_id", week(pl.col("ordered_on")).alias("week_on")).agg(
        purchase.sum().cast(pl.Int64).alias("orders"), pl.col("net_amount").sum(), pl.col("discount_amount").sum(),
        (pl.col("is_deal") & purchase).sum().cast(pl.Int64).alias("deal_orders"))
    pw = p.select("promotion_id", "audience", pl.date_ranges(week(pl.col("starts_at").dt.date()),
                                                             week(pl.col("ends_at").dt.date()), "1w").alias("week_on")
                  ).explode("week_on")
    broadcast = pw.filter(pl.col("audience") == "broadcast").select("week_on").unique().with_columns(
        pl.lit(True).alias("is_broadcast_running"))
    assigned = ca.join(pw.select("promotion_id", "week_on"), on="promotion_id").group_by("customer_id", "week_on").agg(
        (pl.col("arm") == "treatment").any().alias("is_coupon_active"),
        (pl.col("arm") == "holdout").any().alias("is_holdout_active"))
    arrivals = (ca.filter(pl.col("arm") == "treatment")
                  .group_by("customer_id", week(pl.col("assigned_at").dt.date()).alias("week_on"))
                  .agg(pl.len().cast(pl.Int64).alias("coupons")))
    facts = pl.concat([weekly, assigned, arrivals], how="diagonal_relaxed")
    return (
        facts.group_by("customer_id", "week_on")
        .agg(pl.col("orders").sum(), pl.col("net_amount").sum(), pl.col("discount_amount").sum(),
             pl.col("deal_orders").sum(), pl.col("is_coupon_active").fill_null(False).any(),
             pl.col("is_holdout_active").fill_null(False).any(), pl.col("coupons").sum())
        .join(broadcast, on="week_on", how="left")
        .select("customer_id", "week_on", "orders", "net_amount", "discount_amount", "deal_orders",
                pl.col("is_broadcast_running").fill_null(False), "is_coupon_active", "is_holdout_active",
                pl.col("coupons").cum_sum().over("customer_id", order_by="week_on").alias("coupons_received"))
    )


def build_purchase_gaps(o: pl.LazyFrame, ca: pl.LazyFrame, p: pl.LazyFrame, broadcast_days: list) -> pl.LazyFrame:
    purchases = o.filter(~pl.col("is_return")).select(
        "customer_id", pl.col("ordered_at").alias("event_at"), pl.lit(1).alias("kind"), "order_id", "ordered_on",
        "is_deal", "depth", "promotion_id")
    coupons = ca.filter(pl.col("arm") == "treatment").select(
        "customer_id", pl.col("assigned_at").alias("event_at"), pl.lit(0).alias("kind"),
        pl.col("assigned_at").alias("coupon_at"), pl.col("starts_on").alias("held_starts"),
        pl.col("ends_on").alias("held_ends"))
    end = o.select(pl.col("ordered_on").max().alias("export_end_on"))
    ev = pl.concat([purchases, coupons], how="diagonal").sort("customer_id", "event_at", "kind", "order_id",
                                                             nulls_last=False)
    # cum_max leaves nulls where the row has none: carry the running maximum forward.
    cum = [pl.col(c).cum_max().forward_fill().over("customer_id").alias(c) for c in ("coupon_at", "held_starts", "held_ends")]
    ev = ev.with_columns((1 - pl.col("kind")).cum_sum().over("customer_id").alias("coupons_received"), *cum)
    gaps = ev.filter(pl.col("kind") == 1).with_columns(
        pl.col("ordered_on").shift(-1).over("customer_id").alias("next_ordered_on"))
    broadcast = pl.lit(False)
    for starts, ends in broadcast_days:
        broadcast = broadcast | pl.col("ordered_on").is_between(starts, ends)
    held = pl.col("ordered_on").is_between(pl.col("held_starts"), pl.col("held_ends")).fill_null(False)
    return gaps.join(end, how="cross").select(
        "customer_id", "order_id", "ordered_on", "next_ordered_on",
        (pl.coalesce("next_ordered_on", "export_end_on") - pl.col("ordered_on")).dt.total_days().cast(pl.Int32)
        .alias("days_to_next_order"),
        pl.col("next_ordered_on").is_not_null().alias("is_next_observed"), "is_deal", "depth", "promotion_id",
        (pl.col("ordered_on") - pl.col("coupon_at").dt.date()).dt.total_days().cast(pl.Int32).alias("days_since_last_coupon"),
        pl.col("coupons_received").cast(pl.Int64), (broadcast | held).alias("is_promotion_running"),
    )


def build_customer_quarters(o: pl.LazyFrame) -> pl.LazyFrame:
    purchase = ~pl.col("is_return")
    deal = purchase & pl.col("is_deal")
    return (
        o.group_by("customer_id", pl.col("ordered_on").dt.truncate("1q").alias("quarter_on"))
        .agg(purchase.sum().cast(pl.Int64).alias("orders"), deal.sum().cast(pl.Int64).alias("deal_orders"),
             pl.col("net_amount").sum(),
             pl.col("net_amount").filter(pl.col("is_deal")).sum().alias("deal_net_amount"),
             pl.col("discount_amount").sum(), pl.col("depth").filter(deal).mean().alias("mean_depth"))
        .select("customer_id", (pl.col("quarter_on").dt.year().cast(pl.String) + "Q"
                                + pl.col("quarter_on").dt.quarter().cast(pl.String)).alias("quarter"),
                "quarter_on", "orders", "deal_orders", "net_amount", "deal_net_amount", "discount_amount", "mean_depth")
    )


def build_customer_quarter_behaviour(o: pl.LazyFrame) -> pl.LazyFrame:
    d = pl.col("ordered_on")
    return (
        o.filter(~pl.col("is_return"))
        .group_by("customer_id", d.dt.truncate("1q").alias("quarter_on"))
        .agg(pl.len().cast(pl.Int64).alias("orders"), d.n_unique().cast(pl.Int64).alias("purchase_days"),
             week(d).n_unique().cast(pl.Int64).alias("purchase_weeks"),
             (d.max() - d.min()).dt.total_days().cast(pl.Int32).alias("active_span_days"),
             pl.col("lines").sum().cast(pl.Int64), pl.col("quantity").sum(), pl.col("net_amount").sum(),
             pl.col("list_amount").sum(), pl.col("discount_amount").sum(),
             pl.col("is_deal").sum().cast(pl.Int64).alias("deal_orders"),
             pl.col("depth").max().fill_null(0.0).alias("max_depth"))
        .select("customer_id", (pl.col("quarter_on").dt.year().cast(pl.String) + "Q"
                                + pl.col("quarter_on").dt.quarter().cast(pl.String)).alias("quarter"),
                "quarter_on", "orders", "purchase_days", "purchase_weeks", "active_span_days", "lines", "quantity",
                "net_amount", "list_amount", "discount_amount", "deal_orders", "max_depth")
    )


def build_segment_days(t: pl.LazyFrame) -> pl.LazyFrame:
    # The peers read no products table, so no line has a category (as in liftlag without one).
    lines = t.select(pl.col("ordered_at").dt.date().alias("day_on"), "order_id", "quantity", "net_amount",
                     "promotion_id", "channel", pl.lit(None, dtype=pl.String).alias("category"))
    segmented = pl.concat([
        lines.filter(pl.col(kind).is_not_null()).with_columns(pl.lit(kind).alias("segment_kind"),
                                                              pl.col(kind).alias("segment"))
        for kind in ("category", "channel")])
    return segmented.group_by("day_on", "segment_kind", "segment").agg(
        pl.col("order_id").filter(pl.col("quantity") > 0).n_unique().cast(pl.Int64).alias("orders"),
        pl.col("net_amount").sum(), pl.col("promotion_id").count().cast(pl.Int64).alias("deal_lines"))


def build_campaign_windows(ex: Export, o: pl.LazyFrame, ca: pl.LazyFrame, t: pl.LazyFrame) -> pl.LazyFrame:
    keys = ["promotion_id", "customer_id"]
    targeted = ca.filter(pl.col("audience") == "targeted").select(keys + ["arm", "assigned_at", "starts_on", "ends_on"])
    pre = pl.duration(days=ex.pre_period_days)
    no_holdout = (targeted.group_by("promotion_id")
                  .agg(pl.col("starts_on").min(), pl.col("ends_on").min(), (pl.col("arm") == "holdout").sum().alias("h"))
                  .filter(pl.col("h") == 0).drop("h"))
    comparison = (no_holdout.join(o.select("customer_id", "ordered_on"), how="cross")
                  .filter((pl.col("ordered_on") < pl.col("starts_on")) & (pl.col("ordered_on") >= pl.col("starts_on") - pre))
                  .select(keys + ["starts_on", "ends_on"]).unique()
                  .join(targeted.select(keys), on=keys, how="anti")
                  .with_columns(pl.lit("comparison").alias("arm"), pl.lit(None, dtype=TIME).alias("assigned_at")))
    a = pl.concat([targeted, comparison.select(targeted.collect_schema().names())]).with_columns(
        (pl.col("ends_on") + pl.duration(days=ex.after_days)).alias("after_ends_on"),
        (pl.col("starts_on") - pre).alias("pre_period_on"),
        (pl.col("starts_on") - (pl.col("ends_on") - pl.col("starts_on") + pl.duration(days=1))).alias("pre_window_on"),
    )
    treated = ca.filter(pl.col("arm") == "treatment").select("customer_id", pl.col("assigned_at").alias("earlier_at"))
    past = (a.select(keys + ["assigned_at"]).join(treated, on="customer_id")
             .filter(pl.col("earlier_at") < pl.col("assigned_at")).group_by(keys).agg(pl.len().alias("past_coupons")))
    first_seen = o.group_by("customer_id").agg(pl.col("ordered_on").min().alias("first_seen_on"))
    d = pl.col("ordered_on")
    placed = (a.select(keys + ["starts_on", "ends_on", "after_ends_on", "pre_period_on", "pre_window_on"])
               .join(o.select("customer_id", "ordered_on", "net_amount", "margin_amount", "is_deal", "is_return"),
                     on="customer_id")
               .filter((d >= pl.min_horizontal("pre_period_on", "pre_window_on")) & (d <= pl.col("after_ends_on"))))
    buy = ~pl.col("is_return")
    flags = {"pre": d < pl.col("starts_on"),
             "window": (d >= pl.col("pre_window_on")) & (d < pl.col("starts_on")),
             "during": d.is_between(pl.col("starts_on"), pl.col("ends_on")),
             "after": (d > pl.col("ends_on")) & (d <= pl.col("after_ends_on"))}
    aggs = [d.filter(flags["pre"] & buy).max().alias("last_pre_order_on"),
            (flags["pre"] & buy).sum().alias("frequency"),
            pl.col("net_amount").filter(flags["pre"]).sum().alias("monetary"),
            (flags["pre"] & buy & pl.col("is_deal")).sum().alias("pre_period_deals")]
    for name, flag in (("pre", "window"), ("during", "during"), ("after", "after")):
        aggs += [(flags[flag] & buy).sum().alias(f"{name}_orders"),
                 pl.col("net_amount").filter(flags[flag]).sum().alias(f"{name}_net_amount"),
                 pl.col("margin_amount").filter(flags[flag]).sum().alias(f"{name}_margin_amount")]
    stretches = placed.group_by(keys).agg(aggs)
    red = (t.filter(pl.col("promotion_id").is_not_null())
            .select("customer_id", "promotion_id", "ordered_at", "discount_amount")
            .join(a.select(keys + ["starts_on", "ends_on"]), on=keys)
            .filter(pl.col("ordered_at").dt.date().is_between(pl.col("starts_on"), pl.col("ends_on")))
            .group_by(keys).agg(pl.col("discount_amount").sum().alias("redeemed_discount")))
    w = (a.join(stretches, on=keys, how="left").join(past, on=keys, how="left")
          .join(first_seen, on="customer_id", how="left").join(red, on=keys, how="left"))
    freq = pl.col("frequency").fill_null(0).cast(pl.Int64)
    cols = [*keys, "arm", (pl.col("arm") == "treatment").alias("is_treated"), "assigned_at", "starts_on", "ends_on",
            "after_ends_on",
            (pl.col("starts_on") - pl.col("last_pre_order_on")).dt.total_days().cast(pl.Int32).alias("recency_days"),
            freq.alias("frequency"), pl.col("monetary").fill_null(0.0),
            pl.when(pl.col("first_seen_on") < pl.col("starts_on"))
            .then((pl.col("starts_on") - pl.col("first_seen_on")).dt.total_days()).cast(pl.Int32).alias("tenure_days"),
            pl.when(freq > 0).then(pl.col("pre_period_deals") / freq).alias("past_deal_share"),
            pl.col("past_coupons").fill_null(0).cast(pl.Int64)]
    for name in ("pre", "during", "after"):
        n = pl.col(f"{name}_orders").fill_null(0).cast(pl.Int64)
        cols += [(n > 0).cast(pl.Int32).alias(f"{name}_buyer"), n.alias(f"{name}_orders"),
                 pl.col(f"{name}_net_amount").fill_null(0.0), pl.col(f"{name}_margin_amount").fill_null(0.0)]
    cols += [pl.col("redeemed_discount").is_not_null().cast(pl.Int32).alias("redeemed"),
             pl.col("redeemed_discount").fill_null(0.0).alias("discount_amount")]
    return w.select(cols)


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
    staged = {name: stage(table) for name, table in ex.tables.items()}
    lap("read")
    summary, acc = check(ex, staged)
    del staged
    lap("check")
    p = acc["promotions"].collect()
    ca = build_campaign_assignments(acc["assignments"], p.lazy()).collect()
    o = build_orders(ex, acc["transactions"]).collect()
    broadcast_days = (p.filter(pl.col("audience") == "broadcast")
                       .select(pl.col("starts_at").dt.date(), pl.col("ends_at").dt.date()).rows())
    panels = {
        "campaign_assignments": ca,
        "orders": o,
        "customer_periods": build_customer_periods(o.lazy(), ca.lazy(), p.lazy()).collect(),
        "purchase_gaps": build_purchase_gaps(o.lazy(), ca.lazy(), p.lazy(), broadcast_days).collect(),
        "campaign_windows": build_campaign_windows(ex, o.lazy(), ca.lazy(), acc["transactions"]).collect(),
        "customer_quarters": build_customer_quarters(o.lazy()).collect(),
        "customer_quarter_behaviour": build_customer_quarter_behaviour(o.lazy()).collect(),
        "segment_days": build_segment_days(acc["transactions"]).collect(),
    }
    lap("panels")
    for name, df in panels.items():
        df.write_parquet(args.out / f"{name}.parquet")
    lap("write")
    summary["rows"] = {name: df.height for name, df in panels.items()}
    summary["seconds"] = {**seconds, "total": round(time.perf_counter() - started, 2)}
    (args.out / "check.json").write_text(json.dumps(summary, indent=1))
    print(json.dumps(summary))


if __name__ == "__main__":
    main()
