"""The timing SQL (sql/timing/*.sql via toolkit.timing.spells) on a hand-made workspace.

Every expected value below is worked out by hand in the comments (common practice, no source).
"""

from __future__ import annotations

import re
from datetime import date, timedelta

import pandas as pd
import pytest

from toolkit.timing.schedule import anticipation_windows
from toolkit.timing.spells import ORDER, SQL_DIR, SpellOptions, TimingTables, periods_table

from .synthetic import workspace

DAY0 = date(2025, 1, 6)  # a Monday; day k below is DAY0 + k days


def day(k: int) -> date:
    return DAY0 + timedelta(days=k)


@pytest.fixture(scope="module")
def hand_tables():
    """Customer A: orders on days 6 (with coupon T01), 10 (twice: a same-day repeat) and 40; holds
    T01 (days 5-9). Customer B: one order on day 3. A broadcast sale runs days 30-32; one expected
    campaign start on day 45 with a 3-day anticipation window (days 42-44). The export ends on day 50.
    dip_days = 21 (days 7-27 after A's coupon order on day 6); anticipation needs 1 coupon."""
    orders = pd.DataFrame({
        "customer_id": ["A", "A", "A", "A", "B"], "order_id": ["1", "2", "3", "4", "5"],
        "ordered_on": [day(6), day(10), day(10), day(40), day(3)], "promotion_id": ["T01", None, None, None, None]})
    orders["is_deal"] = orders["promotion_id"].notna()
    promotions = pd.DataFrame([
        {"promotion_id": "T01", "starts_at": pd.Timestamp(day(5)), "ends_at": pd.Timestamp(day(9)),
         "mechanic": "percent_off", "depth": 0.2, "audience": "targeted", "cost_per_redemption": 0.0, "name": "t"},
        {"promotion_id": "B01", "starts_at": pd.Timestamp(day(30)), "ends_at": pd.Timestamp(day(32)),
         "mechanic": "percent_off", "depth": 0.2, "audience": "broadcast", "cost_per_redemption": 0.0, "name": "b"}])
    assignments = pd.DataFrame({"promotion_id": ["T01"], "customer_id": ["A"], "arm": ["treatment"],
                                "assigned_at": [pd.Timestamp(day(3))]})
    con = workspace(orders, promotions, assignments, day(50))
    windows = anticipation_windows([day(45)], 3)  # nothing to cut it: days 42-44
    tables = TimingTables(con, SpellOptions(dip_days=21, anticipation_days=3, min_coupons=1, n_blocks=4), windows)
    yield tables
    tables.close()


def test_same_day_orders_are_merged_and_counted(hand_tables):
    counts = hand_tables.counts()
    assert counts == {"customers": 2, "purchase_days": 4, "orders": 5, "same_day_orders_merged": 1,
                      "purchase_days_without_follow_up": 0, "next_purchases_observed": 2}


def test_spells_are_cut_where_a_covariate_changes(hand_tables):
    spells = hand_tables.cursor.execute(
        "SELECT customer_id, purchase_day - ? AS day, start_days, stop_days, is_event, promotion_available, in_dip, "
        "in_dip_during_promotion, in_anticipation, coupons_received FROM timing_spells "
        "ORDER BY customer_id, purchase_day, start_days", [(DAY0 - date(1970, 1, 1)).days]).df()
    expected = pd.DataFrame([
        # A, gap from day 6 to day 10 (4 days): days 7-9 hold the coupon inside the dip, day 10 dip only + event
        ("A", 6, 0, 3, False, 1, 0, 1, 0, 1),
        ("A", 6, 3, 4, True, 0, 1, 0, 0, 1),
        # A, day 10 to day 40 (30 days): dip to day 27 (gap day 17), cut at 1 February (day 26 = gap day 16),
        # sale days 30-32 (gap days 20-22), event on gap day 30
        ("A", 10, 0, 15, False, 0, 1, 0, 0, 1),
        ("A", 10, 15, 17, False, 0, 1, 0, 0, 1),
        ("A", 10, 17, 19, False, 0, 0, 0, 0, 1),
        ("A", 10, 19, 22, False, 1, 0, 0, 0, 1),
        ("A", 10, 22, 30, True, 0, 0, 0, 0, 1),
        # A, day 40 to the export's end (day 50, censored): anticipation days 42-44 = gap days 2-4
        ("A", 40, 0, 1, False, 0, 0, 0, 0, 1),
        ("A", 40, 1, 4, False, 0, 0, 0, 1, 1),
        ("A", 40, 4, 10, False, 0, 0, 0, 0, 1),
        # B, day 3 to day 50 (censored): no coupon, so the anticipation window changes nothing but
        # still cuts; the sale (days 30-32) is gap days 27-29; 1 February is gap day 23
        ("B", 3, 0, 22, False, 0, 0, 0, 0, 0),
        ("B", 3, 22, 26, False, 0, 0, 0, 0, 0),
        ("B", 3, 26, 29, False, 1, 0, 0, 0, 0),
        ("B", 3, 29, 38, False, 0, 0, 0, 0, 0),
        ("B", 3, 38, 41, False, 0, 0, 0, 0, 0),
        ("B", 3, 41, 47, False, 0, 0, 0, 0, 0),
    ], columns=spells.columns)
    pd.testing.assert_frame_equal(spells, expected, check_dtype=False)


def test_cells_hold_every_day_at_risk_and_every_next_purchase(hand_tables):
    cells = hand_tables.cells()
    # days at risk: A 4 + 30 + 10, B 47 = 91; next purchases observed: 2 (days 10 and 40)
    assert cells["at_risk"].sum() == 91 and cells["events"].sum() == 2
    # week 1 (days 1-7 after a purchase), dip without promotion, 1 coupon: A's day 10 (gap day 4, the
    # event) and A's second gap days 1-7 = 8 days, 1 event
    week1 = cells[(cells["period"] == 0) & (cells["in_dip"] == 1)]
    assert week1[["at_risk", "events"]].sum().tolist() == [8, 1]


def test_gap_counts_feed_the_curves(hand_tables):
    counts = hand_tables.gap_counts().sort_values(["days"]).reset_index(drop=True)
    assert counts[["is_deal", "promotion_id", "days", "is_event", "gaps"]].values.tolist() == [
        [True, "T01", 4, True, 1], [False, None, 10, False, 1], [False, None, 30, True, 1], [False, None, 47, False, 1]]


def test_periods_are_weekly_to_the_horizon_then_coarser():
    periods = periods_table(90, 800)
    assert periods.iloc[0].tolist() == [0, 1, 7] and periods.iloc[12].tolist() == [12, 85, 91]
    assert periods.iloc[13].tolist() == [13, 92, 119]
    assert periods["period_to"].iloc[-1] >= 800


def test_every_sql_file_names_its_table_inputs_and_parameters():
    """House style: one table per file named as the file, a header listing inputs and parameters,
    values bound as variables (no Python formatting placeholders in the SQL)."""
    for name in ORDER:
        text = (SQL_DIR / f"{name}.sql").read_text()
        header = text.split("CREATE", 1)[0]
        assert "-- Reads:" in header and "-- Parameters:" in header, name
        created = re.findall(r"CREATE OR REPLACE TEMP (?:TABLE|VIEW) (\w+)", text)
        assert created == [name], name
        assert "{" not in text.replace("{...}", ""), name
