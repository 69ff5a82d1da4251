"""Run a command and report the CPU seconds and peak RSS of every process of its tree, the JVM too.

    python bench/tree_usage.py [--json FILE] -- COMMAND [ARGS...]

Why not ``/usr/bin/time -v``: a Spark build's work is done by a JVM that the Python driver starts
(``spark-submit``) and never waits for, so the figures of the waited-for tree (what GNU time
reads) leave the JVM out. Why not sampling (psutil): a sample misses the CPU spent after the last
one and the memory peak between two. This script makes itself the *child subreaper* of the
command (Linux ``prctl(PR_SET_CHILD_SUBREAPER)``): a descendant whose parent ended without waiting
for it is handed to this script instead of to init, and the script reaps every process of the
tree with ``wait4``, whose resource usage is the kernel's own final account of that process (CPU
user + system to the tick, ``ru_maxrss`` = its peak resident set), including the children it
reaped itself. Each process is named by its ``/proc/PID/comm`` read before it is reaped (the JVM
is ``java``; ``spark-submit``'s bash ``exec``s into it, and its short-lived launcher JVM is counted
in it). A process's figures include the children it reaped itself: the JVM's include the Python
workers it starts for the session's Python UDF (``pyspark.daemon``). Standard library only; Linux
only.

Printed lines (and with ``--json``, one object): wall seconds, then per process name: CPU user +
system seconds, the largest peak RSS among processes of that name, how many there were.
"""

from __future__ import annotations

import argparse
import ctypes
import json
import os
import subprocess
import sys
import time

PR_SET_CHILD_SUBREAPER = 36


def _comm(pid: int) -> str:
    try:
        with open(f"/proc/{pid}/comm", encoding="utf-8") as fh:
            return fh.read().strip()
    except OSError:
        return "?"


def run(command: list[str]) -> dict:
    libc = ctypes.CDLL(None, use_errno=True)
    if libc.prctl(PR_SET_CHILD_SUBREAPER, 1, 0, 0, 0) != 0:
        raise OSError(ctypes.get_errno(), "prctl(PR_SET_CHILD_SUBREAPER) failed (Linux only)")
    started = time.perf_counter()
    child = subprocess.Popen(command)
    processes: list[dict] = []
    exit_code = None
    wall = None
    while True:
        try:
            info = os.waitid(os.P_ALL, 0, os.WEXITED | os.WNOWAIT)  # who ended, not yet reaped
        except ChildProcessError:
            break  # no process of the tree is left
        if info is None:
            continue
        name = _comm(info.si_pid)  # a zombie keeps its name until it is reaped
        pid, status, usage = os.wait4(info.si_pid, 0)
        processes.append({"pid": pid, "name": name, "cpu_user": usage.ru_utime, "cpu_sys": usage.ru_stime,
                          "peak_rss_mb": usage.ru_maxrss / 1024})  # ru_maxrss is in KiB on Linux
        if pid == child.pid:
            child.returncode = os.waitstatus_to_exitcode(status)  # keep Popen from reaping it again
            exit_code = child.returncode
            wall = time.perf_counter() - started
    by_name: dict[str, dict] = {}
    for p in processes:
        row = by_name.setdefault(p["name"], {"cpu_user": 0.0, "cpu_sys": 0.0, "peak_rss_mb": 0.0, "processes": 0})
        row["cpu_user"] += p["cpu_user"]
        row["cpu_sys"] += p["cpu_sys"]
        row["peak_rss_mb"] = max(row["peak_rss_mb"], p["peak_rss_mb"])
        row["processes"] += 1
    return {"command": command, "exit_code": exit_code, "wall_seconds": wall,
            "tree_seconds": time.perf_counter() - started, "by_name": by_name, "processes": processes}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", help="also write the figures to this file")
    parser.add_argument("command", nargs=argparse.REMAINDER)
    args = parser.parse_args(argv)
    command = args.command[1:] if args.command[:1] == ["--"] else args.command
    if not command:
        parser.error("no command given")
    result = run(command)
    out = sys.stderr
    print(f"tree: command exit {result['exit_code']}, wall {result['wall_seconds']:.1f} s "
          f"(last process of the tree ended at {result['tree_seconds']:.1f} s)", file=out)
    total = 0.0
    for name, row in sorted(result["by_name"].items(), key=lambda kv: -(kv[1]["cpu_user"] + kv[1]["cpu_sys"])):
        cpu = row["cpu_user"] + row["cpu_sys"]
        total += cpu
        print(f"tree: {name}: CPU {cpu:.1f} s (user {row['cpu_user']:.1f} + sys {row['cpu_sys']:.1f}), "
              f"peak RSS {row['peak_rss_mb']:.0f} MB, {row['processes']} process(es)", file=out)
    print(f"tree: CPU total {total:.1f} s", file=out)
    if args.json:
        with open(args.json, "w", encoding="utf-8") as fh:
            json.dump(result, fh, indent=1)
    return result["exit_code"] if result["exit_code"] is not None else 1


if __name__ == "__main__":
    sys.exit(main())
