"""Ctrl-C at several points of a build: the last good panels stay, nothing half-written is left,
the workspace says it was interrupted, and an analysis then succeeds (common practice, no source).

Each build runs in a subprocess that sends itself SIGINT when the build reaches the given step
(deterministic points: a check rule, the write of the checked tables, a panel, the publish), and
once through the command line from outside, as soon as the build has a private file.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time

import pytest

from toolkit import config, workspace
from tests.workspace.conftest import REPO, first_campaign, partial_files, run_liftlag

pytestmark = pytest.mark.slow

DRIVER = """
import os, signal, sys
from toolkit import cli, panels

config_path, target = sys.argv[1], sys.argv[2]
build = panels.build

def interrupting_build(settings, **kw):
    progress = kw.get("progress")

    def hooked(step, detail=""):
        if f"{step}: {detail}".startswith(target):
            os.kill(os.getpid(), signal.SIGINT)
        if progress is not None:
            progress(step, detail)

    kw["progress"] = hooked
    return build(settings, **kw)

panels.build = interrupting_build
sys.exit(cli.main(["build", "--force", "-c", config_path]))
"""

POINTS = ["check: rule missing_required", "check: writing checked tables", "panel: orders",
          "panel: customer_quarters", "publish"]


def test_sigint_at_several_points_keeps_the_last_good_build(demo_copy, tmp_path):
    assert run_liftlag("build", "-c", demo_copy)[0] == 0
    settings = config.load(demo_copy)
    good = workspace.published_build(settings)["fingerprint"]
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    for point in POINTS:
        proc = subprocess.run([sys.executable, "-c", DRIVER, str(demo_copy), point], capture_output=True,
                              text=True, env=env, timeout=300)
        assert proc.returncode != 0, (point, proc.stdout)
        assert "Traceback" not in proc.stderr, (point, proc.stderr)
        assert "interrupted" in proc.stderr, point
        assert workspace.published_build(settings)["fingerprint"] == good, point
        failed = workspace.read_state(settings)["failed"]
        assert failed["status"] == "interrupted" and failed["step"].startswith(point.split(":")[0]), point
        assert partial_files(demo_copy) == [], point
    code, out, err = run_liftlag("campaign", first_campaign(demo_copy), "-c", demo_copy, "--out", tmp_path / "out")
    assert code == 0, err
    assert "building the panels first" not in out + err  # the last good panels are still current


def test_ctrl_c_from_outside_during_a_build_then_an_analysis_builds_and_succeeds(demo_copy, tmp_path):
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    proc = subprocess.Popen([sys.executable, "-m", "toolkit.cli", "build", "-c", str(demo_copy)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    ws = demo_copy.parent / ".liftlag"
    deadline = time.monotonic() + 120
    while not list(ws.glob("*.duckdb.*.partial")) and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.02)
    proc.send_signal(signal.SIGINT)
    out, err = proc.communicate(timeout=120)
    assert "Traceback" not in err
    assert partial_files(demo_copy) == []
    settings = config.load(demo_copy)
    if proc.returncode != 0:  # interrupted before it finished (the usual case): nothing was published
        assert workspace.read_state(settings)["failed"]["status"] == "interrupted"
    code, out, err = run_liftlag("campaign", first_campaign(demo_copy), "-c", demo_copy, "--out", tmp_path / "out")
    assert code == 0, err
    if proc.returncode != 0:
        assert "building the panels first" in out + err
