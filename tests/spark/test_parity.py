"""DuckDB and Spark give the same checked tables, panels and timing aggregations from one SQL text.

Each export is checked (and built) once per engine; every table of the two workspaces is then
compared column by column after sorting, floats to 1e-9 (common practice, no source). The Spark
engine runs in local mode on the test session's shared SparkSession.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import gzip
import shutil
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest

from tests.conftest import (
    ASSIGNMENT_COLUMNS,
    DEMO_DATA,
    TINY_ASSIGNMENTS,
    TINY_CUSTOMERS,
    TINY_PRODUCTS,
    TINY_PROMOTIONS,
    TINY_TRANSACTIONS,
    write_csv,
    write_export,
)
from toolkit import checks, config, panels, workspace
from toolkit.config import WorkspaceSettings

pytestmark = pytest.mark.spark

# The original text of a row is rendered by each engine's own struct-to-text cast (DuckDB
# {'a': 1}, Spark {1}); everything else must agree.
ENGINE_TEXT = {"rejected_rows": ["raw_values"], "checked.rejected_rows": ["raw_values"]}


def _settings(config_path: Path, kind: str, workspace_dir: Path):
    s = config.load(config_path)
    engine = dataclasses.replace(s.engine, kind=kind, master="local[2]")
    return dataclasses.replace(s, engine=engine, workspace=WorkspaceSettings(path=workspace_dir))


def _tables(database: Path) -> dict[str, pd.DataFrame]:
    """Every table of a workspace file: the panels (or checked tables) and, in panels.duckdb, the
    checked inputs that travel with them (schema ``checked``, named ``checked.<table>``)."""
    con = duckdb.connect(str(database), read_only=True)
    try:
        names = con.execute(
            "SELECT table_schema, table_name FROM information_schema.tables "
            "WHERE table_schema IN ('main', 'checked') ORDER BY 1, 2").fetchall()
        return {(n if schema == "main" else f"{schema}.{n}"): con.execute(f'SELECT * FROM "{schema}"."{n}"').df()
                for schema, n in names}
    finally:
        con.close()


def _canonical(frame: pd.DataFrame) -> pd.DataFrame:
    out = frame.copy()
    for c in out.columns:
        col = out[c]
        if pd.api.types.is_datetime64_any_dtype(col):
            out[c] = col.astype("datetime64[us]")
        elif pd.api.types.is_bool_dtype(col) or str(col.dtype) == "boolean":
            out[c] = col.astype("object")
        elif pd.api.types.is_numeric_dtype(col):
            out[c] = col.astype("float64")
        elif col.dtype == object and col.map(lambda v: hasattr(v, "isoformat")).any():
            out[c] = pd.to_datetime(col).astype("datetime64[us]")
    if "source_file" in out.columns:
        out["source_file"] = out["source_file"].map(lambda p: Path(p).name if isinstance(p, str) else p)
    keys = sorted(out.columns)
    out = out[keys]
    # Sort on floats rounded (the engines sum in different orders: the last bits differ, and two
    # rows equal on DuckDB must not swap places on Spark); compare the values themselves.
    sort_frame = out.copy()
    for c in keys:
        if sort_frame[c].dtype == "float64":
            sort_frame[c] = sort_frame[c].round(6)
    order = sort_frame.sort_values(keys, na_position="first", kind="mergesort").index
    return out.loc[order].reset_index(drop=True)


def assert_same_tables(duck: dict[str, pd.DataFrame], spark: dict[str, pd.DataFrame]) -> None:
    assert sorted(duck) == sorted(spark)
    for name in duck:
        left, right = duck[name], spark[name]
        drop = ENGINE_TEXT.get(name, [])
        left, right = left.drop(columns=drop), right.drop(columns=drop)
        assert sorted(left.columns) == sorted(right.columns), name
        assert len(left) == len(right), f"{name}: {len(left)} rows on DuckDB, {len(right)} on Spark"
        left, right = _canonical(left), _canonical(right)
        for c in left.columns:
            a, b = left[c], right[c]
            if a.dtype == "float64" and b.dtype == "float64":
                same = np.isclose(a.to_numpy(), b.to_numpy(), rtol=0, atol=1e-9, equal_nan=True)
                assert same.all(), f"{name}.{c}: {a[~same].head(3).tolist()} vs {b[~same].head(3).tolist()}"
            else:
                a_obj, b_obj = a.astype(object).where(a.notna(), None), b.astype(object).where(b.notna(), None)
                diff = [(x, y) for x, y in zip(a_obj, b_obj) if x != y]
                assert not diff, f"{name}.{c}: {diff[:3]}"


def _build_both(config_path: Path, tmp: Path, build: bool = True) -> dict[str, dict]:
    out = {}
    for kind in ("duckdb", "spark"):
        settings = _settings(config_path, kind, tmp / f"ws_{kind}")
        if build:
            panels.build(settings, force=True)
        else:
            checks.run(settings)
        out[kind] = {"settings": settings, "checked": _tables(workspace.path(settings, workspace.CHECKED))}
        if build:
            out[kind]["panels"] = _tables(workspace.path(settings, workspace.PANELS))
    return out


@pytest.fixture(scope="module")
def demo_both(spark_session, tmp_path_factory):
    tmp = tmp_path_factory.mktemp("parity_demo")
    shutil.copytree(DEMO_DATA, tmp / "export")
    return _build_both(tmp / "export" / "liftlag.toml", tmp)


def test_demo_checked_tables_are_the_same_on_duckdb_and_spark(demo_both):
    assert_same_tables(demo_both["duckdb"]["checked"], demo_both["spark"]["checked"])


def test_demo_panels_are_the_same_on_duckdb_and_spark(demo_both):
    duck, spark = demo_both["duckdb"]["panels"], demo_both["spark"]["panels"]
    assert {n for n in duck if not n.startswith("checked.")} == set(panels.PANEL_ORDER)
    assert "checked.promotions" in duck and "checked.rejected_rows" in duck
    assert all(len(duck[name]) > 0 for name in panels.PANEL_ORDER)
    assert_same_tables(duck, spark)


def test_a_spark_built_workspace_opens_as_a_duckdb_built_one(demo_both):
    """The analyses' way in: the published panels with their build record, current for the
    config (the engine is not part of what a build is made from), the checked inputs beside them."""
    settings = demo_both["spark"]["settings"]
    build = workspace.published_build(settings)
    assert build is not None and build["rows"]["orders"] > 0
    assert workspace.staleness(settings, build) == []
    duck_settings = dataclasses.replace(settings, engine=demo_both["duckdb"]["settings"].engine)
    assert workspace.staleness(duck_settings, build) == []  # switching the engine rebuilds nothing
    con = workspace.connect(settings)
    try:
        assert con.execute("SELECT count(*) FROM checked.promotions").fetchall()[0][0] > 0
        assert con.execute("SELECT count(*) FROM orders").fetchall()[0][0] == build["rows"]["orders"]
    finally:
        con.close()
    leftovers = settings.workspace_dir / "spark"
    assert not leftovers.exists() or not any(leftovers.iterdir())  # the staging Parquet is gone


# Later than the check's time, within the horizon ([checks] future_days = 1): a future_timestamp.
SOON = (dt.datetime.now(dt.timezone.utc) + dt.timedelta(hours=6)).strftime("%Y-%m-%d %H:%M:%S")

# One row per rule (the cases of tests/foundation/test_checks.py), all in one export.
MESSY_TRANSACTIONS = TINY_TRANSACTIONS + [
    ["o10", "  ", "2026-03-06 10:00:00", "p1", "1", "10", "10", "0", ""],          # missing_required
    ["o11", "c2", "06/03/2026 nope", "p1", "1", "10", "10", "0", ""],              # unparseable_value
    ["o12", "c2", "2026-03-06 10:00:00", "p1", "1", "ten", "10", "0", ""],         # unparseable_value
    TINY_TRANSACTIONS[0],                                                          # duplicate_row
    ["o13", "c2", "2026-03-06 10:00:00", "p1", "1", "8", "10", "2", "PZ"],         # unknown_promotion
    ["o14", "", "bad date", "p1", "x", "10", "10", "0", "PZ"],                     # several at once
    ["o15", "c1", "2026-03-04 10:00:00", "p1", "1", "5", "10", "5", "PA"],         # discount_deeper_than_depth
    ["o16", "c1", "2026-03-12 10:00:00", "p1", "1", "8", "10", "2", "PA"],         # order_outside_promotion_dates
    ["o17", "c1", SOON, "p1", "1", "10", "10", "0", ""],                           # future_timestamp
    ["o20", "c1", "2999-01-01 10:00:00", "p1", "1", "10", "10", "0", ""],          # timestamp_beyond_horizon
    ["o21", "c2", "2026-03-06 10:00:00", "p1", "-1", "5", "10", "0", ""],          # return_sign_mismatch
    ["o18", "c1", "2026-03-06 10:00:00", "p1", "1", "12", "10", "0", ""],          # net_above_list
    ["o19", "c3", "2026-03-07 10:00:00", "p2", "1", "nan", "10", "0", ""],         # NaN is no amount
    ["o22", "c2", "2025-12-30 10:00:00", "p1", "1", "10", "10", "0", ""],          # date_outside_partition (_messy)
]
MESSY_PROMOTIONS = TINY_PROMOTIONS + [
    ["PA", "2026-04-01", "2026-04-08", "percent_off", "0.3", "targeted", "again"],  # duplicate_key
    ["PE", "2026-04-01", "2026-04-08", "bogo", "0.3", "targeted", "odd"],           # value_not_allowed
]
INVERTED = ["PC", "2026-05-10", "2026-05-01", "percent_off", "0.1", "targeted", "late"]  # ends_before_starts
MESSY_ASSIGNMENTS = TINY_ASSIGNMENTS + [
    ["PA", "c4", "X", "2026-03-01 10:00:00"],                                      # value_not_allowed
    ["PA", "c1", "H", "2026-03-01 11:00:00"],                                      # customer_in_both_arms
    ["PA", "c5", "T", "2026-03-01T12:00:00+02:00"],                                # offset: UTC 10:00
]
MESSY_CUSTOMERS = TINY_CUSTOMERS + [["c3", "2025-11-01", "south"], ["c1", "2025-10-01", "west"]]  # duplicate_key
MESSY_PRODUCTS = TINY_PRODUCTS + [["p1", "tools", "5"], ["p3", "tools", "abc"]]  # duplicate_key, unparseable_optional


def _messy(folder: Path, promotions) -> Path:
    """The messy export, its order lines filed under year=2026/ (tables.transactions.date_partition)."""
    config = write_export(folder, transactions=MESSY_TRANSACTIONS, promotions=promotions,
                          assignments=MESSY_ASSIGNMENTS, customers=MESSY_CUSTOMERS, products=MESSY_PRODUCTS)
    year = folder / "transactions" / "year=2026"
    year.mkdir(parents=True)
    (folder / "transactions.csv").rename(year / "transactions.csv")
    config.write_text(config.read_text().replace(
        'path = "transactions.csv"', 'path = "transactions/**/*.csv"\ndate_partition = "year"'))
    return config


def test_messy_export_every_rule_fires_and_both_engines_agree(spark_session, tmp_path):
    both = _build_both(_messy(tmp_path / "export", MESSY_PROMOTIONS + [INVERTED]), tmp_path, build=False)
    duck, spark = both["duckdb"]["checked"], both["spark"]["checked"]
    fired = set(duck["rejects_summary"]["reason"]) | set(duck["warnings_summary"]["rule"])
    assert fired == {r.name for r in checks.RULES}
    assert_same_tables(duck, spark)


def test_messy_export_in_parquet_and_gzipped_csv_parts_builds_the_same_panels(spark_session, tmp_path):
    """The messy export without the inverted promotion (so it builds), read from several files:
    the order lines as two Parquet parts (text columns where a value does not parse), the
    assignments as two gzipped CSV parts (rows numbered over the files in file order)."""
    import duckdb

    config_path = write_export(tmp_path / "export", transactions=MESSY_TRANSACTIONS, promotions=MESSY_PROMOTIONS,
                               assignments=MESSY_ASSIGNMENTS, customers=MESSY_CUSTOMERS, products=MESSY_PRODUCTS,
                               parquet=True)
    folder = config_path.parent
    (folder / "lines").mkdir()
    con = duckdb.connect()
    half = len(MESSY_TRANSACTIONS) // 2
    for i, (skip, take) in enumerate(((0, half), (half, len(MESSY_TRANSACTIONS) - half))):
        con.execute(f"COPY (SELECT * FROM read_parquet(?) LIMIT {take} OFFSET {skip}) TO ? (FORMAT parquet)",
                    [str(folder / "transactions.parquet"), str(folder / "lines" / f"part{i}.parquet")])
    con.close()
    (folder / "transactions.parquet").unlink()
    (folder / "assignments.csv").unlink()
    (folder / "assign").mkdir()
    half = len(MESSY_ASSIGNMENTS) // 2
    for i, rows in enumerate((MESSY_ASSIGNMENTS[:half], MESSY_ASSIGNMENTS[half:])):
        plain = write_csv(folder / "assign" / f"part{i}.csv", ASSIGNMENT_COLUMNS, rows)
        with plain.open("rb") as src, gzip.open(str(plain) + ".gz", "wb") as dst:
            dst.write(src.read())
        plain.unlink()
    text = config_path.read_text()
    text = text.replace('path = "transactions.parquet"', 'path = "lines/*.parquet"')
    text = text.replace('path = "assignments.csv"', 'path = "assign/*.csv.gz"')
    # A handful of lines with a bad row each: too few kept for the gates of a real export.
    config_path.write_text(text + "[gates]\nmin_lines_accepted_share = 0.5\n")
    both = _build_both(config_path, tmp_path)
    duck = both["duckdb"]["checked"]
    assert {"duplicate_row", "unparseable_value", "value_not_allowed"} <= set(duck["rejects_summary"]["reason"])
    assert "customer_in_both_arms" in set(duck["warnings_summary"]["rule"])
    assert_same_tables(duck, both["spark"]["checked"])
    assert_same_tables(both["duckdb"]["panels"], both["spark"]["panels"])


def _timing_inputs(con, settings):
    """The expected-start windows and exposure periods, as ``timing.api.analyse_timing`` makes them."""
    from toolkit.timing.schedule import CampaignCadence
    from toolkit.timing.spells import merge_periods

    promotions = con.execute(
        "SELECT promotion_id, CAST(starts_at AS DATE) AS starts_on, CAST(ends_at AS DATE) AS ends_on, audience "
        "FROM checked.promotions ORDER BY starts_on, promotion_id").df()
    export_end = con.execute("SELECT max(ordered_on + days_to_next_order) FROM purchase_gaps").fetchall()[0][0]
    targeted = promotions[promotions["audience"] == "targeted"]
    cadence = CampaignCadence().fit(targeted["starts_on"], until=export_end)
    after = int(settings.windows.after_days)
    blocked = [(r.starts_on, r.ends_on + pd.Timedelta(days=after), r.promotion_id) for r in promotions.itertuples()]
    windows = cadence.expected_windows(settings.timing.anticipation_days, blocked)
    exposure = merge_periods((r.starts_on, r.ends_on + pd.Timedelta(days=max(after, int(settings.timing.dip_days))))
                             for r in promotions.itertuples())
    return windows, exposure


def test_demo_timing_aggregations_are_the_same_on_duckdb_and_spark(demo_both):
    """Every file of sql/timing on the demo's panels: purchase days (with the customer blocks of
    the project's hash), calendar, coupon changes, spells, hazard cells, gap counts, the Cox
    sample, the anticipation windows' exposure and the randomised arms' cells. DuckDB reads the
    workspace the DuckDB build published, Spark the one the Spark build published."""
    from toolkit.engine.spark import open_workspace
    from toolkit.timing.spells import ORDER, SpellOptions, TimingTables

    duck_settings, spark_settings = demo_both["duckdb"]["settings"], demo_both["spark"]["settings"]
    options = SpellOptions(sample_customers=300, n_blocks=16)
    fetched = {}
    for name, con in (("duckdb", workspace.connect(duck_settings)), ("spark", open_workspace(spark_settings))):
        try:
            windows, exposure = _timing_inputs(con, duck_settings)
            tables = TimingTables(con, options, windows, exposure)
            fetched[name] = {t: tables.cursor.execute(f"SELECT * FROM {t}").df() for t in ORDER}
            fetched[name]["cox_spells"] = tables.cox_spells()
        finally:
            con.close()
    duck = fetched["duckdb"]
    assert len(duck["timing_cells"]) > 0 and len(duck["timing_arm_cells"]) > 0
    assert len(duck["timing_window_exposure"]) > 0 and len(duck["cox_spells"]) > 0
    assert duck["timing_purchase_days"]["block"].nunique() == 16
    assert_same_tables(duck, fetched["spark"])
