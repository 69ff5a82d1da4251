"""`build` after a fresh `check` of the same export reuses the check instead of running the rules
again, and builds exactly what a build that checks for itself builds; the timings of every step
are recorded (workspace manifest.json, state.json, the build record)."""

from __future__ import annotations

import datetime as dt
import json

import duckdb
import pandas as pd
import pytest

from toolkit import checks, config, freshness, panels, workspace
from toolkit.contract import INPUT_TABLES
from tests.conftest import TINY_TRANSACTIONS, write_export

# The tiny export, a customer's thirty plain orders (so that enough lines are accepted for the
# sanity gates), and rows that several rules reject or warn about.
MESSY = TINY_TRANSACTIONS + [
    [f"o{100 + i}", "c4", f"2026-01-{i % 28 + 1:02d} 10:00:00", "p1", "1", "10", "10", "0", ""] for i in range(30)
] + [
    ["o5", "c2", "2026-02-20 11:00:00", "p2", "3", "30", "30", "0", ""],  # exact copy of a row
    ["o10", "", "2026-02-21 11:00:00", "p1", "1", "10", "10", "0", ""],  # customer missing
    ["o11", "c2", "2026-02-22 11:00:00", "p1", "1", "10", "10", "0", "PZ"],  # unknown promotion
    ["o12", "c1", "2026-02-23 11:00:00", "p1", "1", "12", "10", "0", ""],  # net above list (warned, kept)
    ["o13", "c3", "2099-12-31 00:00:00", "p1", "1", "10", "10", "0", ""],  # beyond the horizon
]


def _everything(settings) -> dict[str, pd.DataFrame]:
    """Every table of the published panels (the checked inputs too), sorted on all columns."""
    con = duckdb.connect(str(workspace.path(settings, workspace.PANELS)), read_only=True)
    try:
        names = con.execute("SELECT schema_name, table_name FROM duckdb_tables() "
                            "WHERE schema_name <> 'meta' ORDER BY 1, 2").fetchall()
        out = {}
        for schema, table in names:
            frame = con.execute(f'SELECT * FROM "{schema}"."{table}"').df()
            out[f"{schema}.{table}"] = frame.sort_values(list(frame.columns)).reset_index(drop=True)
        return out
    finally:
        con.close()


@pytest.mark.parametrize("parquet", [False, True], ids=["csv", "parquet"])
def test_build_after_check_reuses_it_and_builds_the_same(tmp_path, parquet):
    cfg = write_export(tmp_path / "export", transactions=MESSY, parquet=parquet)
    settings = config.load(cfg)
    checked = checks.run(settings)
    assert checked.usable and checked.rejects["rows"].sum() == 4

    reused = panels.build(settings)
    assert reused.check.reused_from == checked.checked_at
    assert not any(s["step"].startswith("rule ") for s in reused.steps)  # no rule ran again
    pd.testing.assert_frame_equal(reused.check.summary, checked.summary, check_dtype=False)
    pd.testing.assert_frame_equal(reused.check.rejects, checked.rejects, check_dtype=False)
    pd.testing.assert_frame_equal(reused.check.warnings, checked.warnings, check_dtype=False)
    pd.testing.assert_frame_equal(reused.check.examples, checked.examples, check_dtype=False)
    after_reuse = _everything(settings)

    fresh = panels.build(settings, force=True)  # --force checks again
    assert fresh.check.reused_from is None
    assert any(s["step"] == "rule duplicate_row" for s in fresh.steps)
    after_check = _everything(settings)
    assert after_reuse.keys() == after_check.keys()
    assert "main.orders" in after_reuse and "checked.rejected_rows" in after_reuse
    for name, frame in after_check.items():
        pd.testing.assert_frame_equal(after_reuse[name], frame, check_dtype=False, obj=name)
    assert len(after_check["checked.rejected_rows"]) == 4


def test_a_check_is_reused_only_when_fresh_usable_and_of_the_same_inputs(tmp_path):
    cfg = write_export(tmp_path / "export", transactions=MESSY)
    settings = config.load(cfg)
    assert checks.reusable(settings, "anything") is None  # no check yet
    result = checks.run(settings)
    fp = freshness.check_fingerprint(freshness.current(settings))
    assert result.fingerprint == fp
    assert checks.reusable(settings, fp) is not None
    assert checks.reusable(settings, "another fingerprint") is None
    made = dt.datetime.fromisoformat(result.checked_at)
    later = made + dt.timedelta(seconds=checks.REUSE_SECONDS + 1)
    assert checks.reusable(settings, fp, now=later) is None  # the horizon has moved on

    # Another export (one line fewer): the fingerprint changes and build checks again.
    cfg = write_export(tmp_path / "export", transactions=MESSY[:-1])
    settings = config.load(cfg)
    assert checks.reusable(settings, freshness.check_fingerprint(freshness.current(settings))) is None
    built = panels.build(settings)
    assert built.check.reused_from is None and built.check.rejects["rows"].sum() == 3


def test_an_unusable_check_is_not_reused(tmp_path):
    promotions = [["PA", "2026-03-08", "2026-03-02", "percent_off", "0.2", "targeted", "inverted"]]
    cfg = write_export(tmp_path / "export", promotions=promotions)
    settings = config.load(cfg)
    assert not checks.run(settings).usable
    assert checks.reusable(settings, freshness.check_fingerprint(freshness.current(settings))) is None


def test_timings_of_every_step_are_recorded(tmp_path):
    cfg = write_export(tmp_path / "export", transactions=MESSY)
    settings = config.load(cfg)
    result = checks.run(settings)
    manifest = workspace.read_manifest(settings)
    steps = {s["step"]: s for s in manifest["check"]["steps"]}
    assert steps["read transactions"]["rows"] == len(MESSY)
    assert steps["read promotions"]["rows"] == 2
    for rule in checks.RULES:
        assert f"rule {rule.name}" in steps
    assert steps["rule duplicate_row"]["rows"] == 1 and steps["rule missing_required"]["rows"] == 1
    assert steps["rule net_above_list"]["rows"] == 1
    assert steps["writing checked tables"]["rows"] == 4  # rejected rows written
    assert all(s["seconds"] >= 0 for s in steps.values())
    assert manifest["check"]["fingerprint"] == result.fingerprint and manifest["check"]["steps"] == result.steps
    assert workspace.read_state(settings)["check"]["steps"] == result.steps

    built = panels.build(settings, force=True)
    manifest = workspace.read_manifest(settings)
    assert manifest["check"]["steps"] == result.steps  # the last check's entry stays
    steps = {s["step"]: s for s in manifest["build"]["steps"]}
    for name in panels.PANEL_ORDER:
        assert steps[f"panel {name}"]["rows"] == built.rows[name]
        assert steps[f"panel {name}"]["seconds"] == built.seconds[name]
    assert steps["read transactions"]["rows"] == len(MESSY)
    assert "rule unknown_promotion" in steps and "publish checked inputs and build record" in steps
    con = duckdb.connect(str(workspace.path(settings, workspace.PANELS)), read_only=True)
    try:
        record = workspace.read_meta(con)
    finally:
        con.close()
    assert record["steps"] == manifest["build"]["steps"] == built.steps
    assert record["check_reused_from"] is None
    assert set(INPUT_TABLES) <= {s["step"].removeprefix("read ") for s in built.steps}


def test_progress_callbacks_see_every_step(tmp_path):
    cfg = write_export(tmp_path / "export")
    settings = config.load(cfg)
    seen, ended = [], []

    class Watcher:
        def started(self, step):
            seen.append(step.name)

        def finished(self, step):
            ended.append((step.name, step.rows))

    texts = []
    checks.run(settings, progress=texts.append, watcher=Watcher())
    assert seen == [name for name, _ in ended] and "rule missing_required" in seen
    assert texts == seen  # the older text callback gets the same step names
    assert ("read transactions", len(TINY_TRANSACTIONS)) in ended
    seen.clear()
    calls = []
    panels.build(settings, watcher=Watcher(), progress=lambda step, detail="": calls.append((step, detail)))
    assert "panel orders" in seen and ("panel", "orders") in calls
    assert json.loads(workspace.path(settings, workspace.MANIFEST).read_text())["build"]["check_reused_from"]
