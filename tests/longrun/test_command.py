"""``liftlag longrun`` and ``analyse_longrun`` on the tiny export (tests/conftest.py): tables written
with the manifest, bad ``--through`` values, too little data for some sections."""

from __future__ import annotations

import json

import pandas as pd
import pytest

from tests.conftest import TINY_TRANSACTIONS, write_export
from toolkit import cli, config, panels, workspace
from toolkit.longrun.api import analyse_longrun


@pytest.fixture
def built_tiny(tmp_path):
    cfg = write_export(tmp_path / "export")
    panels.build(config.load(cfg))
    return cfg


def test_longrun_command_writes_tables_and_manifest(built_tiny, tmp_path, capsys):
    out = tmp_path / "out"
    assert cli.main(["longrun", "-c", str(built_tiny), "--out", str(out)]) == 0
    names = {p.stem for p in out.glob("*.parquet")}
    assert {"dependence_by_quarter", "dependence_transitions", "dependence_distribution", "longrun_notes"} <= names
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["analysis"] == "longrun" and manifest["quarters"] == ["2026Q1", "2026Q2"]
    assert manifest["row_counts"]["dependence_by_quarter"] == 2
    assert not list(out.glob(".partial-*"))


def test_through_a_quarter_the_data_does_not_reach_exits_2_listing_the_quarters(built_tiny, tmp_path, capsys):
    code = cli.main(["longrun", "-c", str(built_tiny), "--through", "2027Q1", "--out", str(tmp_path / "out")])
    assert code == 2
    err = capsys.readouterr().err
    assert "2027Q1" in err and "2026Q1, 2026Q2" in err
    assert not (tmp_path / "out").exists()


def test_through_that_is_not_a_quarter_exits_2(built_tiny, tmp_path, capsys):
    assert cli.main(["longrun", "-c", str(built_tiny), "--through", "2026-06", "--out", str(tmp_path / "o")]) == 2
    assert "quarter such as 2026Q2" in capsys.readouterr().err


def test_through_stops_at_that_quarter(built_tiny):
    settings = config.load(built_tiny)
    con = workspace.connect(settings)
    try:
        readout = analyse_longrun(con, settings, through="2026Q1")
    finally:
        con.close()
    assert readout.quarters == ["2026Q1"]
    assert str(readout.through_end) == "2026-03-31"
    assert readout.tables["dependence_by_quarter"]["quarter"].tolist() == ["2026Q1"]


def test_one_quarter_runs_dependence_and_says_which_sections_need_more(tmp_path):
    """Orders in a single quarter: dependence runs; transitions and drift say they need two quarters."""
    first_quarter = [row for row in TINY_TRANSACTIONS if row[2] < "2026-04"]
    cfg = write_export(tmp_path / "export", transactions=first_quarter)
    settings = config.load(cfg)
    panels.build(settings)
    con = workspace.connect(settings)
    try:
        readout = analyse_longrun(con, settings)
    finally:
        con.close()
    assert readout.tables["dependence_by_quarter"]["quarter"].tolist() == ["2026Q1"]
    notes = " ".join(readout.notes)
    assert "dependence_transitions needs two quarters" in notes
    assert "drift: not run: population_drift needs at least two whole quarters" in notes
    assert isinstance(readout.tables["longrun_notes"], pd.DataFrame) and len(readout.tables["longrun_notes"]) >= 2
