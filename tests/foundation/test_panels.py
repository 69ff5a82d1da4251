"""Every panel value of the tiny export (tests/conftest.py), worked out by hand.

Hand computation, common practice, no source: costs are unit_cost x quantity for p1 (4.00 a
unit) and list x (1 - margin_rate) = list x 0.6 for p2 (no unit_cost); PA runs Mon 2026-03-02 to
Sun 03-08 (7 days), PB (broadcast) 03-16 to 03-18; pre_period_days = 60, after_days = 14, so for
PA the pre-period is [01-01, 03-02), the CUPED window [02-23, 03-02), the after window
(03-08, 03-22]. The export's last day is 04-06 (a Monday).
"""

from __future__ import annotations

import datetime as dt

import duckdb
import pandas as pd
import pytest

from toolkit import config, panels, workspace
from tests.conftest import write_export

D = dt.date


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    cfg = write_export(tmp_path_factory.mktemp("tiny") / "export")
    settings = config.load(cfg)
    panels.build(settings)
    con = duckdb.connect(str(workspace.path(settings, workspace.PANELS)), read_only=True)
    yield con
    con.close()


def frame(con, sql):
    return con.execute(sql).df()


def test_orders_match_hand_computation(built):
    got = frame(built, "SELECT * FROM orders ORDER BY order_id")
    # order: lines, quantity, net, list, discount, cost, margin, is_deal, is_return, promotion, depth
    expected = [
        # o1: p1 2 x 4 = 8 cost + p2 10 x 0.6 = 6 -> cost 14, margin 30 - 14 = 16
        ("o1", "c1", D(2026, 2, 2), 2, 3.0, 30.0, 30.0, 0.0, 14.0, 16.0, False, False, None, 0.0),
        # o2: p1 1 x 4 = 4; net 8 -> margin 4; discount 2 of list 10 -> depth 0.2
        ("o2", "c1", D(2026, 3, 3), 1, 1.0, 8.0, 10.0, 2.0, 4.0, 4.0, True, False, "PA", 0.2),
        # o3: p2 list 10 x 0.6 = 6; net 9 -> margin 3; depth 1/10
        ("o3", "c1", D(2026, 3, 18), 1, 1.0, 9.0, 10.0, 1.0, 6.0, 3.0, True, False, "PB", 0.1),
        # o4: a return of one p1: cost -4, net -10 -> margin -6; negative list -> depth 0
        ("o4", "c1", D(2026, 3, 21), 1, -1.0, -10.0, -10.0, 0.0, -4.0, -6.0, False, True, None, 0.0),
        # o5: p2 list 30 x 0.6 = 18 -> margin 12
        ("o5", "c2", D(2026, 2, 20), 1, 3.0, 30.0, 30.0, 0.0, 18.0, 12.0, False, False, None, 0.0),
        # o6: p1 4 + p2 6 = 10 -> margin 10
        ("o6", "c2", D(2026, 3, 5), 2, 2.0, 20.0, 20.0, 0.0, 10.0, 10.0, False, False, None, 0.0),
        ("o7", "c3", D(2026, 1, 12), 1, 1.0, 10.0, 10.0, 0.0, 4.0, 6.0, False, False, None, 0.0),
        # o8: p2 list 20 x 0.6 = 12; net 18 -> margin 6; depth 2/20
        ("o8", "c3", D(2026, 3, 17), 1, 2.0, 18.0, 20.0, 2.0, 12.0, 6.0, True, False, "PB", 0.1),
        # o9: the p2 line has no list amount: list = net + discount = 10; cost 4 + 6
        ("o9", "c3", D(2026, 4, 6), 2, 2.0, 20.0, 20.0, 0.0, 10.0, 10.0, False, False, None, 0.0),
    ]
    cols = ["order_id", "customer_id", "ordered_on", "lines", "quantity", "net_amount", "list_amount",
            "discount_amount", "cost_amount", "margin_amount", "is_deal", "is_return", "promotion_id", "depth"]
    want = pd.DataFrame(expected, columns=cols)
    got = got[cols].copy()
    got["ordered_on"] = pd.to_datetime(got["ordered_on"]).dt.date
    got["promotion_id"] = got["promotion_id"].astype(object).where(got["promotion_id"].notna(), None)
    pd.testing.assert_frame_equal(got.reset_index(drop=True), want, check_dtype=False, atol=1e-9)


def test_customer_periods_match_hand_computation(built):
    got = frame(built, "SELECT * FROM customer_periods ORDER BY customer_id, week_on")
    got["week_on"] = pd.to_datetime(got["week_on"]).dt.date
    # Rows: weeks with an order, a coupon arriving (PA's, Sun 03-01, in the week of 02-23) or a
    # running campaign (PA in the week of 03-02). c2 is PA's holdout: no coupon arrives for it.
    # week: (orders, net, discount, deals, broadcast, coupon active, holdout active, coupons received)
    want = {
        ("c1", D(2026, 2, 2)): (1, 30.0, 0.0, 0, False, False, False, 0),
        ("c1", D(2026, 2, 23)): (0, 0.0, 0.0, 0, False, False, False, 1),
        ("c1", D(2026, 3, 2)): (1, 8.0, 2.0, 1, False, True, False, 1),
        # o3 (Wed 03-18, 9.00, deal) and the return o4 (Sat 03-21, -10.00, not an order); PB runs
        ("c1", D(2026, 3, 16)): (1, -1.0, 1.0, 1, True, False, False, 1),
        ("c2", D(2026, 2, 16)): (1, 30.0, 0.0, 0, False, False, False, 0),
        ("c2", D(2026, 3, 2)): (1, 20.0, 0.0, 0, False, False, True, 0),
        ("c3", D(2026, 1, 12)): (1, 10.0, 0.0, 0, False, False, False, 0),
        ("c3", D(2026, 2, 23)): (0, 0.0, 0.0, 0, False, False, False, 1),
        ("c3", D(2026, 3, 2)): (0, 0.0, 0.0, 0, False, True, False, 1),
        ("c3", D(2026, 3, 16)): (1, 18.0, 2.0, 1, True, False, False, 1),
        ("c3", D(2026, 4, 6)): (1, 20.0, 0.0, 0, False, False, False, 1),
    }
    assert [tuple(k) for k in got[["customer_id", "week_on"]].itertuples(index=False)] == list(want)
    for row in got.itertuples(index=False):
        expected = want[(row.customer_id, row.week_on)]
        assert (row.orders, row.net_amount, row.discount_amount, row.deal_orders) == pytest.approx(expected[:4])
        assert (row.is_broadcast_running, row.is_coupon_active, row.is_holdout_active) == expected[4:7]
        assert row.coupons_received == expected[7]


def test_purchase_gaps_match_hand_computation(built):
    got = frame(built, "SELECT * FROM purchase_gaps ORDER BY customer_id, ordered_on")
    nan = None
    # order, days to next, observed, deal, depth, days since last coupon (Sun 03-01), coupons, running
    expected = [
        ("o1", 29, True, False, 0.0, nan, 0, False),    # 02-02 -> 03-03; coupon not yet received
        ("o2", 15, True, True, 0.2, 2, 1, True),        # 03-03 -> 03-18; in PA with c1's coupon
        ("o3", 19, False, True, 0.1, 17, 1, True),      # 03-18 -> censored 04-06 (o4 is a return); PB runs
        ("o5", 13, True, False, 0.0, nan, 0, False),    # 02-20 -> 03-05
        ("o6", 32, False, False, 0.0, nan, 0, False),   # 03-05 -> censored 04-06; holdout, no coupon
        ("o7", 64, True, False, 0.0, nan, 0, False),    # 01-12 -> 03-17
        ("o8", 20, True, True, 0.1, 16, 1, True),       # 03-17 -> 04-06; PB runs
        ("o9", 0, False, False, 0.0, 36, 1, False),     # 04-06 is the export's last day
    ]
    assert list(got["order_id"]) == [e[0] for e in expected]
    for row, want in zip(got.itertuples(), expected):
        assert row.days_to_next_order == want[1], row.order_id
        assert row.is_next_observed == want[2], row.order_id
        assert row.is_deal == want[3] and row.depth == pytest.approx(want[4]), row.order_id
        if want[5] is None:
            assert pd.isna(row.days_since_last_coupon), row.order_id
        else:
            assert row.days_since_last_coupon == want[5], row.order_id
        assert row.coupons_received == want[6], row.order_id
        assert row.is_promotion_running == want[7], row.order_id


def test_campaign_windows_match_hand_computation(built):
    got = frame(built, "SELECT * FROM campaign_windows ORDER BY customer_id").set_index("customer_id")
    assert list(got.index) == ["c1", "c2", "c3"]
    assert set(got["promotion_id"]) == {"PA"}
    assert list(got["arm"]) == ["treatment", "holdout", "treatment"]
    assert pd.to_datetime(got["after_ends_on"]).dt.date.tolist() == [D(2026, 3, 22)] * 3
    want = {
        # c1: pre-period order o1 on 02-02 (28 days before 03-02, 30.00, full price); nothing in
        # the CUPED week; o2 during (8.00, margin 4, redeemed PA with 2.00 off); after: o3 (9.00,
        # margin 3) and the return o4 (-10.00, margin -6) -> net -1, margin -3, one purchase.
        "c1": dict(recency_days=28, frequency=1, monetary=30.0, tenure_days=28, past_deal_share=0.0,
                   past_coupons=0, pre_buyer=0, pre_orders=0, pre_net_amount=0.0, pre_margin_amount=0.0,
                   during_buyer=1, during_orders=1, during_net_amount=8.0, during_margin_amount=4.0,
                   after_buyer=1, after_orders=1, after_net_amount=-1.0, after_margin_amount=-3.0,
                   redeemed=1, discount_amount=2.0),
        # c2: o5 on 02-20 (10 days before); o6 during (20.00, margin 10); nothing after.
        "c2": dict(recency_days=10, frequency=1, monetary=30.0, tenure_days=10, past_deal_share=0.0,
                   past_coupons=0, pre_buyer=0, pre_orders=0, pre_net_amount=0.0, pre_margin_amount=0.0,
                   during_buyer=1, during_orders=1, during_net_amount=20.0, during_margin_amount=10.0,
                   after_buyer=0, after_orders=0, after_net_amount=0.0, after_margin_amount=0.0,
                   redeemed=0, discount_amount=0.0),
        # c3: o7 on 01-12 (49 days before); first seen 2025-12-01 (91 days before); nothing
        # during; o8 after (18.00, margin 6) in the broadcast sale, not a PA redemption.
        "c3": dict(recency_days=49, frequency=1, monetary=10.0, tenure_days=91, past_deal_share=0.0,
                   past_coupons=0, pre_buyer=0, pre_orders=0, pre_net_amount=0.0, pre_margin_amount=0.0,
                   during_buyer=0, during_orders=0, during_net_amount=0.0, during_margin_amount=0.0,
                   after_buyer=1, after_orders=1, after_net_amount=18.0, after_margin_amount=6.0,
                   redeemed=0, discount_amount=0.0),
    }
    for customer, values in want.items():
        for column, value in values.items():
            assert got.loc[customer, column] == pytest.approx(value), (customer, column)


def test_customer_quarters_match_hand_computation(built):
    got = frame(built, "SELECT * FROM customer_quarters ORDER BY customer_id, quarter")
    rows = [tuple(r) for r in got[["customer_id", "quarter", "orders", "deal_orders", "net_amount",
                                   "deal_net_amount", "discount_amount"]].itertuples(index=False)]
    assert rows == [
        # c1 Q1: o1, o2, o3 purchases (+ return o4): net 30 + 8 + 9 - 10 = 37; deals o2, o3 = 17
        ("c1", "2026Q1", 3, 2, 37.0, 17.0, 3.0),
        ("c2", "2026Q1", 2, 0, 50.0, 0.0, 0.0),
        ("c3", "2026Q1", 2, 1, 28.0, 18.0, 2.0),
        ("c3", "2026Q2", 1, 0, 20.0, 0.0, 0.0),
    ]
    depth = got.set_index(["customer_id", "quarter"])["mean_depth"]
    assert depth[("c1", "2026Q1")] == pytest.approx(0.15)  # mean of 0.2 and 0.1
    assert pd.isna(depth[("c2", "2026Q1")])
    assert depth[("c3", "2026Q1")] == pytest.approx(0.1)
    assert pd.isna(depth[("c3", "2026Q2")])


def test_csv_and_parquet_exports_give_identical_panels(tmp_path):
    """The same export as CSV and as typed Parquet builds the same panels (common practice, no source)."""
    out = {}
    for kind in ("csv", "parquet"):
        settings = config.load(write_export(tmp_path / kind, parquet=(kind == "parquet")))
        panels.build(settings)
        con = duckdb.connect(str(workspace.path(settings, workspace.PANELS)), read_only=True)
        out[kind] = {name: con.execute(f"SELECT * FROM {name} ORDER BY ALL").df() for name in panels.PANEL_ORDER}
        con.close()
    for name in panels.PANEL_ORDER:
        pd.testing.assert_frame_equal(out["csv"][name], out["parquet"][name], obj=name)


def test_customer_quarter_behaviour_matches_hand_computation(built):
    got = frame(built, "SELECT * FROM customer_quarter_behaviour ORDER BY customer_id, quarter").set_index(
        ["customer_id", "quarter"])
    # c1 Q1: purchases o1 (02-02, 2 lines, 3 items, net 30), o2 (03-03, 1 line, net 8, 2 off, depth 0.2),
    # o3 (03-18, net 9, 1 off, depth 0.1); the return o4 is left out. Weeks of 02-02, 03-02, 03-16.
    c1 = got.loc[("c1", "2026Q1")]
    assert (c1["orders"], c1["purchase_days"], c1["purchase_weeks"], c1["active_span_days"]) == (3, 3, 3, 44)
    assert (c1["lines"], c1["quantity"], c1["net_amount"], c1["list_amount"]) == (4, 5.0, 47.0, 50.0)
    assert c1["discount_amount"] == 3.0 and c1["deal_orders"] == 2 and c1["max_depth"] == pytest.approx(0.2)
    # c2 Q1: o5 (02-20, 3 items, 30) and o6 (03-05, two lines, 20), no deal.
    c2 = got.loc[("c2", "2026Q1")]
    assert (c2["orders"], c2["purchase_weeks"], c2["active_span_days"], c2["quantity"]) == (2, 2, 13, 5.0)
    assert c2["deal_orders"] == 0 and c2["max_depth"] == 0.0
    # c3 Q2: o9 alone (04-06, two lines, list missing on one line: list derived as net + discount = 20).
    c3 = got.loc[("c3", "2026Q2")]
    assert (c3["orders"], c3["lines"], c3["net_amount"], c3["list_amount"], c3["active_span_days"]) == (1, 2, 20.0, 20.0, 0)
