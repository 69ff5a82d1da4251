"""The demo runs end to end from the command line (the README's first quick-start command)."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest


@pytest.mark.slow
def test_liftlag_demo_runs_end_to_end_from_the_command_line(tmp_path):
    exe = shutil.which("liftlag") or str(Path(sys.executable).with_name("liftlag"))
    out = tmp_path / "demo"
    done = subprocess.run([exe, "demo", "--out", str(out)], capture_output=True, text=True, timeout=900)
    assert done.returncode == 0, done.stdout[-3000:] + done.stderr[-3000:]
    assert "demo done" in done.stdout
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["tool"] == "liftlag" and manifest["row_counts"]["campaign_windows"] > 0
    summary = pd.read_parquet(out / "check_summary.parquet").set_index("table")
    # accepted + rejected = read for every table of the demo export
    assert (summary["accepted"] + summary["rejected"] == summary["rows_read"]).all()
    assert summary.loc["transactions", "rows_read"] > 10_000
    # the demo ends with its latest complete quarter's promotion health report
    quarter = manifest["quarter_report"]["quarter"]
    assert (out / f"quarter-{quarter}" / "report.html").exists()
    assert json.loads((out / f"quarter-{quarter}" / "manifest.json").read_text())["command"] == "liftlag quarter"
