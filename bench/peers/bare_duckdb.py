"""The bare DuckDB job a benchmark compares liftlag's build with: orders, customer-week and gap
tables straight from the generated export's Parquet, no checks, no other panels.

Usage: python bench/peers/bare_duckdb.py EXPORT_DIR OUT.duckdb [--threads 2]

Prints one JSON line: rows per table and seconds. What an analyst would write for these three
tables in one script (common practice, no source); liftlag's `orders`, `customer_periods` and
`purchase_gaps` panels carry more columns and rules (returns, deal flags, coupons, censoring).
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import duckdb

SQL = """
CREATE TABLE orders AS
SELECT customer_id, order_id, min(ordered_at) AS ordered_at, CAST(min(ordered_at) AS DATE) AS ordered_on,
       count(*) AS lines, sum(net_amount) AS net_amount, sum(discount_amount) AS discount_amount,
       bool_or(promotion_id IS NOT NULL OR discount_amount > 0) AS is_deal
FROM read_parquet(?)
GROUP BY customer_id, order_id;

CREATE TABLE customer_weeks AS
SELECT customer_id, CAST(date_trunc('week', ordered_on) AS DATE) AS week_on,
       count(*) FILTER (WHERE net_amount >= -0.005) AS orders, sum(net_amount) AS net_amount
FROM orders GROUP BY ALL;

CREATE TABLE gaps AS
SELECT customer_id, order_id, ordered_on,
       lead(ordered_on) OVER (PARTITION BY customer_id ORDER BY ordered_at, order_id) AS next_ordered_on
FROM orders WHERE net_amount >= -0.005;  -- a return is below minus half a cent, as in liftlag
"""


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("export", type=Path)
    ap.add_argument("out", type=Path)
    ap.add_argument("--threads", type=int, default=2)
    args = ap.parse_args()
    args.out.unlink(missing_ok=True)
    started = time.perf_counter()
    con = duckdb.connect(str(args.out))
    con.execute(f"SET threads = {args.threads}")
    con.execute("SET preserve_insertion_order = false")
    files = str(args.export / "transactions" / "*.parquet")
    for statement in [s for s in SQL.split(";") if s.strip()]:
        con.execute(statement, [files] if "?" in statement else [])
    rows = {t: con.execute(f"SELECT count(*) FROM {t}").fetchall()[0][0] for t in ("orders", "customer_weeks", "gaps")}
    con.close()
    print(json.dumps({"rows": rows, "seconds": round(time.perf_counter() - started, 2)}))


if __name__ == "__main__":
    main()
