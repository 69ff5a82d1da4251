"""The workspace lock: one writer at a time (``build``, ``check``), who holds it recorded beside it.

The lock is ``<workspace>/build.lock``, taken with the ``filelock`` library (an OS file lock, so a
process that dies releases it; on a file system without OS locks filelock falls back to a lock
file). Beside it, ``build.lock.json`` records the holder: pid, host, start time and command. A
second writer waits up to ``[workspace] lock_wait_seconds`` (``--wait``), saying whom it waits
for, then stops with exit code 2 naming the holder.

A holder that ends normally removes its record. A record found on taking the lock therefore
belongs to a process that ended without finishing (killed, or the machine stopped): the lock is
taken over with a note. When the lock is a lock file (no OS locks) and its recorded holder is a
process of this host that no longer runs, the stale lock file is removed and taken over likewise.

Readers (analyses) never take this lock: they open the last published panels, which a build
replaces in one atomic rename (see ``toolkit.workspace``).
"""

from __future__ import annotations

import contextlib
import datetime as dt
import json
import os
import socket
import sys
from pathlib import Path

import filelock

from .errors import WorkspaceBusy

LOCK = "build.lock"
HOLDER = "build.lock.json"

# The lock class; tests swap in filelock.SoftFileLock to exercise the lock-file fallback.
LOCK_CLASS = filelock.FileLock

_held: dict[Path, int] = {}  # workspaces this process holds, with the nesting depth


def holder_path(workspace_dir: Path) -> Path:
    return workspace_dir / HOLDER


def read_holder(workspace_dir: Path) -> dict | None:
    try:
        return json.loads(holder_path(workspace_dir).read_text())
    except (OSError, ValueError):
        return None


def _write_holder(workspace_dir: Path, command: str) -> dict:
    record = {
        "pid": os.getpid(),
        "host": socket.gethostname(),
        "started_at": dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds"),
        "command": command,
    }
    path = holder_path(workspace_dir)
    tmp = path.with_name(f"{path.name}.{record['host']}-{record['pid']}.partial")
    tmp.write_text(json.dumps(record, indent=2))
    os.replace(tmp, path)
    return record


def pid_alive(pid: int) -> bool:
    """Whether a process with this pid runs on this machine (on Windows: assumed so, as
    ``os.kill(pid, 0)`` would end it there)."""
    if os.name == "nt":
        return True
    try:
        os.kill(int(pid), 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError, ValueError):
        return True  # it exists (another user's), or the pid is not one we can ask about
    return True


def is_gone(holder: dict | None) -> bool:
    """Whether the recorded holder is a process of this host that no longer runs."""
    return bool(holder) and holder.get("host") == socket.gethostname() and not pid_alive(holder.get("pid", -1))


def describe(holder: dict | None) -> str:
    if not holder:
        return "another process (it left no record of itself)"
    return (f"pid {holder.get('pid')} on {holder.get('host')}, started {holder.get('started_at')}, "
            f"running `{holder.get('command')}`")


def command_line() -> str:
    """This process's command, as the user typed it (``liftlag build -c ...``) where it is liftlag."""
    name = Path(sys.argv[0]).name if sys.argv and sys.argv[0] else "python"
    liftlag = name.startswith("liftlag") or name in ("cli.py", "__main__.py")
    return " ".join(["liftlag" if liftlag else name, *sys.argv[1:]])


@contextlib.contextmanager
def hold(workspace_dir: Path, command: str | None = None, *, wait: float = 600.0, notify=None):
    """Hold the workspace's lock for the block; yields the record of a holder taken over (or None).

    Parameters
    ----------
    workspace_dir : Path
    command : str, optional
        What the holder runs, recorded for whoever waits (default: this process's command line).
    wait : float, default=600
        Seconds to wait for another holder before giving up.
    notify : callable, optional
        Called with a line of text when waiting, and when a stale lock is taken over.

    Raises
    ------
    WorkspaceBusy
        Another process still holds the lock after ``wait`` seconds (exit code 2).
    """
    workspace_dir = Path(workspace_dir).resolve()
    if workspace_dir in _held:  # this process holds it already (a build inside an analysis)
        _held[workspace_dir] += 1
        try:
            yield None
        finally:
            _held[workspace_dir] -= 1
        return
    say = notify or (lambda text: None)
    workspace_dir.mkdir(parents=True, exist_ok=True)
    lock = LOCK_CLASS(str(workspace_dir / LOCK))
    try:
        lock.acquire(timeout=0)
    except filelock.Timeout:
        holder = read_holder(workspace_dir)
        if isinstance(lock, filelock.SoftFileLock) and is_gone(holder):
            # A lock file whose holder no longer runs: stale; remove it and take it over.
            Path(lock.lock_file).unlink(missing_ok=True)
        else:
            say(f"waiting up to {wait:g} s for the workspace {workspace_dir}: it is in use by {describe(holder)}")
        try:
            lock.acquire(timeout=max(0.0, float(wait)))
        except filelock.Timeout:
            holder = read_holder(workspace_dir) or holder
            raise WorkspaceBusy(
                f"the workspace {workspace_dir} is in use by {describe(holder)}; waited {wait:g} s. Run again when "
                f"it has finished, or wait longer with --wait SECONDS or [workspace] lock_wait_seconds"
            ) from None
    try:
        previous = read_holder(workspace_dir)
        taken_over = None
        if previous and not (previous.get("pid") == os.getpid() and previous.get("host") == socket.gethostname()):
            taken_over = previous
            say(f"took over the workspace lock left by {describe(previous)}: that process ended without "
                "finishing (its work was discarded; the last published panels are kept)")
        _write_holder(workspace_dir, command or command_line())
        _held[workspace_dir] = 1
        try:
            yield taken_over
        finally:
            del _held[workspace_dir]
            holder_path(workspace_dir).unlink(missing_ok=True)
    finally:
        lock.release()
