"""``liftlag timing`` on a Spark-configured workspace runs the sql/timing aggregations on Spark and
writes the same tables as on DuckDB.

One DuckDB-built demo workspace is analysed twice: by the DuckDB path (``analyse_timing`` on the
workspace connection) and by the ``timing`` command with ``[engine] kind = "spark"`` (Spark reads
the published panels the timing SQL names, copied out as Parquet; the model fits run in Python on
what Spark returns). Every output table must agree, floats to 1e-9 (common practice, no source).
"""

from __future__ import annotations

import argparse
import dataclasses
import re
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest

from tests.conftest import DEMO_DATA
from toolkit import config, panels
from toolkit.config import WorkspaceSettings
from toolkit.errors import ConfigError

pytestmark = pytest.mark.spark


def _spark_config(workspace_dir: Path, folder: Path) -> Path:
    """The demo's liftlag.toml with absolute export paths, the built workspace and the Spark engine."""
    text = (DEMO_DATA / "liftlag.toml").read_text()
    text = re.sub(r'^path = "(?!\.liftlag)([^"]+)"', lambda m: f'path = "{(DEMO_DATA / m.group(1)).as_posix()}"',
                  text, flags=re.M)
    text = text.replace('path = ".liftlag"', f'path = "{workspace_dir.as_posix()}"')
    assert "[engine]" not in text
    text += '\n[engine]\nkind = "spark"\nmaster = "local[2]"\n'
    path = folder / "liftlag.toml"
    path.write_text(text)
    return path


@pytest.fixture(scope="module")
def both(spark_session, tmp_path_factory):
    from toolkit.timing.api import analyse_timing, open_sql, options_from, write_timing
    from toolkit.timing.command import register

    tmp = tmp_path_factory.mktemp("timing_on_spark")
    settings = config.load(DEMO_DATA / "liftlag.toml")
    settings = dataclasses.replace(settings, workspace=WorkspaceSettings(path=tmp / "ws"))
    panels.build(settings)

    duck_con = open_sql(settings)
    assert isinstance(duck_con, duckdb.DuckDBPyConnection)  # the default path is untouched
    try:
        readout = analyse_timing(duck_con, settings, **options_from(settings))
    finally:
        duck_con.close()
    write_timing(readout, tmp / "duckdb")

    parser = argparse.ArgumentParser(prog="liftlag")
    sub = parser.add_subparsers(dest="command")
    register(sub, lambda p: p.add_argument("-c", "--config", required=True))
    spark_config = _spark_config(settings.workspace_dir, tmp)
    args = parser.parse_args(["timing", "-c", str(spark_config), "--out", str(tmp / "spark")])
    from toolkit.timing import api

    engines = []

    def spy(con, *a, **k):  # which connection the command's analysis ran its SQL on
        engines.append(type(con).__name__)
        return analyse_timing(con, *a, **k)

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(api, "analyse_timing", spy)
        assert args.handler(args) == 0
    assert engines == ["SparkConnection"]
    return {"duckdb": tmp / "duckdb", "spark": tmp / "spark", "config": spark_config}


def _frames(folder: Path) -> dict[str, pd.DataFrame]:
    return {p.stem: pd.read_parquet(p) for p in sorted(folder.glob("*.parquet"))}


def test_timing_command_on_spark_writes_the_tables_of_the_duckdb_path(both):
    duck, spark = _frames(both["duckdb"]), _frames(both["spark"])
    assert sorted(duck) == sorted(spark)
    assert {"timing_effects", "km_curves", "hazard_cells", "hazard_ratios", "timing_inputs"} <= set(duck)
    effects = duck["timing_effects"]
    assert effects["estimate"].notna().sum() > 5  # the comparison is about real estimates
    assert set(effects["model"]) >= {"randomised_rate_ratio", "discrete_cloglog", "cox_time_varying"}
    for name in duck:
        left, right = duck[name], spark[name]
        assert list(left.columns) == list(right.columns), name
        assert len(left) == len(right), f"{name}: {len(left)} rows on DuckDB, {len(right)} on Spark"
        for c in left.columns:  # the same rows in the same order, value by value
            a, b = left[c], right[c]
            if pd.api.types.is_float_dtype(a) or pd.api.types.is_float_dtype(b):
                same = np.isclose(a.astype(float).to_numpy(), b.astype(float).to_numpy(), rtol=0, atol=1e-9,
                                  equal_nan=True)
                assert same.all(), f"{name}.{c}: {a[~same].head(3).tolist()} vs {b[~same].head(3).tolist()}"
            else:
                a_obj, b_obj = a.astype(object).where(a.notna(), None), b.astype(object).where(b.notna(), None)
                diff = [(x, y) for x, y in zip(a_obj, b_obj) if x != y]
                assert not diff, f"{name}.{c}: {diff[:3]}"


def test_spark_reads_only_the_tables_the_timing_sql_names(both):
    from toolkit.engine import open_workspace_sql
    from toolkit.timing.spells import workspace_tables

    assert workspace_tables() == ["campaign_windows", "checked.promotions", "purchase_gaps"]
    settings = config.load(both["config"])
    con = open_workspace_sql(settings, workspace_tables)
    try:
        views = {t.name for t in con.spark.catalog.listTables() if t.isTemporary}
        assert {"campaign_windows", "promotions", "purchase_gaps"} <= views
        assert "orders" not in views and "customer_days" not in views
        copied = sorted(p.name for p in con._read_copy.iterdir())
        assert copied == ["checked.promotions.parquet", "main.campaign_windows.parquet", "main.purchase_gaps.parquet"]
        folder = con._read_copy
    finally:
        con.close()
    assert not folder.exists()  # the Parquet copy goes with the connection


def test_cursors_of_a_workspace_connection_keep_their_temporary_tables_apart(both):
    """As DuckDB's cursors: a table one cursor makes is not seen or replaced by another's."""
    from toolkit.engine.spark import open_workspace

    settings = config.load(both["config"])
    con = open_workspace(settings, tables=["purchase_gaps"])
    try:
        first, second = con.cursor(), con.cursor()
        first.execute("CREATE OR REPLACE TEMP TABLE picked AS SELECT count(*) AS n FROM purchase_gaps")
        second.execute("CREATE OR REPLACE TEMP TABLE picked AS SELECT -1 AS n")
        n_all = first.execute("SELECT n FROM picked").fetchall()[0][0]
        assert n_all > 0
        assert second.execute("SELECT n FROM picked").fetchall() == [(-1,)]
        second.close()
        assert first.execute("SELECT n FROM picked").fetchall() == [(n_all,)]
        with pytest.raises(Exception, match="picked"):
            con.execute("SELECT n FROM picked").fetchall()  # not the connection's own
        first.close()
    finally:
        con.close()


def test_spark_without_java_is_a_clear_error(spark_session, monkeypatch):
    from toolkit.engine import spark

    monkeypatch.setattr(spark, "_SESSION", None)  # as in a fresh process
    monkeypatch.delenv("JAVA_HOME", raising=False)
    monkeypatch.setattr(spark.shutil, "which", lambda name: None)
    with pytest.raises(ConfigError, match="Java runtime"):
        spark.session("local[1]")
