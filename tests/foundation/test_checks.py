"""Each rejection and warning rule: a row that trips it and a row that does not.

The rules are the design's data contract (common practice, no source). Each case starts from the
clean tiny export (tests/conftest.py), which trips no rule, and adds one row.
"""

from __future__ import annotations

import datetime as dt

import duckdb
import pytest

from toolkit import checks, config, workspace
from tests.conftest import (
    TINY_ASSIGNMENTS,
    TINY_PROMOTIONS,
    TINY_TRANSACTIONS,
    write_export,
)


def run(tmp_path, **tables):
    settings = config.load(write_export(tmp_path / "export", **tables))
    result = checks.run(settings)
    con = duckdb.connect(str(workspace.path(settings, workspace.CHECKED)), read_only=True)
    rejected = con.execute("SELECT table_name, reason, detail, raw_values FROM rejected_rows").fetchall()
    warned = con.execute("SELECT table_name, rule, row_id FROM warning_rows").fetchall()
    con.close()
    return result, rejected, warned


def test_clean_tiny_export_trips_no_rule(tmp_path):
    result, rejected, warned = run(tmp_path)
    assert rejected == [] and warned == []
    assert result.usable


OK_LINE = ["o10", "c2", "2026-03-06 10:00:00", "p1", "1", "10", "10", "0", ""]
# Later than the check's time but within checks.future_days (1 day): a warning, not a rejection.
SOON = (dt.datetime.now(dt.timezone.utc) + dt.timedelta(hours=6)).strftime("%Y-%m-%d %H:%M:%S")

REJECT_CASES = {
    # rule: (table, tripping rows, passing rows)
    "missing_required": ("transactions",
                         [["o10", "  ", "2026-03-06 10:00:00", "p1", "1", "10", "10", "0", ""]], [OK_LINE]),
    "unparseable_value": ("transactions",
                          [["o10", "c2", "06/03/2026 nope", "p1", "1", "10", "10", "0", ""]], [OK_LINE]),
    # The passing line shares customer, order, time and product with the first line (so the rule
    # compares the two value by value) and differs only in its promotion.
    "duplicate_row": ("transactions", [TINY_TRANSACTIONS[0]],
                      [["o1", "c1", "2026-02-02 09:00:00", "p1", "2", "20", "20", "0", "", ][:8] + ["PA"]]),
    "unknown_promotion": ("transactions",
                          [["o10", "c2", "2026-03-06 10:00:00", "p1", "1", "8", "10", "2", "PZ"]],
                          [["o10", "c2", "2026-03-06 10:00:00", "p1", "1", "8", "10", "2", "PA"]]),
    "value_not_allowed": ("assignments", [["PA", "c4", "X", "2026-03-01 10:00:00"]],
                          [["PA", "c4", "H", "2026-03-01 10:00:00"]]),
    "ends_before_starts": ("promotions",
                           [["PC", "2026-05-10", "2026-05-01", "percent_off", "0.1", "targeted", "late"]],
                           [["PC", "2026-05-01", "2026-05-01", "percent_off", "0.1", "targeted", "one day"]]),
    "timestamp_beyond_horizon": ("transactions",
                                 [["o10", "c2", "2999-01-01 10:00:00", "p1", "1", "10", "10", "0", ""]], [OK_LINE]),
    "duplicate_key": ("promotions",
                      [["PA", "2026-04-01", "2026-04-08", "percent_off", "0.3", "targeted", "again"]],
                      [["PD", "2026-04-01", "2026-04-08", "percent_off", "0.3", "targeted", "new"]]),
}
BASE = {"transactions": TINY_TRANSACTIONS, "promotions": TINY_PROMOTIONS, "assignments": TINY_ASSIGNMENTS}


@pytest.mark.parametrize("rule", sorted(REJECT_CASES))
def test_rejection_rule_trips_on_its_row_and_not_on_a_clean_one(tmp_path, rule):
    table, bad, good = REJECT_CASES[rule]
    _, rejected, _ = run(tmp_path / "bad", **{table: BASE[table] + bad})
    assert [(t, r) for t, r, *_ in rejected] == [(table, rule)]
    _, rejected, _ = run(tmp_path / "good", **{table: BASE[table] + good})
    assert rejected == []


def test_rejected_row_keeps_its_original_values(tmp_path):
    bad = ["o10", "c2", "06/03/2026 nope", "p1", "1", "10", "10", "0", ""]
    _, rejected, _ = run(tmp_path, transactions=TINY_TRANSACTIONS + [bad])
    (table, reason, detail, raw), = rejected
    assert "ordered_at" in detail and "06/03/2026 nope" in raw


WARN_CASES = {
    "discount_deeper_than_depth": ("transactions",
                                   [["o10", "c1", "2026-03-04 10:00:00", "p1", "1", "5", "10", "5", "PA"]],
                                   [["o10", "c1", "2026-03-04 10:00:00", "p1", "1", "8", "10", "2", "PA"]]),
    "order_outside_promotion_dates": ("transactions",
                                      [["o10", "c1", "2026-03-12 10:00:00", "p1", "1", "8", "10", "2", "PA"]],
                                      [["o10", "c1", "2026-03-08 23:00:00", "p1", "1", "8", "10", "2", "PA"]]),
    "future_timestamp": ("transactions",
                         [["o10", "c1", SOON, "p1", "1", "10", "10", "0", ""]], [OK_LINE]),
    "unparseable_optional": ("promotions",
                             [["PC", "2026-05-01", "2026-05-02", "percent_off", "15%", "targeted", "x"]],
                             [["PC", "2026-05-01", "2026-05-02", "percent_off", "0.15", "targeted", "x"]]),
    "return_sign_mismatch": ("transactions",
                             [["o10", "c1", "2026-03-06 10:00:00", "p1", "-1", "10", "10", "0", ""]],
                             [["o10", "c1", "2026-03-06 10:00:00", "p1", "-1", "-10", "-10", "0", ""]]),
    "net_above_list": ("transactions",
                       [["o10", "c1", "2026-03-06 10:00:00", "p1", "1", "12", "10", "0", ""]],
                       # a returned line: -8 paid back on -10 list is not "above list"
                       [["o10", "c1", "2026-03-06 10:00:00", "p1", "-1", "-8", "-10", "-2", ""]]),
    "customer_in_both_arms": ("assignments", [["PA", "c1", "H", "2026-03-01 11:00:00"]],
                              [["PA", "c4", "H", "2026-03-01 11:00:00"]]),
}


@pytest.mark.parametrize("rule", sorted(WARN_CASES))
def test_warning_rule_trips_on_its_row_and_keeps_it(tmp_path, rule):
    table, bad, good = WARN_CASES[rule]
    result, rejected, warned = run(tmp_path / "bad", **{table: BASE[table] + bad})
    assert rejected == []  # warnings never remove a row
    assert {r for _, r, _ in warned} == {rule}
    row = result.summary.set_index("table").loc[table]
    assert row.accepted == row.rows_read
    _, rejected, warned = run(tmp_path / "good", **{table: BASE[table] + good})
    assert rejected == [] and warned == []


def test_messy_export_accepted_plus_rejected_equals_read(tmp_path):
    """Many faults at once, some rows tripping several rules: every row counted exactly once."""
    messy = TINY_TRANSACTIONS + [
        TINY_TRANSACTIONS[0], TINY_TRANSACTIONS[0],                          # two extra copies
        ["o10", "", "bad date", "p1", "x", "10", "10", "0", "PZ"],           # missing + unparseable + unknown
        ["o11", "c2", "2026-03-06", "p1", "1", "ten", "10", "0", ""],        # unparseable number
        ["o12", "c2", "2026-03-06", "", "1", "10", "10", "0", "PZ"],         # missing + unknown
        ["o13", "c2", "2026-03-06", "p1", "1", "10", "10", "0", ""],         # fine
    ]
    result, rejected, _ = run(tmp_path, transactions=messy)
    row = result.summary.set_index("table").loc["transactions"]
    assert row.rows_read == len(messy)
    assert row.rejected == 5
    assert row.accepted + row.rejected == row.rows_read
    reasons = sorted(r for t, r, *_ in rejected if t == "transactions")
    # the first rule in the run order names the reason of a row that trips several
    assert reasons == ["duplicate_row", "duplicate_row", "missing_required", "missing_required", "unparseable_value"]
    assert result.rejects["rows"].sum() == row.rejected


def test_a_returned_line_after_the_promotion_is_not_outside_its_dates(tmp_path):
    """A return carries the promotion of the purchase it undoes (common practice, no source)."""
    late_return = ["o2", "c1", "2026-03-15 10:00:00", "p1", "-1", "-8", "-10", "-2", "PA"]
    _, rejected, warned = run(tmp_path, transactions=TINY_TRANSACTIONS + [late_return])
    assert rejected == [] and warned == []
