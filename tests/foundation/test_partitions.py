"""A ``[period]`` reads only the order lines dated in it, and with ``date_partition`` it skips the
files whose folders lie wholly outside it (partition pruning) without opening them.

The expected counts are computed here with plain DuckDB on the raw export, not with liftlag.
"""

from __future__ import annotations

import dataclasses
import re
import datetime as dt
import shutil
from pathlib import Path

import duckdb
import pytest

from toolkit import checks, config, panels, partitions, sources, workspace
from toolkit.config import WorkspaceSettings
from toolkit.errors import ConfigError
from tests.conftest import DEMO_DATA


@pytest.mark.parametrize("path, keys, first, last", [
    ("x/order_date=2026-01-31/p.parquet", ("order_date",), "2026-01-31", "2026-01-31"),
    ("x/d=20260131/p.parquet", ("d",), "2026-01-31", "2026-01-31"),
    ("x/month=2024-02/p.parquet", ("month",), "2024-02-01", "2024-02-29"),   # a leap year
    ("x/y=2025/p.parquet", ("y",), "2025-01-01", "2025-12-31"),
    ("x/year=2025/month=11/p.parquet", ("year", "month"), "2025-11-01", "2025-11-30"),
    ("x/year=2025/month=2/day=7/p.csv", ("year", "month", "day"), "2025-02-07", "2025-02-07"),
])
def test_a_files_days_are_read_off_its_folder_names(path, keys, first, last):
    days = partitions.file_days(path, keys)
    assert (days.first, days.last) == (dt.date.fromisoformat(first), dt.date.fromisoformat(last))


@pytest.mark.parametrize("path, keys", [
    ("x/month=2025-13/p.parquet", ("month",)),          # no such month
    ("x/region=north/p.parquet", ("month",)),           # the key is absent
    ("x/month=latest/p.parquet", ("month",)),           # not a date
    ("x/year=2025/month=02/day=30/p.parquet", ("year", "month", "day")),
])
def test_folders_that_give_no_days_give_none(path, keys):
    assert partitions.file_days(path, keys) is None


def _export(tmp_path: Path, period: str, date_partition: bool = True) -> Path:
    export = tmp_path / "export"
    if not export.exists():
        shutil.copytree(DEMO_DATA, export, ignore=shutil.ignore_patterns("*.json", "truth_uplift.parquet", "README.md"))
    text = (DEMO_DATA / "liftlag.toml").read_text()
    assert 'date_partition = "month"' in text  # the demo's config says how its files are laid out
    if not date_partition:
        text = re.sub(r"^date_partition = .*$", "", text, flags=re.M)
    (export / "liftlag.toml").write_text(text + "\n" + period)
    return export / "liftlag.toml"


def _raw_count(first: str, last: str) -> int:
    con = duckdb.connect()
    n = con.execute(f"SELECT count(*) FROM read_parquet('{DEMO_DATA}/transactions/**/*.parquet') "
                    f"WHERE created_at >= DATE '{first}' AND created_at < DATE '{last}' + INTERVAL 1 DAY").fetchone()[0]
    con.close()
    return n


@pytest.mark.parametrize("date_partition", [True, False])
def test_a_period_reads_only_its_lines_and_skips_files_outside_it(tmp_path, date_partition):
    path = _export(tmp_path, '[period]\nfirst_day = 2026-01-01\nlast_day = "2026-03-15"\n', date_partition)
    settings = config.load(path)
    files = sources.resolve_files(settings, settings.tables["transactions"])
    months = sorted({Path(f).parent.name for f in files})
    if date_partition:  # pruned: January to March only
        assert months == ["month=2026-01", "month=2026-02", "month=2026-03"]
    else:  # every file is read, and filtered
        assert len(months) == 21
    result = checks.run(settings)
    row = result.summary.set_index("table").loc["transactions"]
    assert row.rows_read == _raw_count("2026-01-01", "2026-03-15") > 0
    assert ("18 of 21 files skipped by their month folders" if date_partition else "all 21 files read") in result.notes[0]
    assert row.accepted + row.rejected == row.rows_read
    panels.build(settings)
    con = workspace.connect(settings)
    first, last = con.execute("SELECT min(ordered_at), max(ordered_at) FROM orders").fetchone()
    con.close()
    assert dt.datetime(2026, 1, 1) <= first and last < dt.datetime(2026, 3, 16)


def test_a_new_month_outside_the_period_does_not_make_the_panels_stale(tmp_path):
    path = _export(tmp_path, '[period]\nlast_day = 2025-12-31\n')
    settings = config.load(path)
    assert not panels.build(settings).skipped
    held = path.parent / "transactions" / "month=2026-09"
    shutil.copytree(held, path.parent / "transactions" / "month=2026-10")  # a later month arrives
    assert panels.build(config.load(path)).skipped


def test_a_period_that_leaves_no_file_says_so(tmp_path):
    path = _export(tmp_path, '[period]\nfirst_day = 2030-01-01\n')
    with pytest.raises(ConfigError, match="no file of tables.transactions.path lies in the period"):
        checks.run(config.load(path))


@pytest.mark.parametrize("text, message", [
    ('[period]\nfirst_day = "2026-02-30"\n', "must be a day such as"),
    ('[period]\nfirst_day = 2026-03-01\nlast_day = 2026-02-01\n', "is after period.last_day"),
    ('[period]\nfirst_day = 2026-03-01T10:00:00\n', "found a time"),
])
def test_period_mistakes_are_config_errors(tmp_path, text, message):
    with pytest.raises(ConfigError, match=message):
        config.load(_export(tmp_path, text))


def test_date_partition_is_only_for_order_lines(tmp_path):
    path = _export(tmp_path, "")
    path.write_text(path.read_text().replace('path = "promotions.csv"', 'path = "promotions.csv"\ndate_partition = "m"'))
    with pytest.raises(ConfigError, match="only for tables.transactions"):
        config.load(path)


def test_a_misfiled_line_is_rejected(tmp_path):
    path = _export(tmp_path, "")
    month = path.parent / "transactions" / "month=2026-02"
    con = duckdb.connect()
    con.execute(f"COPY (SELECT * REPLACE (TIMESTAMP '2026-03-01 09:00:00' AS created_at) "
                f"FROM read_parquet('{month}/part-0.parquet') LIMIT 1) TO '{month}/late.parquet' (FORMAT parquet)")
    con.close()
    settings = dataclasses.replace(config.load(path), workspace=WorkspaceSettings(path=tmp_path / "ws"))
    result = checks.run(settings)
    assert result.rejects.values.tolist() == [["transactions", "date_outside_partition", 1]]
