"""Every SQL file (check rules, panels, sql/timing) is accepted and resolved by Spark's analyser.

Fast: the inputs are empty views of the contract's columns and types (Spark analyses a query
when it is defined; a temporary table is then computed, on no rows). The parity tests (test_parity.py) then run the
files on data.
"""

from __future__ import annotations

import pandas as pd
import pytest

from toolkit import checks, contract, panels, sources
from toolkit.timing import spells

pytestmark = pytest.mark.spark


@pytest.fixture(scope="module")
def con(spark_session):
    from toolkit.engine.spark import SparkConnection

    con = SparkConnection(spark=spark_session)
    for table in contract.INPUT_TABLES.values():
        sources._empty_staged(con, table)
    for statement in sources.staged_union_sql():
        con.execute(statement)
    from toolkit.config import TableSettings

    sources._register_partition_bounds(con, TableSettings("transactions", "x", "parquet"), [])  # no dated folders
    for column, allowed in (("arm", contract.ARMS), ("mechanic", contract.MECHANICS), ("audience", contract.AUDIENCES)):
        con.execute(f"SET VARIABLE allowed_{column} = ?", [list(allowed)])
        con.execute(f"SET VARIABLE allowed_{column}_text = ?", [", ".join(allowed)])
    now = pd.Timestamp("2026-12-01").to_pydatetime()
    for name in ("checked_at", "horizon_earliest", "horizon_latest", "horizon_promotion_latest"):
        con.execute(f"SET VARIABLE {name} = ?", [now])
    con.execute("CREATE OR REPLACE TEMP VIEW accepted_promotions AS SELECT * FROM staged_promotions")
    # What the rules after the promotions' read (as checks.validate defines them, empty here).
    con.execute("CREATE OR REPLACE TEMP VIEW rejected_promotions AS SELECT promotion_id, 'rule' AS rule, "
                "0 AS rule_order, 'detail' AS detail FROM staged_promotions")
    yield con
    con.close()


def _empty(con, name, columns) -> None:
    cols = ", ".join(f'CAST(NULL AS {c.type}) AS "{c.name}"' for c in columns)
    con.execute(f'CREATE OR REPLACE TEMP VIEW "{name}" AS SELECT {cols} WHERE false')


@pytest.mark.parametrize("rule", [r.name for r in checks.RULES])
def test_check_rule_resolves_on_spark(con, rule):
    frame = con.sql(checks.Rule(rule, "reject").sql())
    assert frame.columns == ["table_name", "_row_id", "detail"]


def test_panels_and_timing_sql_resolve_on_spark(con):
    for table in contract.INPUT_TABLES.values():
        _empty(con, table.name, table.columns)
    for key, value in {"margin_rate": 0.4, "pre_period_days": 60, "after_days": 14}.items():
        con.execute(f"SET VARIABLE {key} = ?", [value])
    for name in panels.PANEL_ORDER:
        con.execute(f'CREATE OR REPLACE TEMP VIEW "{name}" AS {panels.panel_sql(name)}')
        got = con.spark.table(name).columns
        assert got == [c.name for c in contract.PANELS[name]], name
    options = spells.SpellOptions()
    for name, value in (("timing_n_blocks", 4), ("timing_seed", 1), ("timing_dip_after", "targeted"),
                        ("timing_dip_days", 21), ("timing_anticipation_days", 7), ("timing_min_coupons", 2),
                        ("timing_coupons_cap", 10), ("timing_sample_customers", 100),
                        ("timing_rate_classes", options.rate_classes), ("timing_min_history_days", 28)):
        con.execute(f"SET VARIABLE {name} = ?", [value])
    con.register("timing_expected_starts", pd.DataFrame(
        {"window_no": [1], "start_day": [20000], "window_from_day": [19990], "window_to_day": [19999]}).astype("int32"))
    con.register("timing_exposure_periods", pd.DataFrame({"from_day": [19000], "to_day": [19010]}).astype("int32"))
    con.register("timing_periods", pd.DataFrame({"period": [0], "period_from": [1], "period_to": [7]}).astype("int32"))
    con.register("timing_period_days", pd.DataFrame({"days_since": [1], "period": [0]}).astype("int32"))
    for name in spells.ORDER:
        con.execute(spells.sql_text(name))  # CREATE TEMP TABLE / VIEW (run on the empty inputs)
        assert con.spark.table(name).columns, name
