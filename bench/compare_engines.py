"""Run liftlag's build and its peers on one generated export, in one run, and compare.

Usage::

    python bench/compare_engines.py /work/benchdata/lines_1m [--spark] [--threads 2]

Each contender runs as its own process under ``/usr/bin/time -v`` (wall seconds and peak RSS):

- ``liftlag build`` on DuckDB, cold (a fresh workspace);
- ``liftlag build`` on Spark local mode (``--spark``; its log shows the session start-up apart);
- the bare DuckDB job of ``bench/peers/bare_duckdb.py`` (orders, customer-week and gap tables
  only, no checks).

The outputs are checked to agree where they overlap (orders; customer-weeks with an order;
gaps), then one line per contender and the ratios to the bare job are printed. Not built yet:
the plain-pandas and polars peers of the whole check + build.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import subprocess
import sys
import tempfile
from pathlib import Path

import duckdb

HERE = Path(__file__).resolve().parent


def timed(cmd: list[str], log: Path) -> dict:
    with log.open("w") as fh:
        proc = subprocess.run(["/usr/bin/time", "-v", *cmd], stdout=fh, stderr=subprocess.STDOUT)
    text = log.read_text()
    wall = re.search(r"Elapsed \(wall clock\) time \(h:mm:ss or m:ss\): (\S+)", text).group(1)
    parts = [float(p) for p in wall.split(":")]
    seconds = sum(p * 60 ** i for i, p in enumerate(reversed(parts)))
    rss = int(re.search(r"Maximum resident set size \(kbytes\): (\d+)", text).group(1)) / 1024
    return {"exit": proc.returncode, "seconds": round(seconds, 2), "peak_rss_mb": round(rss), "log": str(log)}


def config_copy(export: Path, workspace: Path, kind: str, threads: int) -> Path:
    text = (export / "liftlag.toml").read_text()
    text = re.sub(r'(?m)^path = "\.liftlag"$', f'path = "{workspace.as_posix()}"', text)
    text = re.sub(r"(?ms)^\[engine\].*", "", text)
    text = text.replace('path = "', f'path = "{export.as_posix()}/', 3)  # the three tables
    text += f'\n[engine]\nthreads = {threads}\n'
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


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("export", type=Path)
    ap.add_argument("--spark", action="store_true")
    ap.add_argument("--threads", type=int, default=2)
    args = ap.parse_args()
    export = args.export.resolve()
    liftlag = str(Path(sys.executable).with_name("liftlag"))
    load = os.getloadavg()[0]
    results, outputs = {}, {}
    with tempfile.TemporaryDirectory(prefix="liftlag_compare_") as tmp:
        tmp = Path(tmp)
        kinds = ["duckdb"] + (["spark"] if args.spark else [])
        for kind in kinds:
            ws = tmp / f"ws_{kind}"
            cfg = config_copy(export, ws, kind, args.threads)
            results[f"liftlag build ({kind})"] = timed([liftlag, "build", "-c", str(cfg)], tmp / f"{kind}.log")
            if results[f"liftlag build ({kind})"]["exit"] == 0:
                outputs[kind] = panel_counts(ws)
            else:
                print((tmp / f"{kind}.log").read_text()[-2000:])
        bare = timed([sys.executable, str(HERE / "peers" / "bare_duckdb.py"), str(export), str(tmp / "bare.duckdb"),
                      "--threads", str(args.threads)], tmp / "bare.log")
        results["bare DuckDB job"] = bare
        line = [l for l in (tmp / "bare.log").read_text().splitlines() if l.startswith("{")]
        outputs["bare"] = json.loads(line[0])["rows"] if line else {}
    print(f"export {export.name}, load average before the run {load:.2f}, {os.cpu_count()} cores")
    base = results["bare DuckDB job"]["seconds"] or 1
    for name, r in results.items():
        print(f"{name:28s} {r['seconds']:8.2f} s  {r['peak_rss_mb']:6d} MB  x{r['seconds'] / base:5.1f}  exit {r['exit']}")
    agree = all(outputs.get(k) == outputs["bare"] for k in outputs if k != "bare")
    print("rows:", json.dumps(outputs), "agree" if agree else "DISAGREE")
    return 0 if agree else 1


if __name__ == "__main__":
    sys.exit(main())
