"""Time the acquisition-cohort and broadcast sections at scale on a synthetic orders panel.

Builds, in an in-memory DuckDB, an ``orders`` panel for ``--customers`` customers over 8 quarters
(2025-01-01 .. 2026-12-31; a share of them first seen inside the data, 15% of those acquired with
a deal; about 6 orders a customer) and the checked ``customers`` and ``promotions`` tables (one
broadcast sale, targeted campaigns every six weeks), then runs ``cohorts.analyse`` and
``counterfactual.analyse`` with the shipped settings. Peak RSS is read from the process.

    .venv/bin/python bench/longrun_models_scale.py --customers 1000000
"""

from __future__ import annotations

import argparse
import datetime as dt
import resource
import sys
import time
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from toolkit.config import LongrunSettings, ReportSettings, WindowSettings  # noqa: E402
from toolkit.longrun import cohorts, counterfactual  # noqa: E402

START = dt.date(2025, 1, 1)
DAYS = 730


def build(customers: int, seed: int) -> duckdb.DuckDBPyConnection:
    rng = np.random.default_rng(seed)
    first_seen = np.where(rng.random(customers) < 0.6, -rng.integers(1, 1000, customers),
                          rng.integers(0, DAYS - 30, customers))
    rate = rng.gamma(1.1, 0.009 / 1.1, customers)
    counts = rng.poisson(rate * (DAYS - np.clip(first_seen, 0, None))) + (first_seen >= 0)
    customer = np.repeat(np.arange(customers), counts)
    low = np.clip(first_seen, 0, None)[customer]
    day = low + (rng.random(len(customer)) * (DAYS - low)).astype(int)
    welcome = np.r_[True, customer[1:] != customer[:-1]] & (first_seen[customer] >= 0)
    day = np.where(welcome, first_seen[customer], day)
    is_deal = np.where(welcome, rng.random(len(customer)) < 0.15, rng.random(len(customer)) < 0.2)
    orders = pd.DataFrame({
        "order_id": np.arange(len(customer)).astype(str), "customer_id": customer.astype(str),
        "ordered_on": pd.Timestamp(START) + pd.to_timedelta(day, unit="D"),
        "is_deal": is_deal, "is_return": rng.random(len(customer)) < 0.01,
        "net_amount": rng.gamma(4.0, 12.0, len(customer)),
    })
    con = duckdb.connect()
    con.register("orders_df", orders)
    con.execute("CREATE TABLE orders AS SELECT order_id, customer_id, CAST(ordered_on AS DATE) AS ordered_on, "
                "is_deal, is_return, net_amount FROM orders_df")
    con.unregister("orders_df")
    con.execute("ATTACH ':memory:' AS checked")
    seen = pd.DataFrame({"customer_id": np.arange(customers).astype(str),
                         "first_seen_at": pd.Timestamp(START) + pd.to_timedelta(first_seen, unit="D")})
    con.register("seen_df", seen)
    con.execute("CREATE TABLE checked.customers AS SELECT * FROM seen_df")
    starts = [START + dt.timedelta(days=40 + 42 * k) for k in range(17)]
    promotions = [(f"T{k:02d}", s, s + dt.timedelta(days=9), "targeted") for k, s in enumerate(starts)]
    promotions.append(("B01", dt.date(2025, 11, 21), dt.date(2025, 11, 27), "broadcast"))
    frame = pd.DataFrame(promotions, columns=["promotion_id", "starts_at", "ends_at", "audience"])
    con.register("promotions_df", frame)
    con.execute("CREATE TABLE checked.promotions AS SELECT promotion_id, CAST(starts_at AS TIMESTAMP) AS starts_at, "
                "CAST(ends_at AS TIMESTAMP) AS ends_at, audience FROM promotions_df")
    return con


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--customers", type=int, default=1_000_000)
    parser.add_argument("--seed", type=int, default=7)
    args = parser.parse_args()
    started = time.perf_counter()
    con = build(args.customers, args.seed)
    orders = con.execute("SELECT count(*) FROM orders").fetchall()[0][0]
    print(f"synthetic orders panel: {args.customers:,} customers, {orders:,} orders, "
          f"{time.perf_counter() - started:.1f} s to build")
    settings = type("S", (), {"longrun": LongrunSettings(), "report": ReportSettings(), "windows": WindowSettings()})()
    through = dt.date(2026, 12, 31)
    for name, module in (("cohorts", cohorts), ("counterfactual", counterfactual)):
        started = time.perf_counter()
        tables, _ = module.analyse(con, settings, through)
        rows = {k: len(v) for k, v in tables.items()}
        print(f"{name}: {time.perf_counter() - started:.1f} s  {rows}")
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"peak RSS {peak:.0f} MB")


if __name__ == "__main__":
    main()
