"""`liftlag sql --dialect X` transpiles every panel file for each listed dialect (sqlglot)."""

from __future__ import annotations

import pytest
import sqlglot

from toolkit import cli, panels
from toolkit.engine.transpile import DIALECTS, transpile


@pytest.mark.parametrize("dialect", DIALECTS)
@pytest.mark.parametrize("panel", panels.PANEL_ORDER)
def test_panel_transpiles_without_error_and_parses_back(panel, dialect):
    text = transpile(panels.panel_sql(panel), dialect)
    # The output is valid SQL of that dialect: sqlglot reads it back as one SELECT.
    parsed = sqlglot.parse(text, read=dialect)
    assert len(parsed) == 1 and parsed[0].find(sqlglot.exp.Select) is not None


@pytest.mark.parametrize("dialect", DIALECTS)
def test_sql_command_prints_every_panel(dialect, capsys):
    assert cli.main(["sql", "--dialect", dialect]) == 0
    out = capsys.readouterr().out
    for panel in panels.PANEL_ORDER:
        assert f"-- panel: {panel} ({dialect}; parameters bound:" in out
    body = "\n".join(line for line in out.splitlines() if not line.lstrip().startswith(("--", "/*")))
    assert "GETVARIABLE" not in body.upper()  # values are bound, so the SQL runs as printed


def test_sql_command_binds_the_configs_parameters(tmp_path, capsys):
    from tests.conftest import write_export

    cfg = write_export(tmp_path / "e")  # after_days = 14, pre_period_days = 60, margin_rate = 0.4
    assert cli.main(["sql", "--dialect", "spark", "--panel", "campaign_windows", "-c", str(cfg)]) == 0
    out = capsys.readouterr().out
    assert "pre_period_days = 60, after_days = 14" in out
    assert "ends_on + CAST(14 AS INT)" in out


def test_sql_command_rejects_an_unknown_dialect(capsys):
    assert cli.main(["sql", "--dialect", "cobol"]) == 2
    assert "is not one of" in capsys.readouterr().err


# -- the rewrites that keep one SQL text valid on DuckDB and Spark (toolkit.engine.transpile) ------
def test_spark_rewrites_carry_over_what_sqlglot_does_not():
    import datetime as dt

    from toolkit.engine.transpile import to_spark

    params = {"fmt": "%d/%m/%Y %H:%M", "arms": ["treatment", "holdout"], "codes": {"T": "treatment"},
              "at": dt.datetime(2026, 1, 2, 3, 4, 5), "seed": 7}
    out = to_spark(
        "SELECT TRY_STRPTIME(a, getvariable('fmt')) AS t, list_contains(getvariable('arms'), b) AS ok, "
        "getvariable('codes')[b] AS code, c > getvariable('at') AS later, quantile_cont(x, [0.25, 0.5]) AS q, "
        "CAST('0x' || substr(md5(b || ':' || CAST(getvariable('seed') AS VARCHAR)), 1, 15) AS BIGINT) AS h, "
        "regexp_full_match(b, '[0-9]+') AS digits, CAST(NULL AS UBIGINT) AS u FROM t", params)
    assert "TRY_TO_TIMESTAMP(a, 'dd/MM/yyyy HH:mm')" in out
    assert "ARRAY_CONTAINS(ARRAY('treatment', 'holdout'), b)" in out  # a list is bound as an array
    assert "MAP_FROM_ARRAYS(ARRAY('T'), ARRAY('treatment'))[b]" in out
    assert "CAST('2026-01-02 03:04:05' AS TIMESTAMP_NTZ)" in out
    assert "PERCENTILE(x, ARRAY(0.25, 0.5))" in out
    assert "CAST(CONV(SUBSTRING(MD5(" in out and ", 16, 10) AS BIGINT)" in out
    assert "b RLIKE '^(?:[0-9]+)$'" in out
    assert "CAST(NULL AS BIGINT)" in out and "GETVARIABLE" not in out.upper()
    more = to_spark("SELECT approx_quantile(ordered_at, 0.01) AS low, lower(nfc_normalize(c)) AS k, "
                    "CAST(TRY_CAST(a AS TIMESTAMPTZ) AS TIMESTAMP) AS at FROM t")
    assert "PERCENTILE_APPROX(ordered_at, 0.01)" in more  # takes timestamps, as DuckDB's approx_quantile
    assert "LIFTLAG_NFC(c)" in more  # the Spark engine's UDF
    assert "CAST(TRY_CAST(a AS TIMESTAMP_LTZ) AS TIMESTAMP_NTZ)" in more  # an offset is honoured


def test_the_projects_hash_is_the_first_60_bits_of_md5_in_duckdb():
    """The customer-block hash of sql/timing, checked against Python's hashlib (a reference library)."""
    import hashlib

    import duckdb

    value = duckdb.sql("SELECT CAST('0x' || substr(md5('c1:20261201'), 1, 15) AS BIGINT)").fetchall()[0][0]
    assert value == int(hashlib.md5(b"c1:20261201").hexdigest()[:15], 16)
