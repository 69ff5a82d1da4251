"""Shared fixtures: a tiny export written by hand, whose every panel value is worked out in
tests/foundation/test_panels.py."""

from __future__ import annotations

import csv
from pathlib import Path

import pytest

TRANSACTION_COLUMNS = ["order_id", "customer_id", "ordered_at", "product_id", "quantity",
                       "net_amount", "list_amount", "discount_amount", "promotion_id"]

# Twelve order lines over three customers (2026; Mondays: Jan 12, Feb 2, Feb 16, Mar 2, Mar 16, Apr 6).
TINY_TRANSACTIONS = [
    # c1: a full-price basket, a coupon redemption in PA, a broadcast-sale order, then a return.
    ["o1", "c1", "2026-02-02 09:00:00", "p1", "2", "20", "20", "0", ""],
    ["o1", "c1", "2026-02-02 09:00:00", "p2", "1", "10", "10", "0", ""],
    ["o2", "c1", "2026-03-03 12:00:00", "p1", "1", "8", "10", "2", "PA"],
    ["o3", "c1", "2026-03-18 15:00:00", "p2", "1", "9", "10", "1", "PB"],
    ["o4", "c1", "2026-03-21 10:00:00", "p1", "-1", "-10", "-10", "0", ""],
    # c2: holdout of PA, buys during the campaign at full price.
    ["o5", "c2", "2026-02-20 11:00:00", "p2", "3", "30", "30", "0", ""],
    ["o6", "c2", "2026-03-05 11:00:00", "p1", "1", "10", "10", "0", ""],
    ["o6", "c2", "2026-03-05 11:00:00", "p2", "1", "10", "10", "0", ""],
    # c3: treated in PA but does not redeem; buys in the broadcast sale; list missing on one line.
    ["o7", "c3", "2026-01-12 08:00:00", "p1", "1", "10", "10", "0", ""],
    ["o8", "c3", "2026-03-17 08:00:00", "p2", "2", "18", "20", "2", "PB"],
    ["o9", "c3", "2026-04-06 08:00:00", "p1", "1", "10", "10", "0", ""],
    ["o9", "c3", "2026-04-06 08:00:00", "p2", "1", "10", "", "0", ""],
]
PROMOTION_COLUMNS = ["promotion_id", "starts_at", "ends_at", "mechanic", "depth", "audience", "name"]
TINY_PROMOTIONS = [
    ["PA", "2026-03-02", "2026-03-08", "percent_off", "0.2", "targeted", "spring coupon"],
    ["PB", "2026-03-16", "2026-03-18", "percent_off", "0.1", "broadcast", "garden days"],
]
ASSIGNMENT_COLUMNS = ["promotion_id", "customer_id", "arm", "assigned_at"]
TINY_ASSIGNMENTS = [
    ["PA", "c1", "T", "2026-03-01 10:00:00"],
    ["PA", "c2", "H", "2026-03-01 10:00:00"],
    ["PA", "c3", "T", "2026-03-01 10:00:00"],
]
CUSTOMER_COLUMNS = ["customer_id", "first_seen_at", "region"]
TINY_CUSTOMERS = [["c3", "2025-12-01", "north"]]
PRODUCT_COLUMNS = ["product_id", "category", "unit_cost"]
TINY_PRODUCTS = [["p1", "tools", "4"], ["p2", "seeds", ""]]

TINY_CONFIG = """
[tables.transactions]
path = "transactions.{ext}"
[tables.promotions]
path = "promotions.csv"
[tables.assignments]
path = "assignments.csv"
[tables.assignments.values.arm]
treatment = "T"
holdout = "H"
[tables.customers]
path = "customers.csv"
[tables.products]
path = "products.csv"
[economics]
margin_rate = 0.4
[windows]
pre_period_days = 60
after_days = 14
[workspace]
path = ".liftlag"
"""


def write_csv(path: Path, columns: list[str], rows: list[list[str]]) -> Path:
    with path.open("w", newline="") as fh:
        writer = csv.writer(fh)
        writer.writerow(columns)
        writer.writerows(rows)
    return path


def write_export(folder: Path, *, transactions=None, promotions=None, assignments=None,
                 customers=None, products=None, parquet: bool = False) -> Path:
    """Write the tiny export (or variants of it) and its liftlag.toml; returns the config path."""
    folder.mkdir(parents=True, exist_ok=True)
    tx = write_csv(folder / "transactions.csv", TRANSACTION_COLUMNS,
                   TINY_TRANSACTIONS if transactions is None else transactions)
    if parquet:
        import duckdb

        con = duckdb.connect()
        con.execute("COPY (SELECT * FROM read_csv(?)) TO ? (FORMAT parquet)",
                    [str(tx), str(folder / "transactions.parquet")])
        con.close()
        tx.unlink()
    write_csv(folder / "promotions.csv", PROMOTION_COLUMNS, TINY_PROMOTIONS if promotions is None else promotions)
    write_csv(folder / "assignments.csv", ASSIGNMENT_COLUMNS, TINY_ASSIGNMENTS if assignments is None else assignments)
    write_csv(folder / "customers.csv", CUSTOMER_COLUMNS, TINY_CUSTOMERS if customers is None else customers)
    write_csv(folder / "products.csv", PRODUCT_COLUMNS, TINY_PRODUCTS if products is None else products)
    config = folder / "liftlag.toml"
    config.write_text(TINY_CONFIG.format(ext="parquet" if parquet else "csv"))
    return config


@pytest.fixture
def tiny_config(tmp_path) -> Path:
    return write_export(tmp_path / "export")


DEMO_DATA = Path(__file__).resolve().parents[1] / "demo_data"


@pytest.fixture(scope="session")
def demo_settings(tmp_path_factory):
    """The shipped demo export, checked and built into a workspace of the test session's own."""
    import dataclasses

    from toolkit import config, panels
    from toolkit.config import WorkspaceSettings

    settings = config.load(DEMO_DATA / "liftlag.toml")
    settings = dataclasses.replace(settings, workspace=WorkspaceSettings(path=tmp_path_factory.mktemp("demo_ws")))
    panels.build(settings)
    return settings


@pytest.fixture(scope="session")
def demo_config(demo_settings, tmp_path_factory):
    """A liftlag.toml for the shipped demo export whose workspace is the session's built one."""
    import re

    text = (DEMO_DATA / "liftlag.toml").read_text()
    text = re.sub(r'^path = "(?!\.liftlag)([^"]+)"', lambda m: f'path = "{(DEMO_DATA / m.group(1)).as_posix()}"',
                  text, flags=re.M)
    text = text.replace('path = ".liftlag"', f'path = "{demo_settings.workspace_dir.as_posix()}"')
    path = tmp_path_factory.mktemp("demo_cfg") / "liftlag.toml"
    path.write_text(text)
    return path
