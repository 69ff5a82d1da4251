"""Staleness by content and by the settings each panel reads: a changed setting, an input edited
with the same size and modification time, a 0-byte file after a good build. Analyses rebuild or
refuse, never read stale panels under new labels (common practice, no source)."""

from __future__ import annotations

import os

import duckdb
import pytest
from rich.console import Console

from toolkit import config, freshness, panels, workspace
from toolkit.ensure import ensure_built
from toolkit.errors import AnalysisError, DataError
from tests.conftest import write_export


def recording_console() -> Console:
    return Console(record=True, width=200, force_terminal=False)


def published_fingerprint(settings) -> str:
    return workspace.published_build(settings)["fingerprint"]


def test_after_days_change_is_refused_by_connect_and_rebuilt_by_ensure_built(tmp_path):
    cfg = write_export(tmp_path / "e")
    panels.build(config.load(cfg))
    cfg.write_text(cfg.read_text().replace("after_days = 14", "after_days = 7"))
    settings = config.load(cfg)
    with pytest.raises(AnalysisError, match=r"windows\.after_days 14 -> 7 \(read by campaign_windows\)"):
        workspace.connect(settings).close()
    console = recording_console()
    ready = ensure_built(settings, console)
    said = console.export_text()
    assert "building the panels first (windows.after_days 14 -> 7 (read by campaign_windows))" in said
    assert ready.built_now and ready.note is None
    con = ready.connect()
    try:
        windows = con.execute("SELECT DISTINCT after_ends_on - ends_on FROM campaign_windows").fetchall()
    finally:
        con.close()
    assert windows == [(7,)]


def test_a_setting_no_panel_reads_does_not_rebuild(tmp_path):
    cfg = write_export(tmp_path / "e")
    panels.build(config.load(cfg))
    cfg.write_text(cfg.read_text() + "\n[campaign]\nfolds = 3\n")
    assert panels.build(config.load(cfg)).skipped


def test_the_settings_each_panel_reads_come_from_its_sql():
    assert freshness.panel_reads("campaign_windows")["parameters"] == ["after_days", "pre_period_days"]
    assert freshness.panel_reads("orders")["parameters"] == ["margin_rate"]
    assert "orders" in freshness.panel_reads("purchase_gaps")["panels"]


def test_same_size_same_mtime_edit_is_noticed(tmp_path):
    cfg = write_export(tmp_path / "e")
    panels.build(config.load(cfg))
    promotions = cfg.parent / "promotions.csv"
    stat = promotions.stat()
    text = promotions.read_bytes()
    edited = text.replace(b"2026-03-08", b"2026-03-09")  # PA now ends a day later: same length
    assert len(edited) == len(text) and edited != text
    promotions.write_bytes(edited)
    os.utime(promotions, ns=(stat.st_atime_ns, stat.st_mtime_ns))
    assert promotions.stat().st_size == stat.st_size and promotions.stat().st_mtime_ns == stat.st_mtime_ns
    reasons = workspace.staleness(config.load(cfg), workspace.published_build(config.load(cfg)))
    assert reasons == ["promotions: promotions.csv changed (same size, other content)"]
    assert not panels.build(config.load(cfg)).skipped


def test_large_files_are_fingerprinted_by_footer_or_head_and_tail(tmp_path, monkeypatch):
    """Beyond the size read whole: a Parquet footer, or the head and tail of other files, with size
    and modification time."""
    cfg = write_export(tmp_path / "e", parquet=True)
    monkeypatch.setattr(freshness, "SMALL_FILE_BYTES", 10)
    parquet = freshness.file_fingerprint(cfg.parent / "transactions.parquet")
    csv = freshness.file_fingerprint(cfg.parent / "promotions.csv")
    assert "footer" in parquet and "modified_ns" in parquet and "content" not in parquet
    assert "head_tail" in csv and "modified_ns" in csv
    before = csv["head_tail"]
    path = cfg.parent / "promotions.csv"
    path.write_bytes(path.read_bytes().replace(b"garden days", b"garden dayz"))
    assert freshness.file_fingerprint(path)["head_tail"] != before


def test_zero_byte_file_after_a_good_build_is_noticed_and_refused(tmp_path):
    cfg = write_export(tmp_path / "e")
    good = config.load(cfg)
    panels.build(good)
    kept = published_fingerprint(good)
    (cfg.parent / "transactions.csv").write_text("")
    settings = config.load(cfg)
    with pytest.raises(DataError, match="empty"):
        workspace.connect(settings).close()
    console = recording_console()
    with pytest.raises(DataError) as caught:
        ensure_built(settings, console)
    message = str(caught.value)
    assert "transactions.csv is empty (0 bytes)" in message
    assert "the last build failed at" in message and "--use-last-good" in message
    assert caught.value.exit_code == 3
    assert published_fingerprint(settings) == kept  # the last good panels are still there
    failed = workspace.read_state(settings)["failed"]
    assert failed["status"] == "failed" and "empty (0 bytes)" in failed["reason"] and failed["at"]


def test_use_last_good_reads_the_last_good_build_and_says_so(tmp_path):
    cfg = write_export(tmp_path / "e")
    panels.build(config.load(cfg))
    built_at = workspace.published_build(config.load(cfg))["finished_at"]
    (cfg.parent / "transactions.csv").write_text("")
    settings = config.load(cfg)
    console = recording_console()
    ready = ensure_built(settings, console, use_last_good=True)
    assert ready.note.startswith("the last build failed at ")
    assert f"results below are from the build of {built_at}" in ready.note
    assert "results below are from the build of" in console.export_text()
    con = workspace.connect(settings)  # what the analyses' own runners open
    try:
        assert con.execute("SELECT count(*) FROM orders").fetchall()[0][0] > 0
    finally:
        con.close()


def test_the_setting_chooses_the_last_good_build(tmp_path):
    cfg = write_export(tmp_path / "e")
    panels.build(config.load(cfg))
    cfg.write_text(cfg.read_text().replace('path = ".liftlag"', 'path = ".liftlag"\non_failed_build = "use_last_good"'))
    (cfg.parent / "transactions.csv").write_text("")
    ready = ensure_built(config.load(cfg), recording_console())
    assert ready.note and "the last build failed at" in ready.note


def test_auto_build_off_refuses_stale_panels_naming_the_change(tmp_path):
    cfg = write_export(tmp_path / "e")
    panels.build(config.load(cfg))
    text = cfg.read_text().replace("after_days = 14", "after_days = 21")
    cfg.write_text(text.replace('path = ".liftlag"', 'path = ".liftlag"\nauto_build = false'))
    with pytest.raises(AnalysisError, match=r"stale \(windows\.after_days 14 -> 21"):
        ensure_built(config.load(cfg), recording_console())


def test_inputs_that_failed_to_build_are_not_rebuilt_by_every_analysis(tmp_path, monkeypatch):
    cfg = write_export(tmp_path / "e")
    panels.build(config.load(cfg))
    tx = cfg.parent / "transactions.csv"
    tx.write_text(tx.read_text().splitlines()[0] + "\n")  # header only: unusable
    with pytest.raises(DataError):
        ensure_built(config.load(cfg), recording_console())
    calls = []
    monkeypatch.setattr(panels, "build", lambda *a, **k: calls.append(1))
    with pytest.raises(DataError, match="the last build of these inputs failed at"):
        ensure_built(config.load(cfg), recording_console())
    assert calls == []


def test_checked_inputs_travel_inside_the_published_panels(tmp_path):
    cfg = write_export(tmp_path / "e")
    settings = config.load(cfg)
    panels.build(settings)
    con = duckdb.connect(str(workspace.path(settings, workspace.PANELS)), read_only=True)
    try:
        assert con.execute("SELECT count(*) FROM checked.promotions").fetchall() == [(2,)]
        assert workspace.read_meta(con)["fingerprint"] == published_fingerprint(settings)
    finally:
        con.close()


def test_a_moved_export_with_its_workspace_is_still_current(tmp_path):
    cfg = write_export(tmp_path / "e")
    panels.build(config.load(cfg))
    moved = tmp_path / "elsewhere"
    (tmp_path / "e").rename(moved)
    assert panels.build(config.load(moved / "liftlag.toml")).skipped


def test_the_same_files_through_another_config_are_the_same_inputs(tmp_path):
    """A config elsewhere naming the same files by absolute paths (and the same workspace) finds
    the panels current: files are identified relative to the folder their path starts from."""
    cfg = write_export(tmp_path / "e")
    panels.build(config.load(cfg))
    text = cfg.read_text()
    for name in ("transactions", "promotions", "assignments", "customers", "products"):
        text = text.replace(f'path = "{name}.csv"', f'path = "{(cfg.parent / (name + ".csv")).as_posix()}"')
    text = text.replace('path = ".liftlag"', f'path = "{(cfg.parent / ".liftlag").as_posix()}"')
    other = tmp_path / "other" / "liftlag.toml"
    other.parent.mkdir()
    other.write_text(text)
    assert workspace.staleness(config.load(other), workspace.published_build(config.load(cfg))) == []
