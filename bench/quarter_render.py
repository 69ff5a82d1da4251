"""Benchmark: the quarterly report's render step for a quarter of 1M customers, analyses done.

What is timed is everything ``liftlag quarter`` does after the analyses have returned: the
report's own tables (``derive_tables``: the event-study SQL over the ``orders`` and
``campaign_assignments`` panels, the tails, totals and verdict), the HTML (context, charts,
template), the Parquet files and the manifest, and optionally the PDF.

Inputs:

* panels at scale, generated in DuckDB: ``--customers`` customers (default 1,000,000) with about
  ``--orders-per-customer`` orders each over 2025-01-01 to 2026-06-30, and three targeted campaigns
  starting in 2026Q2, each assigning ``--assigned-share`` of the customers (20 % of them to a
  holdout);
* the analyses' results: the demo export's own readouts (campaign tables, timing, long-run), with
  the three 2026Q2 campaigns renamed to the synthetic ones. The results tables hardly grow with
  the number of customers (they are per campaign, decile, day or quarter), so their demo size is
  their size at 1M customers; what grows is the SQL over the panels, which runs at full scale.

Usage::

    .venv/bin/python bench/quarter_render.py                      # 1M customers, HTML only
    .venv/bin/python bench/quarter_render.py --pdf                # and the PDF
    .venv/bin/python bench/quarter_render.py --customers 100000   # smaller

Prints the seconds of each step and appends nothing: copy the figures into bench/quarter_results.md.
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import shutil
import tempfile
import time
import warnings
from pathlib import Path

import duckdb

ROOT = Path(__file__).resolve().parents[1]
QUARTER = "2026Q2"


def build_panels(path: Path, customers: int, orders_per_customer: float, assigned_share: float, seed: int) -> dict:
    """orders and campaign_assignments panels (the columns the report's SQL reads) and promotions."""
    con = duckdb.connect(str(path))
    con.execute("SET threads = 2")
    con.execute(f"SELECT setseed({(seed % 1000) / 1000})")
    started = time.perf_counter()
    con.execute(f"""
        CREATE TABLE orders AS
        WITH c AS (SELECT range AS n FROM range({customers})),
        counts AS (SELECT n, CAST(floor(-ln(random()) * {orders_per_customer}) AS INTEGER) + 1 AS k FROM c)
        SELECT 'O' || n || '-' || i AS order_id, 'C' || lpad(CAST(n AS VARCHAR), 8, '0') AS customer_id,
               DATE '2025-01-01' + CAST(floor(random() * 546) AS INTEGER) AS ordered_on,
               random() < 0.01 AS is_return
        FROM counts, range(k) AS r(i)
    """)
    promotions = [("BQ-01", "2026-04-06", "2026-04-15"), ("BQ-02", "2026-05-11", "2026-05-20"),
                  ("BQ-03", "2026-06-08", "2026-06-17")]
    parts = []
    for pid, starts, ends in promotions:
        parts.append(f"""
            SELECT '{pid}' AS promotion_id, 'C' || lpad(CAST(range AS VARCHAR), 8, '0') AS customer_id,
                   CASE WHEN random() < 0.2 THEN 'holdout' ELSE 'treatment' END AS arm,
                   DATE '{starts}' AS starts_on, DATE '{ends}' AS ends_on
            FROM range({customers}) WHERE random() < {assigned_share}""")
    con.execute("CREATE TABLE campaign_assignments AS " + " UNION ALL ".join(parts))
    con.execute("CREATE TABLE promotions AS SELECT * FROM (VALUES " + ", ".join(
        f"('{p}', TIMESTAMP '{s}', TIMESTAMP '{e}', 'targeted')" for p, s, e in promotions)
        + ") AS t(promotion_id, starts_at, ends_at, audience)")
    facts = {
        "orders": con.execute("SELECT count(*) FROM orders").fetchall()[0][0],
        "assignments": con.execute("SELECT count(*) FROM campaign_assignments").fetchall()[0][0],
        "seconds": round(time.perf_counter() - started, 1),
    }
    con.close()
    return facts


def demo_inputs(quarter: str):
    """The demo export's gathered analyses for ``quarter`` (real readouts), built in a temporary workspace."""
    from toolkit import config, panels, workspace
    from toolkit.config import WorkspaceSettings
    from toolkit.report.quarter.gather import gather
    from toolkit.report.quarter.period import require_quarter

    settings = config.load(ROOT / "demo_data" / "liftlag.toml")
    ws = Path(tempfile.mkdtemp(prefix="bench-quarter-ws-"))
    settings = dataclasses.replace(settings, workspace=WorkspaceSettings(path=ws))
    panels.build(settings)
    con = workspace.connect(settings)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            inputs = gather(con, settings, require_quarter(con, quarter))
    finally:
        con.close()
    shutil.rmtree(ws, ignore_errors=True)
    return settings, inputs


def rename_campaigns(inputs, mapping: dict[str, str]) -> None:
    """Point the demo's campaign rows at the synthetic campaigns (same tables, other ids)."""
    import pandas as pd

    for name, frame in inputs.tables.items():
        if "promotion_id" in frame.columns:
            frame["promotion_id"] = frame["promotion_id"].astype(str).replace(mapping)
        if "scope" in frame.columns:
            frame["scope"] = frame["scope"].astype(str).replace(mapping)
    status = inputs.facts.get("campaign_status", {})
    inputs.facts["campaign_status"] = {mapping.get(k, k): v for k, v in status.items()}
    inputs.facts["randomised"] = {mapping.get(k, k): v for k, v in inputs.facts.get("randomised", {}).items()}
    promotions = inputs.promotions.copy()
    promotions["promotion_id"] = promotions["promotion_id"].astype(str).replace(mapping)
    inputs.promotions = promotions[promotions["promotion_id"].isin(mapping.values())]
    if inputs.promotions.empty:  # the demo quarter has fewer campaigns than the synthetic one
        inputs.promotions = pd.DataFrame(columns=promotions.columns)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--customers", type=int, default=1_000_000)
    parser.add_argument("--orders-per-customer", type=float, default=12.0)
    parser.add_argument("--assigned-share", type=float, default=0.3)
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument("--pdf", action="store_true")
    parser.add_argument("--work", type=Path, default=None, help="folder for the panels and the report (default: temp)")
    args = parser.parse_args()

    from toolkit.report.quarter import api
    from toolkit.report.quarter.period import Quarter
    from toolkit.report.quarter.render import render_report

    work = args.work or Path(tempfile.mkdtemp(prefix="bench-quarter-"))
    work.mkdir(parents=True, exist_ok=True)
    print(f"load (1-minute average) before: {os.getloadavg()[0]:.2f}; cores: {os.cpu_count()}")
    panels_path = work / "panels.duckdb"
    checked_path = work / "checked.duckdb"
    for p in (panels_path, checked_path):
        p.unlink(missing_ok=True)
    facts = build_panels(panels_path, args.customers, args.orders_per_customer, args.assigned_share, args.seed)
    con = duckdb.connect(str(panels_path))
    con.execute(f"ATTACH '{checked_path}' AS checked")
    con.execute("CREATE TABLE checked.promotions AS SELECT * FROM promotions")
    con.close()
    print(f"panels: {args.customers:,} customers, {facts['orders']:,} orders, {facts['assignments']:,} assignments "
          f"({facts['seconds']} s to generate)")

    t = time.perf_counter()
    settings, inputs = demo_inputs(QUARTER)
    print(f"demo analyses for {QUARTER} (not timed in the figure): {time.perf_counter() - t:.1f} s")
    demo_ids = [str(p) for p, a in zip(inputs.promotions["promotion_id"], inputs.promotions["audience"])
                if a == "targeted"]
    rename_campaigns(inputs, dict(zip(demo_ids, ["BQ-01", "BQ-02", "BQ-03"])))
    inputs.quarter = Quarter.parse(QUARTER)

    con = duckdb.connect(str(panels_path), read_only=True)
    con.execute("SET threads = 2")
    con.execute(f"ATTACH '{checked_path}' AS checked (READ_ONLY)")
    seconds = {}
    started = time.perf_counter()
    clock = time.perf_counter()
    tables = api.derive_tables(con, settings, inputs)
    seconds["derive (event-study SQL, tails, totals, verdict)"] = time.perf_counter() - clock
    con.close()
    facts_html = {"quarter": QUARTER, "quarter_first_day": "2026-04-01", "quarter_last_day": "2026-06-30",
                  "export_first_day": "2025-01-01", "export_last_day": "2026-06-30", "tool_version": "bench",
                  "config": "bench", "fingerprints": {"check": "-", "build": "-", "inputs": {}},
                  "seeds": {"campaign": 0, "timing": 0}, "generated_at": "bench", "analysis_seconds": 0,
                  "missing": inputs.missing}
    clock = time.perf_counter()
    html = render_report(tables, inputs.missing, inputs.notes, settings, facts_html)
    seconds["render HTML"] = time.perf_counter() - clock
    out = work / "report"
    shutil.rmtree(out, ignore_errors=True)
    out.mkdir()
    clock = time.perf_counter()
    for name, frame in tables.items():
        frame.to_parquet(out / f"{name}.parquet", index=False)
    (out / "report.html").write_text(html, encoding="utf-8")
    seconds["write tables and HTML"] = time.perf_counter() - clock
    total = time.perf_counter() - started
    if args.pdf:
        from toolkit.report.pdf import html_to_pdf

        clock = time.perf_counter()
        html_to_pdf(out / "report.html", out / "report.pdf")
        seconds["PDF (chromium)"] = time.perf_counter() - clock
    event = tables["event_study"]
    print(f"event_study rows: {len(event):,}; customers in its arms: "
          f"{int(event[event['arm'] != 'difference'].drop_duplicates(['promotion_id', 'arm'])['customers'].sum()):,}")
    for step, s in seconds.items():
        print(f"  {step}: {s:.2f} s")
    print(f"render step without PDF: {total:.2f} s; with PDF: {total + seconds.get('PDF (chromium)', 0):.2f} s")
    print(f"HTML size: {len(html) / 1e6:.2f} MB; load (1-minute average) after: {os.getloadavg()[0]:.2f}")
    if args.work is None:
        shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
