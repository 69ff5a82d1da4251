"""Run liftlag's check + build and its peers on one generated export, in one run, and compare.

Usage::

    flock /work/benchdata/bench.lock .venv/bin/python bench/compare_engines.py /work/benchdata/lines_10m
    ... compare_engines.py EXPORT_DIR [--spark] [--threads 2] [--only liftlag,bare,pandas,polars]
                                      [--rss-cap-gb 16] [--label TEXT] [--no-record]

Each contender runs as its own process, one after the other, under ``/usr/bin/time -v`` (wall
seconds, CPU seconds = user + system, peak RSS), with the 1-minute load average read before it:

- ``liftlag build`` on DuckDB, cold (a fresh workspace; the build includes the check);
- ``liftlag build`` on Spark local mode (``--spark``);
- the bare DuckDB job of ``peers/bare_duckdb.py`` (orders, customer-week and gap tables only,
  no checks);
- ``peers/pandas_peer.py`` and ``peers/polars_peer.py``: the same check and all eight panels,
  written as an analyst would in a notebook.

A peer whose resident memory passes ``--rss-cap-gb`` (default 16 GB, the machine is shared) is
stopped and recorded as such. Outputs are then checked to agree: the pandas and polars peers
against liftlag's workspace with ``peers/agreement.py`` (rows read, rejected rows per table and
reason, warned rows per rule; every panel matched on its key, every column, floats to 1e-9); the
bare job and Spark by row counts where they overlap (orders, customer-weeks with an order,
purchases with a gap). The table printed gives wall s, CPU s, peak RSS MB and the ratios of each
contender to liftlag (peer / liftlag; above 1 means liftlag is faster or smaller), and the run
is appended as a row to ``bench/peers_results.md`` (date, load, commit, figures, agreement).
Exits 1 when an output disagrees or a contender failed.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import os
import re
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import duckdb

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE / "peers"))
import agreement  # noqa: E402

RESULTS = HERE / "peers_results.md"
CONTENDERS = ("liftlag", "bare", "pandas", "polars")
HEADER = (
    "# liftlag against its peers\n\n"
    "Rows appended by `bench/compare_engines.py` (see bench/README.md). Each contender is its own process,\n"
    "run one after the other on the same export; wall s / CPU s (user + system) / peak RSS MB from\n"
    "`/usr/bin/time -v`; ratios are peer / liftlag (wall, peak RSS). Load is the 1-minute load average\n"
    "before the run (and before each contender); on a shared 2-core machine wall times are upper bounds.\n\n"
    "| date (UTC) | export | load before | commit | liftlag build (DuckDB) | bare DuckDB | pandas peer | polars peer "
    "| pandas / liftlag (wall, RSS) | polars / liftlag (wall, RSS) | liftlag / bare (wall) | outputs agree | notes |\n"
    "|---|---|---|---|---|---|---|---|---|---|---|---|---|\n"
)


def load_average() -> float:
    return float(Path("/proc/loadavg").read_text().split()[0])


def _tree_usage(pid: int) -> tuple[int, float]:
    """(resident kB, CPU seconds) of a process and its descendants, from /proc."""
    rss, cpu, stack = 0, 0.0, [pid]
    tick = os.sysconf("SC_CLK_TCK")
    while stack:
        p = stack.pop()
        try:
            status = Path(f"/proc/{p}/status").read_text()
            rss += int(re.search(r"VmRSS:\s+(\d+)", status).group(1)) if "VmRSS" in status else 0
            fields = Path(f"/proc/{p}/stat").read_text().rsplit(")", 1)[1].split()
            cpu += (int(fields[11]) + int(fields[12])) / tick  # utime, stime
            for task in Path(f"/proc/{p}/task").iterdir():
                children = (task / "children").read_text().split()
                stack += [int(c) for c in children]
        except (FileNotFoundError, ProcessLookupError, AttributeError, IndexError):
            continue
    return rss, cpu


def timed(cmd: list[str], log: Path, rss_cap_kb: int | None = None) -> dict:
    """Run ``cmd`` under /usr/bin/time -v; stop it (and say so) if its memory passes the cap."""
    load = load_average()
    capped = False
    started = time.perf_counter()
    seen = (0, 0.0)
    with log.open("w") as fh:
        proc = subprocess.Popen(["/usr/bin/time", "-v", *cmd], stdout=fh, stderr=subprocess.STDOUT,
                                start_new_session=True)
        while proc.poll() is None:
            time.sleep(0.5)
            if rss_cap_kb:
                usage = _tree_usage(proc.pid)
                seen = (max(seen[0], usage[0]), max(seen[1], usage[1]))
                if usage[0] > rss_cap_kb:
                    capped = True
                    os.killpg(proc.pid, signal.SIGKILL)
                    proc.wait()
    text = log.read_text()
    result = {"exit": proc.returncode, "load_before": load, "log": str(log), "capped": capped}
    if capped:  # GNU time was stopped too: what was seen from /proc up to the stop
        result.update(seconds=round(time.perf_counter() - started, 2), cpu_seconds=round(seen[1], 2),
                      peak_rss_mb=round(seen[0] / 1024))
    wall = re.search(r"Elapsed \(wall clock\) time \(h:mm:ss or m:ss\): (\S+)", text)
    if wall:
        parts = [float(p) for p in wall.group(1).split(":")]
        result["seconds"] = round(sum(p * 60 ** i for i, p in enumerate(reversed(parts))), 2)
        user = float(re.search(r"User time \(seconds\): (\S+)", text).group(1))
        system = float(re.search(r"System time \(seconds\): (\S+)", text).group(1))
        result["cpu_seconds"] = round(user + system, 2)
        result["peak_rss_mb"] = round(int(re.search(r"Maximum resident set size \(kbytes\): (\d+)", text).group(1)) / 1024)
        status = re.search(r"Exit status: (\d+)", text)
        result["exit"] = int(status.group(1)) if status else result["exit"]
    if capped:
        result["exit"] = f"stopped at the RSS cap of {rss_cap_kb / 1024 ** 2:g} GB"
    return result


def config_copy(export: Path, workspace: Path, kind: str, threads: int) -> Path:
    """The export's liftlag.toml with absolute table paths, the given workspace and engine."""
    text = (export / "liftlag.toml").read_text()
    text = re.sub(r'(?m)^path = "\.liftlag"$', f'path = "{workspace.as_posix()}"', text)
    engine = re.search(r"(?ms)^\[engine\]\n(.*?)(?=^\[|\Z)", text)
    memory = re.search(r'(?m)^memory_limit = .*$', engine.group(1)) if engine else None
    text = re.sub(r"(?ms)^\[engine\].*?(?=^\[|\Z)", "", text)
    text = text.replace('path = "', f'path = "{export.as_posix()}/', 3)  # the three tables
    text += f'\n[engine]\nthreads = {threads}\n' + (memory.group(0) + "\n" if memory else "")
    if kind == "spark":
        text += f'kind = "spark"\nmaster = "local[{threads}]"\n'
    path = workspace.parent / f"liftlag_{kind}.toml"
    path.write_text(text)
    return path


def panel_counts(workspace: Path) -> dict:
    con = duckdb.connect(str(workspace / "panels.duckdb"), read_only=True)
    try:
        return {
            "orders": con.execute("SELECT count(*) FROM orders").fetchall()[0][0],
            "customer_weeks": con.execute("SELECT count(*) FROM customer_periods WHERE orders > 0 OR net_amount <> 0").fetchall()[0][0],
            "gaps": con.execute("SELECT count(*) FROM purchase_gaps").fetchall()[0][0],
        }
    finally:
        con.close()


def liftlag_steps(log: Path) -> str:
    """'check 3.1 s of 10.8 s in the build' from the build's own output (its 'panels (N s)'
    title is the whole build, check included)."""
    text = log.read_text()
    steps = dict(re.findall(r"^(check|panels) \(([\d.]+) s\)", text, flags=re.M))
    panels = re.findall(r"^\S\s(\w+)\s+\S\s+[\d,]+\s\S\s+([\d.]+)\s\S$", text, flags=re.M)
    each = f" ({', '.join(f'{name} {s}' for name, s in panels)})" if panels else ""
    if "check" in steps and "panels" in steps:
        return f"check {steps['check']} s of {steps['panels']} s in the build{each}"
    return ""


def commit() -> str:
    head = subprocess.run(["git", "-C", str(ROOT), "rev-parse", "--short", "HEAD"], capture_output=True, text=True).stdout.strip()
    dirty = subprocess.run(["git", "-C", str(ROOT), "status", "--porcelain", "--", "toolkit", "sql",
                            "bench/peers", "bench/compare_engines.py"],
                           capture_output=True, text=True).stdout.strip()
    return head + ("+uncommitted" if dirty else "")


def fmt(r: dict | None) -> str:
    if r is None:
        return "not run"
    if "seconds" not in r or r["exit"] != 0:
        extra = f" after {r['seconds']} s / {r['cpu_seconds']} cpu s / {r['peak_rss_mb']} MB" if "seconds" in r else ""
        return f"failed ({r['exit']}){extra}"
    return f"{r['seconds']} s / {r['cpu_seconds']} cpu s / {r['peak_rss_mb']} MB"


def ratio(a: dict | None, b: dict | None, key: str) -> float | None:
    if not a or not b or a.get("exit") != 0 or b.get("exit") != 0 or not b.get(key):
        return None
    return a[key] / b[key]


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("export", type=Path)
    ap.add_argument("--spark", action="store_true")
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--only", default=",".join(CONTENDERS), help="comma-separated subset of " + ",".join(CONTENDERS))
    ap.add_argument("--rss-cap-gb", type=float, default=16.0)
    ap.add_argument("--label", default="")
    ap.add_argument("--no-record", action="store_true", help="do not append to bench/peers_results.md")
    args = ap.parse_args()
    export = args.export.resolve()
    only = set(args.only.split(","))
    liftlag = str(Path(sys.executable).with_name("liftlag"))
    python = sys.executable
    cap = int(args.rss_cap_gb * 1024 * 1024)
    started_at = dt.datetime.now(dt.timezone.utc)
    load = load_average()
    code = commit()
    lines = json.loads((export / "generation.json").read_text())["lines"] if (export / "generation.json").exists() else None
    results: dict[str, dict] = {}
    agree: dict[str, object] = {}
    compared: dict[str, dict] = {}  # peer -> panel -> agreement.compare_panel result
    notes = []
    with tempfile.TemporaryDirectory(prefix="liftlag_compare_") as tmp:
        tmp = Path(tmp)
        # The peers run from a copy taken now, so edits to the tree during a long run cannot
        # change them half-way (the commit recorded is the one they ran).
        peers = Path(shutil.copytree(HERE / "peers", tmp / "peers", ignore=shutil.ignore_patterns("__pycache__")))
        ws = {}
        kinds = (["duckdb"] if "liftlag" in only else []) + (["spark"] if args.spark else [])
        for kind in kinds:
            ws[kind] = tmp / f"ws_{kind}"
            cfg = config_copy(export, ws[kind], kind, args.threads)
            name = f"liftlag build ({kind})"
            results[name] = timed([liftlag, "build", "-c", str(cfg)], tmp / f"{kind}.log")
            if results[name]["exit"] != 0:
                print((tmp / f"{kind}.log").read_text()[-2000:])
            elif kind == "duckdb":
                notes.append("liftlag " + liftlag_steps(tmp / f"{kind}.log"))
        counts = {}
        if "bare" in only:
            results["bare DuckDB job"] = timed([python, str(peers / "bare_duckdb.py"), str(export),
                                                str(tmp / "bare.duckdb"), "--threads", str(args.threads)], tmp / "bare.log")
            line = [l for l in (tmp / "bare.log").read_text().splitlines() if l.startswith("{")]
            counts["bare"] = json.loads(line[0])["rows"] if line else {}
        for kind in kinds:
            if results[f"liftlag build ({kind})"]["exit"] == 0:
                if kind == "duckdb":
                    counts[kind] = panel_counts(ws[kind])
                elif (ws[kind] / "panels.duckdb").exists():
                    counts[kind] = panel_counts(ws[kind])
        if "bare" in counts:
            agree["bare"] = all(v == counts["bare"] for k, v in counts.items() if k != "bare")
        for peer in ("pandas", "polars"):
            if peer not in only:
                continue
            out = tmp / f"{peer}_out"
            name = f"{peer} peer"
            results[name] = timed([python, str(peers / f"{peer}_peer.py"), str(export), str(out)],
                                  tmp / f"{peer}.log", rss_cap_kb=cap)
            if results[name]["exit"] != 0:
                print(f"--- {name} failed: " + (tmp / f"{peer}.log").read_text()[-1500:])
                agree[peer] = None
            elif "duckdb" in ws and results["liftlag build (duckdb)"]["exit"] == 0:
                found = agreement.compare(ws["duckdb"], out)
                agree[peer] = found["agree"]
                compared[peer] = found["panels"]
                if found.get("agree_but_zero_net_orders"):
                    agree[peer] = f"yes but {found['agree_but_zero_net_orders']} zero-net orders"
                    flips = found["panels"]["orders"]["zero_net_flips"]
                    notes.append(f"{peer}: is_return differs on zero-net orders {json.dumps(flips[:3])}")
                if not found["agree"]:
                    print(f"--- {name} disagrees:", json.dumps(found))
                seconds = json.loads((out / "check.json").read_text())["seconds"]
                notes.append(f"{peer} " + ", ".join(f"{k} {v} s" for k, v in seconds.items() if k != "total"))

    print(f"export {export.name} ({lines} lines), load average before the run {load:.2f}, {os.cpu_count()} cores, "
          f"commit {code}")
    base = results.get("liftlag build (duckdb)")
    print(f"{'contender':26s} {'wall s':>8s} {'CPU s':>8s} {'peak MB':>8s} {'wall/liftlag':>13s} {'RSS/liftlag':>12s} "
          f"{'load':>5s}  exit")
    for name, r in results.items():
        rw, rr = ratio(r, base, "seconds"), ratio(r, base, "peak_rss_mb")
        print(f"{name:26s} {r.get('seconds', float('nan')):8.2f} {r.get('cpu_seconds', float('nan')):8.2f} "
              f"{r.get('peak_rss_mb', 0):8d} {'' if rw is None else f'x{rw:.2f}':>13s} {'' if rr is None else f'x{rr:.2f}':>12s} "
              f"{r['load_before']:5.2f}  {r['exit']}")
    print("outputs agree:", json.dumps(agree), "| row counts (liftlag vs bare):", json.dumps(counts))
    for peer, panels in compared.items():
        print(f"{peer} panels: " + ", ".join(
            f"{name} {'agrees' if p['agree'] else ('not built' if p['agree'] is None else 'DIFFERS')}"
            for name, p in panels.items()))
    if notes:
        print("steps:", "; ".join(notes))

    def pair(peer: str) -> str:
        r = results.get(f"{peer} peer")
        w, m = ratio(r, base, "seconds"), ratio(r, base, "peak_rss_mb")
        return "" if w is None else f"x{w:.2f}, x{m:.2f}"

    bare_ratio = ratio(base, results.get("bare DuckDB job"), "seconds")
    agreed = ", ".join(f"{k}: {v if isinstance(v, str) else ('yes' if v else ('no' if v is False else 'n/a'))}"
                       for k, v in agree.items())
    loads = ", ".join(f"{k.split(' ')[0]} {r['load_before']:.2f}" for k, r in results.items())
    row = (f"| {started_at:%Y-%m-%d %H:%M} | {export.name} ({lines} lines) | {load:.2f} | {code} "
           f"| {fmt(base)} | {fmt(results.get('bare DuckDB job'))} | {fmt(results.get('pandas peer'))} "
           f"| {fmt(results.get('polars peer'))} | {pair('pandas')} | {pair('polars')} "
           f"| {'' if bare_ratio is None else f'x{bare_ratio:.2f}'} | {agreed} "
           f"| threads {args.threads}; load before each: {loads}; {'; '.join(notes)}"
           f"{'; spark: ' + fmt(results.get('liftlag build (spark)')) if args.spark else ''}"
           f"{'; ' + args.label if args.label else ''} |\n")
    if not args.no_record:
        if not RESULTS.exists():
            RESULTS.write_text(HEADER)
        with RESULTS.open("a") as fh:
            fh.write(row)
    failed = any(r["exit"] != 0 for r in results.values())
    return 1 if failed or any(v is False for v in agree.values()) else 0  # zero-net orders: noted, not failed


if __name__ == "__main__":
    sys.exit(main())
