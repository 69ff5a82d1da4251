"""Discount dependence on the tiny hand-written export of tests/conftest.py, worked by hand.

The dependence index is the depth-weighted deal share of the quarter's purchases:
w = 0 at full price, min(1, depth / 0.2) for a deal with a discount (reference depth 0.2).

2026Q1 (return-only order o4 left out):
  c1: o1 full price (net 30) w=0; o2 PA, 2 off 10 -> depth 0.2, w=1; o3 PB, 1 off 10 -> depth 0.1,
      w=0.5.  index = 1.5/3 = 0.5  -> band dependent (threshold 0.5)
  c2: o5 (30), o6 (20) full price.  index = 0 -> full_price
  c3: o7 full price (10); o8 PB, 2 off 20 -> depth 0.1, w=0.5 (net 18).  index = 0.25 -> occasional
  orders 3+2+2 = 7, deal orders 3: deal_share_orders = 3/7
  revenue 47+50+28 = 125, deal revenue 8+9+18 = 35: deal_share_revenue = 0.28
  mean depth of deal orders (0.2+0.1+0.1)/3 = 0.1333; deal-only customers 0/3; full-price 1/3
  index percentiles of {0, 0.25, 0.5}: median 0.25, 90th (linear) 0.25 + 0.8*0.25 = 0.45
2026Q2: c3 only, o9 at full price: index 0.
Transitions 2026Q1 -> 2026Q2: c1 dependent -> inactive (left), c2 full_price -> inactive (left),
  c3 occasional -> full_price (fewer_deals).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest

from tests.conftest import TINY_PROMOTIONS, TINY_TRANSACTIONS, write_export
from toolkit import config, panels, workspace
from toolkit.config import LongrunSettings, ReportSettings
from toolkit.longrun import dependence
from toolkit.longrun.dependence import DependenceByQuarter


def _readout(tmp_path, **kwargs):
    settings = config.load(write_export(tmp_path / "export", **kwargs))
    settings = dataclasses.replace(settings, report=ReportSettings(small_cell=1),
                                   longrun=LongrunSettings(bootstrap_rounds=50))
    panels.build(settings)
    con = workspace.connect(settings)
    try:
        import datetime as dt

        return dependence.analyse(con, settings, dt.date(2026, 6, 30))
    finally:
        con.close()


def test_dependence_quarter_table_matches_the_hand_worked_tiny_export(tmp_path):
    tables, notes = _readout(tmp_path)
    q = tables["dependence_by_quarter"].set_index("quarter")
    assert list(q.index) == ["2026Q1", "2026Q2"]
    first = q.loc["2026Q1"]
    assert first["customers"] == 3
    assert first["deal_share_orders"] == pytest.approx(3 / 7)
    assert first["deal_share_revenue"] == pytest.approx(0.28)
    assert first["mean_depth"] == pytest.approx(0.4 / 3)
    assert first["deal_only_share"] == 0
    assert first["full_price_share"] == pytest.approx(1 / 3)
    assert first["dependence_index_p50"] == pytest.approx(0.25)
    assert first["dependence_index_p90"] == pytest.approx(0.45)
    assert first["dependence_index_mean"] == pytest.approx(0.25)
    assert first["dependent_share"] == pytest.approx(1 / 3)
    assert first["deal_share_orders_ci_low"] <= 3 / 7 <= first["deal_share_orders_ci_high"]
    second = q.loc["2026Q2"]
    assert second["customers"] == 1 and second["deal_share_orders"] == 0 and second["full_price_share"] == 1
    moves = tables["dependence_transitions"].set_index(["band_from", "band_to"])
    assert moves.loc[("dependent", "inactive"), "movement"] == "left"
    assert moves.loc[("full_price", "inactive"), "movement"] == "left"
    assert moves.loc[("occasional", "full_price"), "movement"] == "fewer_deals"
    assert moves["customers"].sum() == 3
    dist = tables["dependence_distribution"]
    assert dist[dist["quarter"] == "2026Q1"].set_index("bin")["customers"].to_dict() == {0: 1, 3: 1, 5: 1}


def test_no_promotions_gives_zero_dependence(tmp_path):
    """No deals at all: every index is 0, and the section says so (common practice, no source)."""
    full_price = [row[:5] + [row[5], row[5], "0", ""] for row in TINY_TRANSACTIONS]
    tables, notes = _readout(tmp_path, transactions=full_price, promotions=[], assignments=[])
    q = tables["dependence_by_quarter"]
    assert (q["deal_share_orders"] == 0).all() and (q["dependence_index_p90"] == 0).all()
    assert (q["full_price_share"] == 1).all()
    assert any("no deal orders" in n for n in notes)


def test_small_quarters_are_suppressed(tmp_path):
    settings = config.load(write_export(tmp_path / "export"))
    panels.build(settings)
    con = workspace.connect(settings)
    try:
        import datetime as dt

        tables, _ = dependence.analyse(con, settings, dt.date(2026, 6, 30))
    finally:
        con.close()
    q = tables["dependence_by_quarter"]
    assert q["is_suppressed"].all() and q["deal_share_orders"].isna().all()
    assert q["customers"].tolist() == [3, 1]  # the count itself is shown; the shares are not


def test_block_bootstrap_interval_covers_the_binomial_interval():
    """On independent customers with one order each, the block-bootstrap interval of the deal
    share is close to the normal-approximation binomial interval (common practice, no source)."""
    rng = np.random.default_rng(7)
    n, p = 4000, 0.3
    deal = rng.random(n) < p
    block = rng.integers(0, 64, n)
    frame = pd.DataFrame({"block": block, "deal": deal.astype(float)})
    sums = frame.groupby("block")["deal"].agg(["sum", "count"]).reset_index()
    blocks = pd.DataFrame({
        "quarter": "2026Q1", "block": sums["block"], "customers": sums["count"], "orders": sums["count"],
        "deal_orders": sums["sum"], "net_amount": sums["count"] * 10.0, "deal_net_amount": sums["sum"] * 10.0,
        "deal_depth_sum": sums["sum"] * 0.2, "deal_only_customers": sums["sum"],
        "full_price_customers": sums["count"] - sums["sum"], "dependent_customers": sums["sum"],
        "dependence_index_sum": sums["sum"]})
    fit = DependenceByQuarter(bootstrap_rounds=400, seed=3).fit(blocks)
    ci = fit.conf_int().loc[("2026Q1", "deal_share_orders")]
    share = deal.mean()
    half = 1.96 * np.sqrt(share * (1 - share) / n)
    assert ci["ci_low"] == pytest.approx(share - half, abs=0.006)
    assert ci["ci_high"] == pytest.approx(share + half, abs=0.006)
