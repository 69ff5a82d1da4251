"""The workspace lock: a second writer waits or exits 2 naming the holder; a lock left by a
process that no longer runs is taken over with a note (common practice, no source)."""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys

import filelock
import pytest

from toolkit import cli, config, lock, panels
from tests.conftest import write_export
from tests.workspace.conftest import REPO


def dead_pid() -> int:
    proc = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    pid = int(proc.stdout)
    assert not lock.pid_alive(pid)
    return pid


def leave_holder(ws, pid: int) -> None:
    ws.mkdir(parents=True, exist_ok=True)
    (ws / lock.HOLDER).write_text(json.dumps({"pid": pid, "host": socket.gethostname(),
                                              "started_at": "2026-01-01T00:00:00+00:00",
                                              "command": "liftlag build -c old.toml"}))


def test_lock_left_by_a_dead_process_is_taken_over_with_a_note(tmp_path):
    cfg = write_export(tmp_path / "e")
    settings = config.load(cfg)
    pid = dead_pid()
    leave_holder(settings.workspace_dir, pid)
    notes = []
    result = panels.build(settings, notify=notes.append, wait=0)
    assert not result.skipped and result.taken_over["pid"] == pid
    assert any(f"took over the workspace lock left by pid {pid}" in n for n in notes)
    assert not (settings.workspace_dir / lock.HOLDER).exists()  # released on the way out


def test_stale_lock_file_is_taken_over_when_the_os_lock_is_not_available(tmp_path, monkeypatch):
    """A lock file (filelock's fallback where the file system has no OS locks) whose holder no
    longer runs does not block: it is removed and taken over."""
    monkeypatch.setattr(lock, "LOCK_CLASS", filelock.SoftFileLock)
    cfg = write_export(tmp_path / "e")
    settings = config.load(cfg)
    pid = dead_pid()
    leave_holder(settings.workspace_dir, pid)
    (settings.workspace_dir / lock.LOCK).write_text(str(pid))
    notes = []
    result = panels.build(settings, notify=notes.append, wait=0)
    assert not result.skipped
    assert any("took over" in n and f"pid {pid}" in n for n in notes)
    assert not (settings.workspace_dir / lock.LOCK).exists()  # the lock file is released


def test_a_second_build_exits_2_naming_the_holder(tmp_path, capsys):
    cfg = write_export(tmp_path / "e")
    ws = config.load(cfg).workspace_dir
    code = ("import sys, time; from pathlib import Path; from toolkit.lock import hold\n"
            "with hold(Path(sys.argv[1]), 'liftlag build -c held.toml', wait=0):\n"
            "    print('held', flush=True); time.sleep(120)\n")
    holder = subprocess.Popen([sys.executable, "-c", code, str(ws)], stdout=subprocess.PIPE, text=True,
                              env={**os.environ, "PYTHONPATH": str(REPO)})
    try:
        assert holder.stdout.readline().strip() == "held"
        exit_code = cli.main(["build", "-c", str(cfg), "--wait", "0"])
        captured = capsys.readouterr()
    finally:
        holder.kill()
        holder.wait()
    assert exit_code == 2
    message = " ".join((captured.out + captured.err).split())
    assert f"pid {holder.pid}" in message and "liftlag build -c held.toml" in message
    assert "--wait" in message
    # the holder is gone: the next build goes ahead
    assert cli.main(["build", "-c", str(cfg), "--wait", "0"]) == 0


def test_negative_wait_is_an_argument_error(tmp_path, capsys):
    cfg = write_export(tmp_path / "e")
    assert cli.main(["build", "-c", str(cfg), "--wait", "-1"]) == 2


@pytest.mark.parametrize("value", ["-5", "\"soon\""])
def test_lock_wait_seconds_is_checked(tmp_path, value, capsys):
    cfg = write_export(tmp_path / "e")
    cfg.write_text(cfg.read_text().replace('path = ".liftlag"', f'path = ".liftlag"\nlock_wait_seconds = {value}'))
    assert cli.main(["build", "-c", str(cfg)]) == 2
