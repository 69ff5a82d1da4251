"""Analyses build the panels first when they are missing or stale, and say so (issue: a new user's
first hour; common practice, no source)."""

from __future__ import annotations

import shutil

import pytest

from toolkit import cli
from tests.conftest import DEMO_DATA

pytestmark = pytest.mark.slow


def test_campaign_on_a_fresh_copy_of_the_demo_export_without_a_build(tmp_path, capsys):
    export = tmp_path / "export"
    shutil.copytree(DEMO_DATA, export, ignore=shutil.ignore_patterns(".liftlag"))
    code = cli.main(["campaign", "FW-T10", "-c", str(export / "liftlag.toml"), "--out", str(tmp_path / "out")])
    captured = capsys.readouterr()
    said = captured.out + captured.err
    assert code == 0, said
    assert "building the panels first (no build yet)" in said
    assert "accepted" in said and "campaign_windows" in said  # the build's tables were printed
    assert (tmp_path / "out" / "campaign_FW-T10.html").exists()


def test_timing_rebuilds_after_a_setting_change(demo_copy, tmp_path, capsys):
    assert cli.main(["build", "-c", str(demo_copy)]) == 0
    demo_copy.write_text(demo_copy.read_text().replace("after_days = 28", "after_days = 21"))
    capsys.readouterr()
    code = cli.main(["timing", "--no-cox", "-c", str(demo_copy), "--out", str(tmp_path / "out")])
    said = " ".join((lambda c: c.out + c.err)(capsys.readouterr()).split())
    assert code == 0, said
    assert "building the panels first (windows.after_days 28 -> 21 (read by campaign_windows))" in said
