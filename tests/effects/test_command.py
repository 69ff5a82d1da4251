"""``liftlag campaign`` through its parser, on a workspace written to disk."""

from __future__ import annotations

import argparse

import duckdb
import pandas as pd
import pytest

from toolkit.errors import ConfigError
from toolkit.effects.command import register
from tests.effects.conftest import PANEL_COLUMNS

CONFIG = """
[tables.transactions]
path = "export/lines.parquet"
[tables.promotions]
path = "export/promotions.csv"
[tables.assignments]
path = "export/assignments.csv"
[campaign]
holdout_share = 0.25
folds = 3
[workspace]
path = "ws"
"""


@pytest.fixture
def project(tmp_path, panel_factory, promotion_factory, monkeypatch):
    (tmp_path / "ws").mkdir()
    panels = pd.concat([panel_factory(customers=900, promotion_id="P1", seed=2),
                        panel_factory(customers=40, promotion_id="P2", seed=3, holdout_share=0.0)])[PANEL_COLUMNS]
    with duckdb.connect(str(tmp_path / "ws" / "panels.duckdb")) as con:
        con.register("frame", panels)
        con.execute("CREATE TABLE campaign_windows AS SELECT * FROM frame")
    with duckdb.connect(str(tmp_path / "ws" / "checked.duckdb")) as con:
        con.register("frame", pd.DataFrame([promotion_factory("P1"), promotion_factory("P2")]))
        con.execute("CREATE TABLE promotions AS SELECT * FROM frame")
    (tmp_path / "liftlag.toml").write_text(CONFIG)

    def connect(settings):
        # the workspace's own connect also checks build fingerprints (state.json), which this hand-made
        # workspace does not have; open it the same way: read-only panels, checked inputs attached
        con = duckdb.connect(str(settings.workspace_dir / "panels.duckdb"), read_only=True)
        con.execute("ATTACH ? AS checked (READ_ONLY)", [str(settings.workspace_dir / "checked.duckdb")])
        return con

    monkeypatch.setattr("toolkit.workspace.connect", connect)
    # The hand-made workspace has no export to build from: the command reads it as it is.
    from toolkit.ensure import Ready

    monkeypatch.setattr("toolkit.ensure.ensure_built", lambda settings, *a, **k: Ready(settings, {}))
    return tmp_path


def _run(argv):
    parser = argparse.ArgumentParser(prog="liftlag")
    sub = parser.add_subparsers(dest="command")
    register(sub, lambda p: p.add_argument("-c", "--config", default="liftlag.toml"))
    args = parser.parse_args(argv)
    return args.handler(args)


def test_campaign_command_writes_tables_and_readout(project):
    out = project / "out"
    assert _run(["campaign", "P1", "-c", str(project / "liftlag.toml"), "--out", str(out)]) == 0
    assert (out / "campaign_P1.html").exists()
    assert set(pd.read_parquet(out / "campaign_effects.parquet")["promotion_id"]) == {"P1"}


def test_campaign_all_skips_what_cannot_be_analysed(project, capsys):
    out = project / "all"
    assert _run(["campaign", "--all", "-c", str(project / "liftlag.toml"), "--out", str(out)]) == 0
    assert set(pd.read_parquet(out / "campaign_effects.parquet")["promotion_id"]) == {"P1"}
    assert "skipped P2" in capsys.readouterr().err.replace("\n", " ")


def test_campaign_command_needs_one_id_or_all(project):
    with pytest.raises(ConfigError, match="one PROMOTION_ID or --all"):
        _run(["campaign", "-c", str(project / "liftlag.toml")])
    with pytest.raises(ConfigError, match="one PROMOTION_ID or --all"):
        _run(["campaign", "P1", "--all", "-c", str(project / "liftlag.toml")])
