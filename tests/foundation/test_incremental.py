"""``build --since``: checking only the new order-line files gives what a full build gives.

The demo export is partitioned by month (``transactions/month=YYYY-MM/``). Faulty lines are
planted in an early month and in the month that arrives last: an exact copy of a line
(``duplicate_row``), a line filed under the wrong month (``date_outside_partition``) and a return
line with a positive amount (the ``return_sign_mismatch`` warning). A workspace built before the
last month (and a new campaign's promotion and assignments) arrived, then built with ``--since``, must hold the same panels, rejected rows and
counts as a workspace built in full from the whole export (the accounting invariant included).
"""

from __future__ import annotations

import dataclasses
import re
import shutil
from pathlib import Path

import duckdb
import pytest

from toolkit import config, panels, workspace
from toolkit.config import WorkspaceSettings
from tests.conftest import DEMO_DATA

LAST = "month=2026-09"


def _plant_faults(month_dir: Path, misfiled_day: str) -> None:
    """A second file in the month: a copy of a line, a misfiled line, a return with a positive amount."""
    part = month_dir / "part-0.parquet"
    extra = month_dir / "part-1.parquet"
    con = duckdb.connect()
    con.execute(f"""
        COPY (
            (SELECT * FROM read_parquet('{part}') ORDER BY created_at, basket_no, sku LIMIT 1)
            UNION ALL
            (SELECT * REPLACE (CAST('{misfiled_day} 12:00:00' AS TIMESTAMP) AS created_at, basket_no || '-m' AS basket_no)
             FROM read_parquet('{part}') ORDER BY created_at, basket_no, sku LIMIT 1 OFFSET 1)
            UNION ALL
            (SELECT * REPLACE (-1 AS qty, abs(paid) AS paid, basket_no || '-r' AS basket_no)
             FROM read_parquet('{part}') ORDER BY created_at, basket_no, sku LIMIT 1 OFFSET 2)
        ) TO '{extra}' (FORMAT parquet)""")
    con.close()


@pytest.fixture()
def grown_export(tmp_path):
    """The demo export with faults planted, partitioned by month, and its last month held aside."""
    export = tmp_path / "export"
    shutil.copytree(DEMO_DATA, export, ignore=shutil.ignore_patterns("*.json", "truth_uplift.parquet", "README.md"))
    assert 'date_partition = "month"' in (export / "liftlag.toml").read_text()
    _plant_faults(export / "transactions" / "month=2025-07", "2025-08-03")
    _plant_faults(export / "transactions" / LAST, "2026-08-20")
    held = tmp_path / "held"
    shutil.move(export / "transactions" / LAST, held)
    return export, held


def _settings(export: Path, ws: Path):
    settings = config.load(export / "liftlag.toml")
    return dataclasses.replace(settings, workspace=WorkspaceSettings(path=ws))


def _tables(settings) -> dict[str, list[tuple]]:
    """Every panel and every checked table of a workspace, rows sorted, floats to 9 decimals and 12
    significant digits (a sum over the same values in another order differs in the last bits)."""
    con = duckdb.connect(str(workspace.path(settings, workspace.PANELS)), read_only=True)
    try:
        names = con.execute("SELECT schema_name, table_name FROM duckdb_tables() WHERE schema_name IN "
                            "('main', 'checked') ORDER BY 1, 2").fetchall()
        out = {}
        for schema, table in names:
            rows = [tuple(float(f"{round(v, 9):.12g}") + 0.0 if isinstance(v, float) else v for v in row)  # sums in another order
                    for row in con.execute(f'SELECT * FROM {schema}."{table}"').fetchall()]
            out[f"{schema}.{table}"] = sorted(rows, key=repr)
        return out
    finally:
        con.close()


def test_a_since_build_equals_a_full_build_of_the_grown_export(grown_export, tmp_path):
    export, held = grown_export
    inc = _settings(export, tmp_path / "ws_inc")
    panels.build(inc)
    shutil.move(held, export / "transactions" / LAST)
    # A new campaign arrives with the new month: a promotion and its assignments.
    with (export / "promotions.csv").open("a") as fh:
        fh.write("FW-T99,2026-09-14,2026-09-20,percent_off,0.15,targeted,0.4,Autumn bulbs 15% off\n")
    with (export / "assignments.csv").open("a") as fh:
        fh.write("FW-T99,FW100001,T,2026-09-12 06:00:00\nFW-T99,FW100005,H,2026-09-12 06:00:00\n")
    notes: list[str] = []
    result = panels.build(inc, since=__import__("datetime").date(2026, 9, 1), notify=notes.append)
    assert notes and "checking 2 order-line file(s)" in notes[0], notes  # the plan was sound: 2 files checked
    record = workspace.published_build(inc)
    assert record["since"]["kept_files"] > 20 and record["since"]["checked_files"] == 2

    full = _settings(export, tmp_path / "ws_full")
    full_result = panels.build(full)
    # What the terminal shows: the same counts, and a note of what was checked now.
    assert result.check.warnings.equals(full_result.check.warnings)
    assert result.check.summary.equals(full_result.check.summary)
    assert any("order lines of 2 file(s) checked now" in n for n in result.check.notes)
    got, want = _tables(inc), _tables(full)
    assert got.keys() == want.keys()
    for name in want:
        assert got[name] == want[name], name
    summary = result.check.summary.set_index("table").loc["transactions"]
    assert summary.accepted + summary.rejected == summary.rows_read
    reasons = dict(((t, r), n) for t, r, n in want["checked.rejects_summary"])
    assert reasons[("transactions", "duplicate_row")] == 2
    assert reasons[("transactions", "date_outside_partition")] == 2
    assert ("transactions", "return_sign_mismatch", 2) in want["checked.warnings_summary"]


def test_a_changed_earlier_file_makes_a_full_build_and_says_why(grown_export, tmp_path):
    export, held = grown_export
    inc = _settings(export, tmp_path / "ws_inc")
    panels.build(inc)
    shutil.move(held, export / "transactions" / LAST)
    (export / "transactions" / "month=2025-07" / "part-1.parquet").unlink()  # an earlier month re-exported
    notes: list[str] = []
    panels.build(inc, since=__import__("datetime").date(2026, 9, 1), notify=notes.append)
    assert "a full build instead" in notes[0] and "month=2025-07/part-1.parquet" in notes[0], notes
    full = _settings(export, tmp_path / "ws_full")
    panels.build(full)
    assert _tables(inc) == _tables(full)


def test_without_a_date_partition_since_builds_in_full(tmp_path):
    export = tmp_path / "export"
    shutil.copytree(DEMO_DATA, export, ignore=shutil.ignore_patterns("*.json", "truth_uplift.parquet", "README.md"))
    config_path = export / "liftlag.toml"
    config_path.write_text(re.sub(r"^date_partition = .*$", "", config_path.read_text(), flags=re.M))
    settings = _settings(export, tmp_path / "ws")
    panels.build(settings)
    notes: list[str] = []
    result = panels.build(settings, force=True, since=__import__("datetime").date(2026, 9, 1), notify=notes.append)
    assert "date_partition is not set" in notes[0]
    assert not result.skipped and result.rows["orders"] > 0


def test_a_changed_promotion_found_after_the_rules_makes_a_full_build(grown_export, tmp_path):
    """Earlier lines were checked against a promotion whose depth is now another: their warnings
    may differ, so the build starts again in full (``NotIncremental``)."""
    export, held = grown_export
    inc = _settings(export, tmp_path / "ws_inc")
    panels.build(inc)
    shutil.move(held, export / "transactions" / LAST)
    promotions = export / "promotions.csv"
    promotions.write_text(promotions.read_text().replace("FW-T01,2025-02-17,2025-02-26,percent_off,0.1,",
                                                         "FW-T01,2025-02-17,2025-02-26,percent_off,0.12,"))
    notes: list[str] = []
    result = panels.build(inc, since=__import__("datetime").date(2026, 9, 1), notify=notes.append)
    assert "checking 2 order-line file(s)" in notes[0]  # the plan looked sound ...
    assert "a full build instead, because a promotion" in notes[1], notes  # ... until the promotions were read
    assert workspace.published_build(inc)["since"] is None
    full = _settings(export, tmp_path / "ws_full")
    panels.build(full)
    assert _tables(inc) == _tables(full)
    assert result.check.summary.set_index("table").loc["transactions"].rows_read == \
        sum(r[4] for r in _tables(full)["checked.file_counts"] if r[2] == "_read")
