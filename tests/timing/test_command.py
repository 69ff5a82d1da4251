"""``liftlag timing`` (toolkit.timing.command) on the demo workspace, through its own parser."""

from __future__ import annotations

import argparse
from pathlib import Path

import pandas as pd
import pytest

from toolkit.timing.command import register

ROOT = Path(__file__).resolve().parents[2]


@pytest.mark.slow
def test_timing_command_writes_the_tables(tmp_path, capsys, demo_config):
    parser = argparse.ArgumentParser(prog="liftlag")
    sub = parser.add_subparsers(dest="command")
    register(sub, lambda p: p.add_argument("-c", "--config", required=True))
    args = parser.parse_args(["timing", "-c", str(demo_config), "--out", str(tmp_path),
                              "--no-cox"])
    assert args.handler(args) == 0
    names = {p.stem for p in tmp_path.glob("*.parquet")}
    assert {"timing_effects", "km_curves", "hazard_cells", "ph_check"} <= names
    effects = pd.read_parquet(tmp_path / "timing_effects.parquet")
    assert set(effects["model"]) == {"randomised_rate_ratio", "discrete_cloglog", "kaplan_meier_rmst"}
    out = capsys.readouterr().out
    assert "purchase timing" in out and "acceleration" in out
    assert "randomised" in out and "descriptive" in out
