"""The documented panel contract (toolkit/contract.py) equals what sql/panels/ produces.

Built from the shipped demo export when it is there, else from the tiny export, so that a
column added to the SQL without the contract (or the reverse) fails here.
"""

from __future__ import annotations

from pathlib import Path

import duckdb

from toolkit import config, panels, workspace
from toolkit.contract import PANELS
from tests.conftest import write_export

DEMO = Path(__file__).resolve().parents[2] / "demo_data" / "liftlag.toml"


def test_every_panel_has_exactly_the_documented_columns_and_types(tmp_path):
    cfg = write_export(tmp_path / "export")
    settings = config.load(cfg)
    panels.build(settings)
    con = duckdb.connect(str(workspace.path(settings, workspace.PANELS)), read_only=True)
    for name, columns in PANELS.items():
        got = [(r[0], r[1]) for r in con.execute(f"DESCRIBE {name}").fetchall()]
        assert got == [(c.name, c.type) for c in columns], name
    con.close()


def test_panel_files_are_the_panels_in_build_order():
    files = sorted(p.stem for p in panels.PANELS_DIR.glob("*.sql"))
    assert files == sorted(panels.PANEL_ORDER)
    assert panels.PANEL_ORDER == tuple(PANELS)


def test_every_panel_file_states_what_it_reads_and_its_parameters():
    for path in panels.sql_files():
        head = path.read_text().split("WITH", 1)[0]
        assert head.startswith(f"-- Panel: {path.stem} "), path
        assert "-- Reads:" in head and "-- Parameters:" in head, path
