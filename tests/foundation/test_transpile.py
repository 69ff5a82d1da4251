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
