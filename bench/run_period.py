"""A ``[period]`` with and without partition pruning, on an export partitioned by month.

    flock /work/benchdata/bench.lock .venv/bin/python bench/run_period.py /work/benchdata/months_10m 2026-04-01

Writes two configs beside the export's, both with ``[period] first_day = FIRST_DAY``: one keeps
``date_partition = "month"`` (files of earlier months are skipped unopened), one drops it (every
file is read and its lines filtered). Runs a cold ``liftlag check`` of each under
``/usr/bin/time -v`` and appends a row to ``bench/period_results.md``: wall s / CPU s / peak RSS MB,
the files read and the lines read (which must be equal).
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from run_since import _liftlag, append_row, timed  # noqa: E402

HERE = Path(__file__).resolve().parent
RESULTS = HERE / "period_results.md"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("export", type=Path)
    parser.add_argument("first_day", help="YYYY-MM-DD")
    args = parser.parse_args(argv)
    dt.date.fromisoformat(args.first_day)
    base = (args.export / "liftlag.toml").read_text()
    if 'date_partition = "month"' not in base:
        parser.error("the export's config has no date_partition = \"month\" (bench/partition_export.py writes one)")
    load = os.getloadavg()[0]
    out = {}
    for kind in ("pruned", "filtered"):
        text = base if kind == "pruned" else base.replace('date_partition = "month"\n', "")
        text = text.replace('path = ".liftlag"', f'path = ".liftlag_{kind}"')
        text += f"\n[period]\nfirst_day = {args.first_day}\n"
        config = args.export / f"liftlag_{kind}.toml"
        config.write_text(text)
        shutil.rmtree(args.export / f".liftlag_{kind}", ignore_errors=True)
        run = timed([_liftlag(), "check", "-c", str(config)])
        state = json.loads((args.export / f".liftlag_{kind}" / "state.json").read_text())
        row = next(r for r in state["check"]["summary"] if r["table"] == "transactions")
        steps = state["check"]["steps"]
        read = next((s for s in steps if s["step"] == "read transactions"), {})
        out[kind] = {**run, "lines": row["rows_read"], "read_seconds": read.get("seconds")}
    files_all = len(list((args.export / "transactions").glob("**/*.parquet")))
    kept = len([p for p in (args.export / "transactions").glob("**/*.parquet")
                if re.search(r"month=(\d{4}-\d{2})", str(p)).group(1) >= args.first_day[:7]])
    commit = subprocess.run(["git", "-C", str(HERE.parent), "rev-parse", "--short", "HEAD"],
                            capture_output=True, text=True).stdout.strip()
    p, f = out["pruned"], out["filtered"]
    row = (f"| {dt.datetime.now(dt.timezone.utc):%Y-%m-%d %H:%M} | {args.export.name} | {args.first_day} | "
           f"{kept} of {files_all} | {p['wall']:.1f} / {p['cpu']:.1f} / {p['rss_mb']:,.0f} | "
           f"{files_all} of {files_all} | {f['wall']:.1f} / {f['cpu']:.1f} / {f['rss_mb']:,.0f} | "
           f"{p['lines']:,} / {f['lines']:,} | load {load:.2f}, {commit} |")
    append_row(RESULTS, "# [period] with and without partition pruning\n\n`bench/run_period.py EXPORT FIRST_DAY` "
               "(see its docstring): a cold `liftlag check`. Cells: wall s / CPU s / peak RSS MB.",
               ["date (UTC)", "export", "first_day", "files read, pruned", "check, pruned", "files read, not pruned",
                "check, not pruned", "lines read (pruned / not)", "notes"], row)
    print(row)
    return 0 if p["lines"] == f["lines"] else 1


if __name__ == "__main__":
    sys.exit(main())
