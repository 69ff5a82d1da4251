"""`liftlag init` on exports in three foreign naming habits: every required column is mapped right,
from names and values, with evidence; a folder of files becomes one glob that reads every file.

The exports are written here (small, seeded). Common practice, no source: warehouse exports name
columns their own way, split order lines by period and code arms and promotion kinds.
"""

from __future__ import annotations

import csv
import gzip
import random
import tomllib
from datetime import date, datetime, timedelta
from pathlib import Path

import duckdb
import pandas as pd
import pytest

from toolkit import cli, config
from toolkit.contract import INPUT_TABLES

PROMOTIONS = [  # id, first day, last day, mechanic, depth, audience
    ("SPRING10", date(2024, 3, 4), date(2024, 3, 17), "percent_off", 0.10, "targeted"),
    ("GARDEN5", date(2024, 6, 10), date(2024, 6, 16), "amount_off", 5.0, "broadcast"),
    ("AUTUMN20", date(2024, 9, 9), date(2024, 9, 22), "percent_off", 0.20, "targeted"),
    ("WINTER15", date(2024, 12, 2), date(2024, 12, 8), "percent_off", 0.15, "broadcast"),
    ("BULBS3", date(2025, 2, 3), date(2025, 2, 16), "amount_off", 3.0, "targeted"),
    ("SUMMER25", date(2025, 6, 2), date(2025, 6, 15), "percent_off", 0.25, "broadcast"),
]


def order_lines(seed: int, start: date, days: int, customers: int = 60):
    """Order lines: (order, customer, time, product, quantity, list, discount, paid, promotion)."""
    rng = random.Random(seed)
    rows = []
    for n in range(days * 2):
        day = start + timedelta(days=rng.randrange(days))
        when = datetime(day.year, day.month, day.day, rng.randrange(8, 21), rng.randrange(60))
        customer = f"K{rng.randrange(customers):04d}"
        running = [p for p in PROMOTIONS if p[1] <= day <= p[2]]
        promo = running[0] if running and rng.random() < 0.7 else None
        for product in rng.sample(range(40), rng.randrange(1, 4)):  # each product once an order
            qty = rng.randrange(1, 4)
            list_amount = round(qty * rng.choice([4.5, 9.0, 12.5, 20.0]), 2)
            if promo is None:
                discount = 0.0
            elif promo[3] == "percent_off":
                discount = round(list_amount * promo[4], 2)
            else:
                discount = min(promo[4], list_amount)
            rows.append((f"{seed}-{n:05d}", customer, when, f"SKU{product:03d}", qty,
                         list_amount, discount, round(list_amount - discount, 2), promo[0] if promo else ""))
    return sorted(rows, key=lambda r: r[2])


def assignment_rows(seed: int, customers: int = 60):
    rng = random.Random(seed)
    rows = []
    for pid, first, *_rest in PROMOTIONS:
        if _rest[-1] != "targeted":
            continue
        for c in rng.sample(range(customers), 30):
            rows.append((pid, f"K{c:04d}", "treatment" if rng.random() < 0.8 else "holdout", first - timedelta(days=2)))
    return rows


def write_csv(path: Path, header: list[str], rows, opener=open) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    with opener(path, "wt", newline="") as fh:
        writer = csv.writer(fh)
        writer.writerow(header)
        writer.writerows(rows)


def quarterly_gzip_export(folder: Path) -> tuple[int, dict]:
    """Order lines in one gzipped CSV per quarter (7 quarters) in order_lines/; promotions keyed by
    `code` with `reach` = targeted/broadcast; assignments keyed by `code`, arms in `group` as T/C,
    the assignment day in `mailed` (a name no list knows)."""
    lines = order_lines(1, date(2024, 1, 1), 7 * 91)
    quarters: dict[str, list] = {}
    for r in lines:
        quarters.setdefault(f"{r[2].year}Q{(r[2].month - 1) // 3 + 1}", []).append(r)
    assert len(quarters) == 7
    for quarter, rows in quarters.items():
        write_csv(folder / "order_lines" / f"{quarter}.csv.gz",
                  ["invoice_no", "client_ref", "created", "sku", "units", "paid_value", "gross_value", "promo_code"],
                  [(o, c, t.isoformat(sep=" "), p, q, paid, lst, promo) for o, c, t, p, q, lst, d, paid, promo in rows],
                  opener=gzip.open)
    write_csv(folder / "promotions.csv", ["code", "valid_from", "valid_to", "kind", "size", "reach"],
              [(p, a.isoformat(), b.isoformat(), m, d, r) for p, a, b, m, d, r in PROMOTIONS])
    write_csv(folder / "assignments.csv", ["code", "client_ref", "group", "mailed"],
              [(p, c, "T" if arm == "treatment" else "C", day.isoformat()) for p, c, arm, day in assignment_rows(1)])
    expected = {
        "transactions": {"order_id": "invoice_no", "customer_id": "client_ref", "ordered_at": "created",
                         "product_id": "sku", "quantity": "units", "net_amount": "paid_value",
                         "list_amount": "gross_value", "promotion_id": "promo_code"},
        "promotions": {"promotion_id": "code", "starts_at": "valid_from", "ends_at": "valid_to",
                       "mechanic": "kind", "depth": "size", "audience": "reach"},
        "assignments": {"promotion_id": "code", "customer_id": "client_ref", "arm": "group", "assigned_at": "mailed"},
    }
    return len(lines), expected


def hive_parquet_export(folder: Path) -> tuple[int, dict]:
    """CamelCase names; order lines as Parquet in hive partitions (year=/month=), the order day as
    text 20250117; offers with day-first dates and kinds coded percent/fixed; arms test/control."""
    lines = order_lines(2, date(2024, 11, 1), 120)
    frame = pd.DataFrame(lines, columns=["OrderNumber", "CustomerKey", "t", "ProductKey", "Qty", "ListPrice",
                                         "DiscountValue", "AmountPaid", "CouponCode"])
    frame["OrderDate"] = frame["t"].dt.strftime("%Y%m%d")
    frame["CouponCode"] = frame["CouponCode"].replace("", None)
    frame["year"], frame["month"] = frame["t"].dt.year, frame["t"].dt.month
    frame = frame.drop(columns="t")
    con = duckdb.connect()
    con.register("lines", frame)
    (folder / "sales").mkdir(parents=True)
    con.execute(f"COPY lines TO '{(folder / 'sales').as_posix()}' (FORMAT parquet, PARTITION_BY (year, month))")
    con.close()
    write_csv(folder / "offers.csv", ["OfferId", "StartDate", "EndDate", "OfferType", "Depth", "TargetMode"],
              [(p, a.strftime("%d/%m/%Y"), b.strftime("%d/%m/%Y"), "percent" if m == "percent_off" else "fixed", d, r)
               for p, a, b, m, d, r in PROMOTIONS])
    write_csv(folder / "treatment_groups.csv", ["OfferId", "CustomerKey", "Variant", "AssignedOn"],
              [(p, c, "test" if arm == "treatment" else "control", day.isoformat()) for p, c, arm, day in assignment_rows(2)])
    expected = {
        "transactions": {"order_id": "OrderNumber", "customer_id": "CustomerKey", "ordered_at": "OrderDate",
                         "product_id": "ProductKey", "quantity": "Qty", "net_amount": "AmountPaid",
                         "list_amount": "ListPrice", "discount_amount": "DiscountValue", "promotion_id": "CouponCode"},
        "promotions": {"promotion_id": "OfferId", "starts_at": "StartDate", "ends_at": "EndDate",
                       "mechanic": "OfferType", "depth": "Depth", "audience": "TargetMode"},
        "assignments": {"promotion_id": "OfferId", "customer_id": "CustomerKey", "arm": "Variant",
                        "assigned_at": "AssignedOn"},
    }
    return len(lines), expected


def monthly_root_export(folder: Path) -> tuple[int, dict]:
    """Monthly CSV files side by side at the export's top (tickets_2025_01.csv ...), short names,
    times as 17.01.2025 14:03; campaigns keyed by `id`, audience written Targeted/Broadcast; no
    assignments (broadcast sales only)."""
    lines = order_lines(3, date(2025, 1, 1), 180)
    months: dict[str, list] = {}
    for r in lines:
        months.setdefault(r[2].strftime("%Y_%m"), []).append(r)
    for month, rows in months.items():
        write_csv(folder / f"tickets_{month}.csv", ["ticket", "member", "sold_on", "ean", "qty", "net", "promo"],
                  [(o, c, t.strftime("%d.%m.%Y %H:%M"), p, q, paid, promo) for o, c, t, p, q, lst, d, paid, promo in rows])
    write_csv(folder / "campaigns.csv", ["id", "first_day", "last_day", "mechanism", "depth", "audience"],
              [(p, a.isoformat(), b.isoformat(), m, d, r.capitalize()) for p, a, b, m, d, r in PROMOTIONS])
    expected = {
        "transactions": {"order_id": "ticket", "customer_id": "member", "ordered_at": "sold_on", "product_id": "ean",
                         "quantity": "qty", "net_amount": "net", "promotion_id": "promo"},
        "promotions": {"promotion_id": "id", "starts_at": "first_day", "ends_at": "last_day",
                       "mechanic": "mechanism", "depth": "depth", "audience": "audience"},
    }
    return len(lines), expected


EXPORTS = {"quarterly_gzip": quarterly_gzip_export, "hive_parquet": hive_parquet_export,
           "monthly_root": monthly_root_export}


@pytest.mark.parametrize("name", sorted(EXPORTS))
def test_init_maps_every_required_column_of_a_foreign_export_and_check_reads_every_row(name, tmp_path, capsys):
    folder = tmp_path / name
    rows_written, expected = EXPORTS[name](folder)
    assert cli.main(["init", str(folder)]) == 0
    printed = capsys.readouterr().out
    cfg = folder / "liftlag.toml"
    settings = config.load(cfg)
    assert set(settings.tables) == set(expected), printed
    for table, columns in expected.items():
        for contract_column, export_column in columns.items():
            assert settings.tables[table].export_column(contract_column) == export_column, (table, contract_column, printed)
        assert set(INPUT_TABLES[table].required) <= set(columns)
    assert cli.main(["check", "-c", str(cfg), "--out", str(tmp_path / "out")]) == 0, capsys.readouterr()
    summary = pd.read_parquet(tmp_path / "out" / "check_summary.parquet").set_index("table")
    # Every file of a partitioned table is read: rows read = rows written, all accepted.
    assert summary.loc["transactions", "rows_read"] == rows_written
    assert summary.loc["transactions", "rejected"] == 0
    assert summary.loc["promotions", "accepted"] == len(PROMOTIONS)


def test_a_folder_of_quarterly_files_becomes_one_glob_that_says_how_many_files(tmp_path, capsys):
    quarterly_gzip_export(tmp_path)
    assert cli.main(["init", str(tmp_path)]) == 0
    text = (tmp_path / "liftlag.toml").read_text()
    assert 'path = "order_lines/*.csv.gz"  # guessed: 7 files with the same columns' in text
    assert "order_lines/*.csv.gz (7 files)" in capsys.readouterr().out


def guess_lines(config_path: Path) -> dict[str, dict[str, str]]:
    """section -> key -> the written line (with its comment)."""
    out: dict[str, dict[str, str]] = {}
    section = ""
    for line in config_path.read_text().splitlines():
        if line.startswith("["):
            section = line.strip("[]")
        elif " = " in line and not line.startswith("#"):
            out.setdefault(section, {})[line.split(" = ")[0]] = line
    return out


def test_each_guess_shows_its_evidence_and_weak_guesses_are_marked_not_sure(tmp_path):
    quarterly_gzip_export(tmp_path)
    assert cli.main(["init", str(tmp_path)]) == 0
    lines = guess_lines(tmp_path / "liftlag.toml")
    written = tomllib.loads((tmp_path / "liftlag.toml").read_text())
    # Keys whose values are another table's key values (no name list knows `code`).
    promotions = lines["tables.promotions.columns"]
    assert "its values are the transactions' promo_code values" in promotions["promotion_id"]
    assert "are promotions.code values" in lines["tables.assignments.columns"]["promotion_id"]
    assert "are promotions.code values" in lines["tables.transactions.columns"]["promotion_id"]
    # The amount for which paid <= list holds, lower on the discounted lines.
    assert "paid_value <= gross_value" in lines["tables.transactions.columns"]["net_amount"]
    # A column whose values are exactly the allowed audience values (no name list knows `reach`).
    assert "(broadcast, targeted) are allowed audience values" in promotions["audience"]
    assert "# guessed: " in promotions["audience"] and "NOT SURE" not in promotions["audience"]
    # Dates by parsing.
    assert "parse as dates" in promotions["starts_at"] and "valid_from <= valid_to" in promotions["ends_at"]
    # A date found only because it is the file's only date column is not sure.
    assigned = lines["tables.assignments.columns"]["assigned_at"]
    assert "# guessed, NOT SURE" in assigned and "only date column" in assigned
    # Arms coded T/C are a reading to confirm, never presented as certain.
    assert written["tables"]["assignments"]["values"]["arm"] == {"treatment": "T", "holdout": "C"}
    arms = lines["tables.assignments.values.arm"]
    assert "NOT SURE" in arms["treatment"] and "NOT SURE" in arms["holdout"]


def test_a_name_that_only_resembles_is_never_sure(tmp_path):
    """A column found by a resembling name alone, with no value evidence, is marked NOT SURE."""
    write_csv(tmp_path / "order_lines.csv", ["order_no", "customer", "order_date", "sku", "qty", "amnt"],
              [("o1", "c1", "2025-01-02", "s1", 1, 9.5), ("o2", "c2", "2025-01-03", "s2", 2, 19.0)])
    write_csv(tmp_path / "promotions.csv", ["promotion_id", "starts_at", "ends_at", "mechanic", "audience"],
              [("P1", "2025-01-01", "2025-01-05", "percent_off", "broadcast")])
    assert cli.main(["init", str(tmp_path)]) == 0
    net = guess_lines(tmp_path / "liftlag.toml")["tables.transactions.columns"]["net_amount"]
    assert net.startswith('net_amount = "amnt"') and "# guessed, NOT SURE: name 'amnt' resembles" in net


def test_day_first_dates_and_coded_kinds_get_a_format_and_a_value_map(tmp_path):
    hive_parquet_export(tmp_path)
    assert cli.main(["init", str(tmp_path)]) == 0
    written = tomllib.loads((tmp_path / "liftlag.toml").read_text())
    assert written["tables"]["transactions"]["path"] == "sales/**/*.parquet"
    assert written["tables"]["transactions"]["formats"] == {"ordered_at": "%Y%m%d"}
    assert written["tables"]["promotions"]["formats"] == {"starts_at": "%d/%m/%Y", "ends_at": "%d/%m/%Y"}
    assert written["tables"]["promotions"]["values"]["mechanic"] == {"percent_off": "percent", "amount_off": "fixed"}
    assert written["tables"]["assignments"]["values"]["arm"] == {"treatment": "test", "holdout": "control"}


def test_a_file_that_only_resembles_assignments_is_not_taken_for_them(tmp_path):
    """Optional tables are taken only with every required column found: coupon redemptions, with a
    promotion and a customer column but no arm and no time, are not campaign assignments."""
    monthly_root_export(tmp_path)
    write_csv(tmp_path / "coupon_redemptions.csv", ["promotion_id", "customer_id", "ticket"],
              [("SPRING10", "K0001", "3-00001"), ("SPRING10", "K0001", "3-00002"), ("BULBS3", "K0002", "3-00003"),
               ("BULBS3", "K0002", "3-00004")])
    assert cli.main(["init", str(tmp_path)]) == 0
    text = (tmp_path / "liftlag.toml").read_text()
    assert "assignments" not in tomllib.loads(text)["tables"]
    assert ("# [tables.assignments]  -- coupon_redemptions.csv looked like it but has no arm, assigned_at: "
            "not taken") in text
