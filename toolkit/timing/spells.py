"""Build the timing analysis's inputs in SQL: purchase days, spells, cells, gap counts, the sample.

The SQL lives in ``sql/timing/`` (one table or view per file, named as the file). It runs on a
cursor of the workspace connection, so every table it makes is a temporary table private to that
cursor and nothing is written to the workspace. Values are bound as DuckDB variables (``SET
VARIABLE name = ?``) and small inputs computed in Python (the expected campaign starts, the
periods of the discrete-time model) are registered as relations, never formatted into SQL text.

Order of the files (each reads only the panels, the checked inputs and earlier ones):
``timing_purchase_days`` -> ``timing_calendar`` -> ``timing_customer_changes`` ->
``timing_spells`` (a view) -> ``timing_cells``, ``timing_gap_counts``, ``timing_cox_sample``,
``timing_window_exposure``; ``timing_arm_cells`` reads the ``campaign_windows`` and ``purchase_gaps`` panels alone.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd

from .. import sqlfiles
from ..errors import AnalysisError, DataError

SQL_DIR = sqlfiles.folder("timing")  # beside sql/checks and sql/panels
ORDER = (
    "timing_purchase_days",
    "timing_calendar",
    "timing_customer_changes",
    "timing_spells",
    "timing_cells",
    "timing_gap_counts",
    "timing_cox_sample",
    "timing_window_exposure",
    "timing_arm_cells",
)
# Small inputs computed in Python and registered as relations before the SQL runs.
REGISTERED = ("timing_expected_starts", "timing_exposure_periods", "timing_periods", "timing_period_days")
EPOCH = date(1970, 1, 1)
COVARIATES = ("promotion_available", "in_dip", "in_dip_during_promotion", "in_anticipation", "coupons_received",
              "is_exposed")
WINDOW_FRAME_COLUMNS = ("window_no", "start_day", "window_from_day", "window_to_day")
DIP_AFTER = ("targeted", "any")


@dataclass(frozen=True)
class SpellOptions:
    """What the SQL needs to know (from ``settings.timing`` and the cadence)."""

    dip_days: int = 21
    anticipation_days: int = 7
    min_coupons: int = 2
    coupons_cap: int = 10
    n_blocks: int = 64
    seed: int = 20261201
    sample_customers: int = 20000
    dip_after: str = "targeted"
    horizon_days: int = 90
    rate_classes: int = 8
    min_history_days: int = 28


def day_number(day: date) -> int:
    """Days since 1970-01-01, the day numbering of the timing SQL."""
    return (pd.Timestamp(day).date() - EPOCH).days


def periods_table(horizon_days: int, max_days: int) -> pd.DataFrame:
    """Periods of the discrete-time baseline, in days since the purchase day (inclusive bounds).

    Weekly up to the horizon (rounded up to whole weeks), then four-weekly up to a year, then
    one period per further year: the baseline hazard changes fast early on and slowly later.
    """
    edges = list(range(0, 7 * int(np.ceil(max(horizon_days, 7) / 7)) + 1, 7))
    while edges[-1] < 364:
        edges.append(edges[-1] + 28)
    while edges[-1] < max_days:
        edges.append(edges[-1] + 364)
    rows = [{"period": i, "period_from": edges[i] + 1, "period_to": edges[i + 1]} for i in range(len(edges) - 1)]
    return pd.DataFrame(rows)


def window_frame(windows: pd.DataFrame) -> pd.DataFrame:
    """The usable windows as the SQL reads them: day numbers, one row per window with days."""
    if windows is None or windows.empty:
        return pd.DataFrame({c: pd.Series(dtype="int32") for c in WINDOW_FRAME_COLUMNS})
    usable = windows[windows["window_no"].notna()]
    return pd.DataFrame({
        "window_no": usable["window_no"].astype("int32").to_numpy(),
        "start_day": np.array([day_number(d) for d in usable["starts_on"]], dtype=np.int32),
        "window_from_day": np.array([day_number(d) for d in usable["window_from_on"]], dtype=np.int32),
        "window_to_day": np.array([day_number(d) for d in usable["window_to_on"]], dtype=np.int32),
    })


def merge_periods(periods) -> list[tuple[date, date]]:
    """Merge overlapping or touching (date, date) periods into disjoint ones, in date order."""
    merged: list[list[date]] = []
    for low, high in sorted((pd.Timestamp(a).date(), pd.Timestamp(b).date()) for a, b in periods):
        if merged and (low - merged[-1][1]).days <= 1:
            merged[-1][1] = max(merged[-1][1], high)
        else:
            merged.append([low, high])
    return [(a, b) for a, b in merged]


def sql_text(name: str) -> str:
    path = SQL_DIR / f"{name}.sql"
    if not path.is_file():
        raise AnalysisError(f"timing SQL file {path} is missing; reinstall liftlag from its source tree")
    return path.read_text(encoding="utf-8")


def workspace_tables() -> list[str]:
    """The workspace tables the timing SQL reads (``checked.<name>`` for a checked input), from the
    SQL files themselves: every table named in them that no file makes and Python does not register.
    The analysis's own queries (``analyse_timing``) read no others."""
    import sqlglot
    from sqlglot import exp

    made = set(ORDER) | set(REGISTERED)
    reads: set[str] = set()
    for name in ORDER:
        for tree in sqlglot.parse(sql_text(name), read="duckdb"):
            if tree is None:
                continue
            ctes = {cte.alias for cte in tree.find_all(exp.CTE)}
            for table in tree.find_all(exp.Table):
                if table.name not in made and table.name not in ctes:
                    reads.add(f"{table.db}.{table.name}" if table.db else table.name)
    return sorted(reads)


class TimingTables:
    """The timing SQL run on a private cursor; fetch its outputs as DataFrames.

    Parameters
    ----------
    con : duckdb.DuckDBPyConnection
        Workspace connection (panels, with the checked inputs attached as ``checked``).
    options : SpellOptions
    windows : DataFrame
        The anticipation windows before the expected starts, cut clear of other promotions
        (:func:`toolkit.timing.schedule.anticipation_windows`): ``window_no``, ``starts_on``,
        ``window_from_on``, ``window_to_on``; rows without a ``window_no`` are left out.
    exposure_periods : list of (date, date)
        Merged, non-overlapping periods (inclusive) in which a purchase rate would include a
        promotion's own purchases; purchase days in them take the rate measured before.
    """

    def __init__(self, con: duckdb.DuckDBPyConnection, options: SpellOptions, windows: pd.DataFrame,
                 exposure_periods=()) -> None:
        if options.dip_after not in DIP_AFTER:
            raise AnalysisError(f"dip_after must be one of {', '.join(DIP_AFTER)}, found {options.dip_after!r}")
        self.options = options
        self._con = con
        self.cursor = con.cursor()
        cur = self.cursor
        self._variables = (
            ("timing_n_blocks", int(options.n_blocks)),
            ("timing_seed", int(options.seed)),
            ("timing_dip_after", options.dip_after),
            ("timing_dip_days", int(options.dip_days)),
            ("timing_anticipation_days", int(options.anticipation_days)),
            ("timing_min_coupons", int(options.min_coupons)),
            ("timing_coupons_cap", int(options.coupons_cap)),
            ("timing_sample_customers", int(options.sample_customers)),
            ("timing_rate_classes", int(options.rate_classes)),
            ("timing_min_history_days", int(options.min_history_days)),
        )
        self._set_variables(cur)
        self._register("timing_expected_starts", window_frame(windows))
        periods_frame = pd.DataFrame({"from_day": [day_number(a) for a, _ in exposure_periods],
                                      "to_day": [day_number(b) for _, b in exposure_periods]}, dtype="int32")
        self._register("timing_exposure_periods", periods_frame)
        cur.execute(sql_text("timing_purchase_days"))
        n_days, max_gap = cur.execute(
            "SELECT count(*), coalesce(max(gap_days), 0) FROM timing_purchase_days").fetchall()[0]
        if not n_days:
            raise DataError("purchase_gaps: no purchases; build the panels from an export with orders (liftlag build)")
        periods = periods_table(options.horizon_days, int(max_gap))
        self.periods = periods
        days = np.arange(1, int(periods["period_to"].max()) + 1)
        period_of = np.searchsorted(periods["period_to"].to_numpy(), days, side="left")
        self._register("timing_periods", periods.astype("int32"))
        self._register("timing_period_days", pd.DataFrame({"days_since": days, "period": period_of}).astype("int32"))
        for name in ORDER[1:]:
            cur.execute(sql_text(name))

    def _set_variables(self, cursor) -> None:
        for name, value in self._variables:
            cursor.execute(f"SET VARIABLE {name} = ?", [value])

    def _register(self, name: str, frame: pd.DataFrame, cursor=None) -> None:
        cursor = cursor or self.cursor
        cursor.register(f"{name}_frame", frame)
        cursor.execute(f"CREATE OR REPLACE TEMP TABLE {name} AS SELECT * FROM {name}_frame")
        cursor.unregister(f"{name}_frame")

    # -- outputs ----------------------------------------------------------------------------------
    def cells(self) -> pd.DataFrame:
        return self.cursor.execute("SELECT * FROM timing_cells").df()

    def arm_cells(self) -> pd.DataFrame:
        return self.cursor.execute("SELECT * FROM timing_arm_cells ORDER BY promotion_id, is_treated, block").df()

    def window_exposure(self) -> pd.DataFrame:
        return self.cursor.execute("SELECT * FROM timing_window_exposure ORDER BY window_no").df()

    def gap_counts(self) -> pd.DataFrame:
        return self.cursor.execute("SELECT * FROM timing_gap_counts").df()

    def cox_spells(self) -> pd.DataFrame:
        """Spells of the sampled customers (customer ids stay inside the fit, never in outputs).

        The spells SQL is run again on a second private cursor whose inputs hold the sampled
        customers only, so the sample's spells cost what the sample costs, not the whole export.
        """
        sampled = {
            name: self.cursor.execute(
                f"SELECT t.* FROM {name} AS t SEMI JOIN timing_cox_sample AS c ON t.customer_id = c.customer_id"
            ).df()
            for name in ("timing_purchase_days", "timing_customer_changes")
        }
        sampled["timing_calendar"] = self.cursor.execute("SELECT * FROM timing_calendar").df()
        cursor = self._con.cursor()
        try:
            self._set_variables(cursor)
            for name, frame in sampled.items():
                self._register(name, frame, cursor)
            cursor.execute(sql_text("timing_spells"))
            return cursor.execute("SELECT * FROM timing_spells ORDER BY customer_id, purchase_day, start_days").df()
        finally:
            cursor.close()

    def customers_by_promotion(self) -> dict[str, int]:
        """Customers with a followed-up deal purchase day on each promotion."""
        rows = self.cursor.execute(
            "SELECT promotion_id, count(DISTINCT customer_id) FROM timing_purchase_days "
            "WHERE is_deal AND promotion_id IS NOT NULL AND gap_days > 0 GROUP BY promotion_id ORDER BY promotion_id"
        ).fetchall()
        return {str(pid): int(n) for pid, n in rows}

    def sample_size(self) -> tuple[int, int]:
        """(customers sampled for the Cox model, customers with a purchase)."""
        sampled, population = self.cursor.execute(
            "SELECT count(*), coalesce(max(population), 0) FROM timing_cox_sample").fetchall()[0]
        return int(sampled), int(population)

    def counts(self) -> dict[str, int]:
        """What went in: customers, purchase days, merged same-day orders, days without follow-up."""
        row = self.cursor.execute(
            """
            SELECT count(DISTINCT customer_id), count(*), sum(orders), sum(orders - 1),
                   count(*) FILTER (WHERE gap_days = 0), count(*) FILTER (WHERE is_event)
            FROM timing_purchase_days
            """
        ).fetchall()[0]
        return {
            "customers": int(row[0]),
            "purchase_days": int(row[1]),
            "orders": int(row[2]),
            "same_day_orders_merged": int(row[3]),
            "purchase_days_without_follow_up": int(row[4]),
            "next_purchases_observed": int(row[5]),
        }

    def close(self) -> None:
        self.cursor.close()
