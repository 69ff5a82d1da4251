"""A real transaction log no one here wrote: the CDNOW master log (tests/reference/cdnow/).

Published facts (Fader & Hardie's description of the data set): 23,570 customers, 69,659
transactions, 1997-01-01 to 1998-06-30.
"""

from __future__ import annotations

import importlib.metadata

import duckdb
import pandas as pd
import pytest

from toolkit import config, panels, workspace


def cdnow_file():
    try:
        dist = importlib.metadata.distribution("Lifetimes")
    except importlib.metadata.PackageNotFoundError:
        pytest.skip("the Lifetimes wheel (test extra) is not installed")
    path = dist.locate_file("lifetimes/datasets/CDNOW_master.txt")
    assert path.exists(), f"CDNOW_master.txt not found in the Lifetimes wheel at {path}"
    return path


CDNOW_CONFIG = """
[tables.transactions]
path = "cdnow.csv"
[tables.transactions.columns]
order_id = "record_no"
ordered_at = "date"
product_id = "item"
quantity = "number_of_cds"
net_amount = "dollar_value"
[tables.transactions.formats]
ordered_at = "%Y%m%d"
[tables.promotions]
path = "promotions.csv"
[tables.assignments]
path = "assignments.csv"
[economics]
margin_rate = 0.3
"""


def write_cdnow_export(folder):
    """The CDNOW master log as an export of ours (no promotions, no assignments); its config's path."""
    log = pd.read_csv(cdnow_file(), sep=r"\s+", dtype=str)
    # The log has no order or product ids: each record is one purchase occasion of CDs.
    log.insert(0, "record_no", [f"r{i}" for i in range(len(log))])
    log["item"] = "cd"
    log.to_csv(folder / "cdnow.csv", index=False)
    (folder / "promotions.csv").write_text("promotion_id,starts_at,ends_at,mechanic,audience\n")
    (folder / "assignments.csv").write_text("promotion_id,customer_id,arm,assigned_at\n")
    (folder / "liftlag.toml").write_text(CDNOW_CONFIG)
    return folder / "liftlag.toml"


@pytest.fixture(scope="module")
def cdnow_workspace(tmp_path_factory):
    settings = config.load(write_cdnow_export(tmp_path_factory.mktemp("cdnow")))
    result = panels.build(settings)
    con = duckdb.connect(str(workspace.path(settings, workspace.PANELS)), read_only=True)
    yield result, con
    con.close()


def test_cdnow_every_record_is_accepted(cdnow_workspace):
    result, _ = cdnow_workspace
    summary = result.check.summary.set_index("table")
    assert summary.loc["transactions", "rows_read"] == 69_659  # Fader & Hardie
    assert summary.loc["transactions", "rejected"] == 0


def test_cdnow_orders_panel_reproduces_published_counts(cdnow_workspace):
    _, con = cdnow_workspace
    orders, customers, first, last = con.execute(
        "SELECT count(*), count(DISTINCT customer_id), min(ordered_on), max(ordered_on) FROM orders"
    ).fetchall()[0]
    assert orders == 69_659  # transactions, Fader & Hardie
    assert customers == 23_570  # customers, Fader & Hardie
    assert str(first) == "1997-01-01" and str(last) == "1998-06-30"  # the published date range


def test_cdnow_purchase_gaps_cover_every_customer(cdnow_workspace):
    _, con = cdnow_workspace
    gaps, censored, customers = con.execute(
        "SELECT count(*), count(*) FILTER (WHERE NOT is_next_observed), count(DISTINCT customer_id) FROM purchase_gaps"
    ).fetchall()[0]
    # Zero-value records are purchases too (only negative nets are returns): one gap per record,
    # one censored gap per customer (common practice, no source).
    negative = con.execute("SELECT count(*) FROM orders WHERE is_return").fetchall()[0][0]
    assert gaps == 69_659 - negative
    assert censored == customers == 23_570
