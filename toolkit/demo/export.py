"""Write the demo export in a warehouse's own column names, with the config that maps them."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from .calendar import Calendar
from .lines import Lines, store_ids
from .population import Customers, Products
from .scenario import Scenario
from .simulate import Simulation

CONFIG_NAME = "liftlag.toml"
TRANSACTIONS_DIR = "transactions"
TABLE_FILES = ("promotions.csv", "assignments.csv", "customers.csv", "products.csv")
TRUTH_FILES = ("truth.json", "truth_uplift.parquet")

_CONFIG_TEMPLATE = """\
[tables.transactions]
path = "transactions/**/*.parquet"
date_partition = "month"  # files lie in month=YYYY-MM/ folders by order date: [period] and build --since skip by them
[tables.transactions.columns]
order_id = "basket_no"
customer_id = "shopper_ref"
ordered_at = "created_at"
product_id = "sku"
quantity = "qty"
net_amount = "paid"
list_amount = "list_price_total"
discount_amount = "discount"
promotion_id = "promo_code"

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
margin_rate = {margin_rate}
currency = "EUR"

[windows]
pre_period_days = {pre_period_days}
after_days = {after_days}

[campaign]
holdout_share = {holdout_share}

[workspace]
path = ".liftlag"
"""

_TRANSACTION_SCHEMA = pa.schema(
    [
        ("basket_no", pa.string()),
        ("shopper_ref", pa.string()),
        ("created_at", pa.timestamp("us")),
        ("sku", pa.string()),
        ("qty", pa.int64()),
        ("paid", pa.float64()),
        ("list_price_total", pa.float64()),
        ("discount", pa.float64()),
        ("promo_code", pa.string()),
        ("channel", pa.string()),
        ("store_id", pa.string()),
    ]
)


def promotion_ids(calendar: Calendar) -> np.ndarray:
    """Promotion ids in the order the simulation indexes them (campaigns, then broadcasts)."""
    return np.array([p.promotion_id for p in calendar.campaigns + calendar.broadcasts], dtype=object)


def clear_previous(out_dir: Path) -> None:
    """Remove the files a previous generation wrote (only those), so no stale partition survives."""
    transactions = out_dir / TRANSACTIONS_DIR
    if transactions.is_dir():
        for part in transactions.glob("month=*/part-0.parquet"):
            part.unlink()
        for folder in transactions.glob("month=*"):
            if folder.is_dir() and not any(folder.iterdir()):
                folder.rmdir()
        if not any(transactions.iterdir()):
            transactions.rmdir()
    for name in (*TABLE_FILES, *TRUTH_FILES, CONFIG_NAME, "generation.json"):
        (out_dir / name).unlink(missing_ok=True)


def write_transactions(out_dir: Path, lines: Lines, calendar: Calendar, customers: Customers, products: Products) -> int:
    """Hive-partitioned Parquet, one ``month=YYYY-MM/part-0.parquet`` per calendar month."""
    ids = np.concatenate([promotion_ids(calendar), np.array([None], dtype=object)])  # index -1 -> None
    paid = (lines.list_cents - lines.discount_cents) / 100.0
    columns = {
        "basket_no": np.char.add("B", np.char.zfill(lines.order_number.astype(str), 7)).astype(object),
        "shopper_ref": customers.customer_id[lines.customer].astype(object),
        "created_at": lines.created_at.astype("datetime64[us]"),
        "sku": products.product_id[lines.product].astype(object),
        "qty": lines.quantity.astype(np.int64),
        "paid": paid,
        "list_price_total": lines.list_cents / 100.0,
        "discount": lines.discount_cents / 100.0,
        "promo_code": ids[lines.promotion],
        "channel": np.where(lines.is_app, "app", "web").astype(object),
        "store_id": store_ids(lines, customers, products),
    }
    month = lines.created_at.astype("datetime64[M]")
    root = out_dir / TRANSACTIONS_DIR
    for value in np.unique(month):
        rows = np.flatnonzero(month == value)
        table = pa.table({name: pa.array(col[rows], type=_TRANSACTION_SCHEMA.field(name).type) for name, col in columns.items()},
                         schema=_TRANSACTION_SCHEMA)
        folder = root / f"month={str(value)}"
        folder.mkdir(parents=True, exist_ok=True)
        pq.write_table(table, folder / "part-0.parquet", compression="zstd")
    return len(lines.order_number)


def write_tables(
    out_dir: Path,
    scenario: Scenario,
    calendar: Calendar,
    customers: Customers,
    products: Products,
    simulation: Simulation,
) -> None:
    """promotions.csv, assignments.csv, customers.csv, products.csv."""
    promotions = pd.DataFrame(
        {
            "promotion_id": [p.promotion_id for p in calendar.campaigns + calendar.broadcasts],
            "starts_at": [p.starts_on.isoformat() for p in calendar.campaigns + calendar.broadcasts],
            "ends_at": [p.ends_on.isoformat() for p in calendar.campaigns + calendar.broadcasts],
            "mechanic": "percent_off",
            "depth": [p.depth for p in calendar.campaigns + calendar.broadcasts],
            "audience": [p.audience for p in calendar.campaigns + calendar.broadcasts],
            "cost_per_redemption": [p.cost_per_redemption for p in calendar.campaigns + calendar.broadcasts],
            "name": [p.name for p in calendar.campaigns + calendar.broadcasts],
        }
    )
    _write_csv(promotions, out_dir / "promotions.csv")

    frames = []
    for start in simulation.campaign_starts:
        promo = calendar.campaigns[start.campaign]
        assigned_at = np.datetime64(promo.starts_on, "s") - np.timedelta64(scenario.assign_lead_days, "D") + np.timedelta64(6, "h")
        frames.append(
            pd.DataFrame(
                {
                    "promotion_id": promo.promotion_id,
                    "customer_id": customers.customer_id[start.members],
                    "arm": np.where(start.treated, "T", "H"),
                    "assigned_at": _timestamp_text(np.full(len(start.members), assigned_at)),
                }
            )
        )
    _write_csv(pd.concat(frames, ignore_index=True), out_dir / "assignments.csv")

    first_seen = (
        np.datetime64(scenario.starts_on, "s")
        + (customers.first_day * 86400 + customers.first_second).astype("timedelta64[s]")
    )
    _write_csv(
        pd.DataFrame(
            {
                "customer_id": customers.customer_id,
                "first_seen_at": _timestamp_text(first_seen),
                "region": customers.region,
                "signup_channel": customers.signup_channel,
                "household_garden": customers.household_garden,
            }
        ),
        out_dir / "customers.csv",
    )
    order = np.argsort(products.product_id)
    _write_csv(
        pd.DataFrame(
            {"product_id": products.product_id[order], "category": products.category[order], "unit_cost": products.unit_cost[order]}
        ),
        out_dir / "products.csv",
    )


def write_config(out_dir: Path, scenario: Scenario) -> Path:
    """The ``liftlag.toml`` that maps the export's names onto the contract (paths relative to it)."""
    path = out_dir / CONFIG_NAME
    path.write_text(
        _CONFIG_TEMPLATE.format(
            margin_rate=scenario.margin_rate,
            pre_period_days=scenario.pre_period_days,
            after_days=scenario.after_days,
            holdout_share=scenario.holdout_share,
        ),
        encoding="utf-8",
    )
    return path


def write_truth(out_dir: Path, truth: dict, uplift: pd.DataFrame) -> None:
    """``truth.json`` and ``truth_uplift.parquet``."""
    (out_dir / "truth.json").write_text(json.dumps(truth, indent=2) + "\n", encoding="utf-8")
    table = pa.Table.from_pandas(uplift, preserve_index=False)
    pq.write_table(table, out_dir / "truth_uplift.parquet", compression="zstd")


def write_json(path: Path, content: dict) -> None:
    path.write_text(json.dumps(content, indent=2) + "\n", encoding="utf-8")


def _timestamp_text(values: np.ndarray) -> np.ndarray:
    text = np.datetime_as_string(values.astype("datetime64[s]"), unit="s")
    return np.char.replace(text, "T", " ").astype(object)


def _write_csv(frame: pd.DataFrame, path: Path) -> None:
    path.write_text(frame.to_csv(index=False, lineterminator="\n"), encoding="utf-8")
