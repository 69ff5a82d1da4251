"""A failed build keeps the last good panels, marks the workspace as failed (when, why, at which
step) and still prints the read / accepted / rejected table (common practice, no source)."""

from __future__ import annotations

import duckdb

from toolkit import cli, config, panels, workspace
from tests.conftest import write_export


def run(args, capsys):
    code = cli.main([str(a) for a in args])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_unusable_export_keeps_the_last_good_panels_and_prints_the_check(tmp_path, capsys):
    cfg = write_export(tmp_path / "e")
    settings = config.load(cfg)
    panels.build(settings)
    good = workspace.published_build(settings)
    tx = cfg.parent / "transactions.csv"
    tx.write_text(tx.read_text().splitlines()[0] + "\n")  # header only: no order lines
    code, out, err = run(["build", "-c", cfg], capsys)
    assert code == 3
    assert "no rows read" in out + err
    # the read / accepted / rejected table, although the build failed
    assert "read" in out and "accepted" in out and "rejected" in out
    assert "transactions" in out and "promotions" in out
    assert workspace.published_build(settings)["fingerprint"] == good["fingerprint"]
    state = workspace.read_state(settings)
    assert state["build"]["fingerprint"] == good["fingerprint"]
    assert state["failed"]["status"] == "failed" and "no rows read" in state["failed"]["reason"]
    assert state["failed"]["exit_code"] == 3 and state["failed"]["at"] and state["failed"]["step"]
    # the failed check's rejects are there to read; the private files are gone
    con = duckdb.connect(str(workspace.path(settings, workspace.CHECKED)), read_only=True)
    try:
        summary = dict(con.execute('SELECT "table", rows_read FROM check_summary').fetchall())
    finally:
        con.close()
    assert summary["transactions"] == 0
    assert not list(settings.workspace_dir.glob("*.partial*"))


def test_a_panel_that_fails_keeps_the_last_good_panels(tmp_path, monkeypatch):
    cfg = write_export(tmp_path / "e")
    settings = config.load(cfg)
    panels.build(settings)
    good = workspace.published_build(settings)["fingerprint"]
    real = panels.panel_sql
    monkeypatch.setattr(panels, "panel_sql",
                        lambda name: "SELECT * FROM no_such_table" if name == "purchase_gaps" else real(name))
    import pytest

    with pytest.raises(duckdb.Error):
        panels.build(settings, force=True)
    assert workspace.published_build(settings)["fingerprint"] == good
    failed = workspace.read_state(settings)["failed"]
    assert failed["step"] == "panel: purchase_gaps" and "no_such_table" in failed["reason"]
    assert not list(settings.workspace_dir.glob("*.partial*"))
    monkeypatch.setattr(panels, "panel_sql", real)
    panels.build(settings, force=True)
    assert "failed" not in workspace.read_state(settings)


def test_a_good_build_after_a_failed_one_clears_the_mark(tmp_path, capsys):
    cfg = write_export(tmp_path / "e")
    tx = cfg.parent / "transactions.csv"
    original = tx.read_bytes()
    panels.build(config.load(cfg))
    tx.write_text("")
    assert run(["build", "-c", cfg], capsys)[0] == 3
    assert "failed" in workspace.read_state(config.load(cfg))
    tx.write_bytes(original)  # back to the inputs of the good build: nothing to build
    code, out, _ = run(["build", "-c", cfg], capsys)
    assert code == 0 and "up to date" in out
    assert "failed" not in workspace.read_state(config.load(cfg))
