"""The source layer reads every supported form of an export the same way (common practice, no source)."""

from __future__ import annotations

import gzip
import shutil

import duckdb
import pandas as pd
import pytest

from toolkit import config, panels, workspace
from toolkit.errors import DataError
from tests.conftest import write_export


def orders_of(cfg):
    settings = config.load(cfg)
    result = panels.build(settings)
    con = duckdb.connect(str(workspace.path(settings, workspace.PANELS)), read_only=True)
    frame = con.execute("SELECT * FROM orders ORDER BY order_id").df()
    con.close()
    return result, frame


@pytest.fixture
def reference(tmp_path):
    return orders_of(write_export(tmp_path / "plain"))[1]


def test_gzipped_csv(tmp_path, reference):
    cfg = write_export(tmp_path / "gz")
    src = cfg.parent / "transactions.csv"
    with src.open("rb") as fh, gzip.open(cfg.parent / "transactions.csv.gz", "wb") as out:
        shutil.copyfileobj(fh, out)
    src.unlink()
    cfg.write_text(cfg.read_text().replace('"transactions.csv"', '"transactions.csv.gz"'))
    pd.testing.assert_frame_equal(orders_of(cfg)[1], reference)


def test_hive_partitioned_parquet_glob(tmp_path, reference):
    cfg = write_export(tmp_path / "hive")
    con = duckdb.connect()
    con.execute(
        "COPY (SELECT *, strftime(CAST(ordered_at AS TIMESTAMP), '%Y-%m') AS month FROM read_csv(?)) "
        "TO ? (FORMAT parquet, PARTITION_BY (month))",
        [str(cfg.parent / "transactions.csv"), str(cfg.parent / "lines")],
    )
    con.close()
    (cfg.parent / "transactions.csv").unlink()
    cfg.write_text(cfg.read_text().replace('"transactions.csv"', '"lines/**/*.parquet"'))
    pd.testing.assert_frame_equal(orders_of(cfg)[1], reference)


def test_table_in_a_duckdb_file(tmp_path, reference):
    cfg = write_export(tmp_path / "db")
    con = duckdb.connect(str(cfg.parent / "warehouse.duckdb"))
    con.execute("CREATE TABLE order_lines AS SELECT * FROM read_csv(?)", [str(cfg.parent / "transactions.csv")])
    con.close()
    (cfg.parent / "transactions.csv").unlink()
    cfg.write_text(cfg.read_text().replace('path = "transactions.csv"', 'path = "warehouse.duckdb"\ntable = "order_lines"'))
    pd.testing.assert_frame_equal(orders_of(cfg)[1], reference)


def test_semicolon_csv_with_delimiter_setting(tmp_path, reference):
    cfg = write_export(tmp_path / "semi")
    path = cfg.parent / "transactions.csv"
    path.write_text(path.read_text().replace(",", ";"))
    cfg.write_text(cfg.read_text().replace('path = "transactions.csv"', 'path = "transactions.csv"\ndelimiter = ";"'))
    pd.testing.assert_frame_equal(orders_of(cfg)[1], reference)


def test_build_skips_when_nothing_changed_and_rebuilds_when_a_file_does(tmp_path):
    cfg = write_export(tmp_path / "skip")
    first, _ = orders_of(cfg)
    again, _ = orders_of(cfg)
    assert not first.skipped and again.skipped
    with (cfg.parent / "transactions.csv").open("a") as fh:
        fh.write("o10,c2,2026-03-06 10:00:00,p1,1,10,10,0,\n")
    changed, frame = orders_of(cfg)
    assert not changed.skipped and "o10" in set(frame["order_id"])


def test_unreadable_parquet_is_a_data_error(tmp_path):
    cfg = write_export(tmp_path / "broken")
    (cfg.parent / "transactions.parquet").write_bytes(b"not a parquet file at all")
    cfg.write_text(cfg.read_text().replace('"transactions.csv"', '"transactions.parquet"'))
    with pytest.raises(DataError, match=r"table transactions: cannot read .*transactions.parquet"):
        orders_of(cfg)
