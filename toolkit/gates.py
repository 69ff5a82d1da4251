"""Sanity gates between the check and any analysis: can this data answer the question at all?

The check accounts for every row; the gates look at the whole. They run at the end of
``checks.validate`` (so ``check``, ``build`` and every analysis stop), on the accepted rows, and
each returns a problem — table, figure, threshold and the likely cause — when its figure crosses
the threshold in ``[gates]`` (``toolkit.config.GateSettings``):

* ``lines_accepted``: the share of order lines (and of assignments) accepted;
* ``assigned_found``: the share of assigned customers who appear in the accepted order lines
  (tested again with ids case-folded and in Unicode NFC form, to name that cause);
* ``promotions_kept``: the share of promotions named by order lines that keep some of them;
* ``order_dates``: order lines dated far outside the bulk (central 98%) of the order dates.

A problem makes the check unusable: exit 3 with the message. Common practice, no source: the
thresholds are defaults to be set per export, documented in README.
"""

from __future__ import annotations

import pandas as pd

from .config import Settings
from .engine.duckdb import scalar

# What usually causes many rejections of one reason (the detail names the column).
_LIKELY = {
    "unparseable_value": "values in a format liftlag does not read (dates: set tables.{table}.formats.<column>, "
                         "e.g. \"%d/%m/%Y\"; numbers: a decimal comma or a currency sign in the export)",
    "missing_required": "a column mapped to the wrong export column, or a column the export leaves empty",
    "unknown_promotion": "promotion rows that were rejected or are missing from the promotions export",
    "duplicate_row": "the same file read twice (check that tables.{table}.path matches each file once)",
    "timestamp_beyond_horizon": "dates in the wrong century or a placeholder date (see checks.future_days / past_years)",
    "value_not_allowed": "codes the config does not map (tables.{table}.values)",
    "date_outside_partition": "files placed in the wrong order-date folders, or tables.{table}.date_partition naming "
                              "a key that is not the order date (an export or load date)",
    "duplicate_key": "a key repeated with other values (several versions of a row exported)",
}


def evaluate(con, settings: Settings, summary: pd.DataFrame) -> list[str]:
    """Run every gate on ``con`` (the checked connection, with ``accepted_<table>`` views and the
    ``rejected`` table); return the problems (empty when the data can be analysed)."""
    thresholds = settings.gates
    problems: list[str] = []
    read = summary.set_index("table")
    for table, what in (("transactions", "order lines"), ("assignments", "assignments")):
        if table in read.index and bool(read.loc[table, "configured"]):
            problems += _lines_accepted(con, table, what, int(read.loc[table, "rows_read"]),
                                        int(read.loc[table, "accepted"]), thresholds.min_lines_accepted_share)
    if problems:  # the other figures would only repeat this cause
        return problems
    # One scan of the accepted order lines for the date figures; the other scans run only when
    # they can find something (on a clean export: this one and the distinct customers).
    lines = con.execute(
        "SELECT count(*), approx_quantile(ordered_at, 0.01), approx_quantile(ordered_at, 0.99), min(ordered_at), "
        "max(ordered_at) FROM accepted_transactions"
    ).fetchall()[0]
    problems += _assigned_found(con, thresholds.min_assigned_found_share)
    lines_rejected = int(read.loc["transactions", "rejected"]) if "transactions" in read.index else 0
    if lines_rejected:  # with no order line rejected, every promotion keeps its lines
        problems += _promotions_kept(con, thresholds.min_promotions_kept_share)
    problems += _order_dates(con, lines, thresholds.date_margin_days, thresholds.max_outlying_date_share)
    return problems


def _lines_accepted(con, table: str, what: str, rows_read: int, accepted: int, minimum: float) -> list[str]:
    if rows_read == 0:
        return []
    share = accepted / rows_read
    if share >= minimum:
        return []
    top = con.execute(
        "SELECT reason, count(*) AS n, min(detail) AS detail FROM rejected WHERE table_name = ? "
        "GROUP BY reason ORDER BY n DESC, reason LIMIT 1", [table]
    ).fetchall()
    cause = ""
    if top:
        reason, n, detail = top[0]
        likely = _LIKELY.get(reason, "see the rejects summary").format(table=table)
        cause = f"; most were rejected as {reason} ({n:,} rows, e.g. {detail}); likely cause: {likely}"
    return [f"table {table}: only {accepted:,} of {rows_read:,} {what} were accepted ({share:.1%}, below "
            f"gates.min_lines_accepted_share = {minimum:g}){cause}"]


def _assigned_found(con, minimum: float) -> list[str]:
    con.execute("CREATE OR REPLACE TEMP TABLE gate_assigned AS SELECT DISTINCT customer_id FROM accepted_assignments")
    assigned = scalar(con, "SELECT count(*) FROM gate_assigned")
    if not assigned:
        return []
    con.execute("CREATE OR REPLACE TEMP TABLE gate_buyers AS SELECT DISTINCT customer_id FROM accepted_transactions")
    found = scalar(con, "SELECT count(*) FROM gate_assigned SEMI JOIN gate_buyers USING (customer_id)")
    share = found / assigned
    if share >= minimum:
        return []
    # Would the ids match once case and Unicode normal form are set aside?
    folded = scalar(
        con,
        "SELECT count(*) FROM (SELECT DISTINCT lower(nfc_normalize(trim(customer_id))) AS k FROM gate_assigned) "
        "SEMI JOIN (SELECT DISTINCT lower(nfc_normalize(trim(customer_id))) AS k FROM gate_buyers) USING (k)",
    )
    message = (f"table assignments: only {found:,} of {assigned:,} assigned customers ({share:.1%}) appear in the "
               f"accepted order lines (below gates.min_assigned_found_share = {minimum:g}); ")
    if folded / assigned >= minimum and folded > found:
        example = con.execute(
            "SELECT a.customer_id, b.customer_id FROM gate_assigned AS a INNER JOIN gate_buyers AS b "
            "ON lower(nfc_normalize(trim(a.customer_id))) = lower(nfc_normalize(trim(b.customer_id))) "
            "AND a.customer_id <> b.customer_id LIMIT 1"
        ).fetchall()
        shown = f" (e.g. {example[0][0]!r} in assignments, {example[0][1]!r} in order lines)" if example else ""
        message += (f"likely cause: customer ids differ in letter case or Unicode normal form between the two "
                    f"exports{shown}: {folded:,} ({folded / assigned:.1%}) match when that is set aside; export "
                    f"both with the same ids")
    else:
        spans = con.execute(
            "SELECT (SELECT min(assigned_at) FROM accepted_assignments), (SELECT max(assigned_at) FROM accepted_assignments), "
            "(SELECT min(ordered_at) FROM accepted_transactions), (SELECT max(ordered_at) FROM accepted_transactions)"
        ).fetchall()[0]
        message += (f"likely cause: the assignments use another customer id than the order lines (map "
                    f"tables.assignments.columns.customer_id to the same id), or the order lines cover another period "
                    f"(assignments {_day(spans[0])} to {_day(spans[1])}, order lines {_day(spans[2])} to {_day(spans[3])})")
    return [message]


def _promotions_kept(con, minimum: float) -> list[str]:
    rows = con.execute(
        "WITH named AS (SELECT DISTINCT promotion_id FROM staged_transactions WHERE promotion_id IS NOT NULL), "
        "listed AS (SELECT DISTINCT promotion_id FROM staged_promotions WHERE promotion_id IS NOT NULL), "
        "kept AS (SELECT DISTINCT promotion_id FROM accepted_transactions WHERE promotion_id IS NOT NULL) "
        "SELECT n.promotion_id, k.promotion_id IS NOT NULL AS is_kept FROM named AS n "
        "SEMI JOIN listed AS l ON n.promotion_id = l.promotion_id "
        "LEFT JOIN kept AS k ON n.promotion_id = k.promotion_id ORDER BY n.promotion_id"
    ).fetchall()
    if not rows:
        return []
    lost = [pid for pid, is_kept in rows if not is_kept]
    share = 1 - len(lost) / len(rows)
    if share >= minimum or not lost:
        return []
    causes = dict(con.execute(
        "SELECT promotion_id, arg_min(rule || ': ' || detail, rule_order) FROM rejected_promotions "
        "WHERE promotion_id IN (SELECT unnest(?)) GROUP BY promotion_id", [lost]
    ).fetchall())
    shown = []
    for pid in lost[:5]:
        cause = causes.get(pid)
        shown.append(f"{pid} (its promotions row was rejected: {cause})" if cause else
                     f"{pid} (every order line naming it was rejected)")
    more = f" and {len(lost) - 5} more" if len(lost) > 5 else ""
    return [f"table promotions: {len(lost)} of {len(rows)} promotions named by order lines lost all their lines "
            f"({share:.1%} kept, below gates.min_promotions_kept_share = {minimum:g}): {'; '.join(shown)}{more}; "
            f"their sales would be missing from every analysis: fix those rows"]


def _order_dates(con, lines: tuple, margin_days: int, max_share: float) -> list[str]:
    import datetime as dt

    total, low, high, earliest, latest = lines
    if not total or low is None:
        return []
    margin = dt.timedelta(days=margin_days)
    if earliest >= low - margin and latest <= high + margin:
        return []
    outlying = con.execute(
        "SELECT count(*), min(ordered_at), max(ordered_at) FROM accepted_transactions "
        "WHERE ordered_at < ? OR ordered_at > ?",
        [low - margin, high + margin],
    ).fetchall()[0]
    n, first, last = outlying
    if not n or n / total <= max_share:
        return []
    return [f"table transactions: {n:,} order lines ({n / total:.2%}) are dated more than {margin_days} days "
            f"outside the bulk of the order dates ({_day(low)} to {_day(high)}; gates.date_margin_days), from "
            f"{_day(first)} to {_day(last)}; likely cause: a placeholder or mistyped date, which would stretch every "
            f"customer's timeline; fix or remove those lines (or raise gates.date_margin_days / "
            f"gates.max_outlying_date_share if they are real)"]


def _day(value) -> str:
    return "?" if value is None else str(value)[:10]
