"""``liftlag build --since`` against a full build, on an export partitioned by month.

    flock /work/benchdata/bench.lock .venv/bin/python bench/run_since.py /work/benchdata/months_10m 2026-06-01

1. The month folders from SINCE on are moved aside and the rest is built cold (``check`` is not
   run first, so the build validates every line): the last build before the new data arrived.
2. The folders are put back and ``liftlag build --since SINCE`` runs: it checks only the new
   folders and keeps the earlier files' verdicts.
3. ``liftlag build --force`` of the same export in a second workspace: the full build it replaces.
4. Both workspaces' panels and checked tables are compared (floats to 9 decimals and 12 significant digits).

Each build runs under ``/usr/bin/time -v`` (wall, CPU, peak RSS). A row goes to
``bench/since_results.md``. The export is left as it was found.
"""

from __future__ import annotations

import argparse
import datetime as dt
import os
import re
import shutil
import subprocess
import sys
import time
from pathlib import Path

import duckdb

HERE = Path(__file__).resolve().parent
RESULTS = HERE / "since_results.md"


def _liftlag() -> str:
    local = HERE.parent / ".venv" / "bin" / "liftlag"
    return os.environ.get("LIFTLAG") or (str(local) if local.exists() else "liftlag")


def timed(args: list[str]) -> dict:
    """Run under GNU time; wall and CPU seconds, peak RSS in MB, and the output's last lines."""
    started = time.perf_counter()
    proc = subprocess.run(["/usr/bin/time", "-v", *args], capture_output=True, text=True)
    wall = time.perf_counter() - started
    err = proc.stderr

    def field(name: str) -> float:
        m = re.search(rf"{re.escape(name)}: ([0-9.]+)", err)
        return float(m.group(1)) if m else float("nan")

    if proc.returncode != 0:
        print(proc.stdout[-3000:], err[-3000:], sep="\n", file=sys.stderr)
        raise SystemExit(f"failed: {' '.join(args)}")
    return {"wall": wall, "cpu": field("User time (seconds)") + field("System time (seconds)"),
            "rss_mb": field("Maximum resident set size (kbytes)") / 1024, "out": proc.stdout + err}


def append_row(path: Path, intro: str, columns: list[str], row: str) -> None:
    """Append a table row to a results file, writing its title and header first when it is new."""
    if not path.exists():
        path.write_text(f"{intro}\n\n| {' | '.join(columns)} |\n|{'---|' * len(columns)}\n")
    with path.open("a") as fh:
        fh.write(row + "\n")


def tables(panels: Path) -> dict:
    con = duckdb.connect(str(panels), read_only=True)
    try:
        out = {}
        for schema, table in con.execute("SELECT schema_name, table_name FROM duckdb_tables() "
                                         "WHERE schema_name IN ('main', 'checked') ORDER BY 1, 2").fetchall():
            cols = [r[0] for r in con.execute(f'DESCRIBE {schema}."{table}"').fetchall()]
            # floats to 9 decimals and 12 significant digits: a sum in another order differs in the last bits
            exprs = ", ".join(f"printf('%.12g', round(\"{c}\", 9) + 0.0)" if t in ("DOUBLE", "FLOAT") else f'"{c}"'
                              for c, t in con.execute(f'SELECT column_name, data_type FROM duckdb_columns() '
                                                      f"WHERE schema_name = '{schema}' AND table_name = '{table}'").fetchall())
            out[f"{schema}.{table}"] = con.execute(
                f'SELECT count(*), sum(hash({exprs})) FROM {schema}."{table}"').fetchone() if cols else None
        return out
    finally:
        con.close()


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("export", type=Path, help="an export with transactions/month=YYYY-MM/ folders and date_partition")
    parser.add_argument("since", help="first day of the new data, YYYY-MM-DD (a month's first day)")
    args = parser.parse_args(argv)
    since = dt.date.fromisoformat(args.since)
    config = args.export / "liftlag.toml"
    tx = args.export / "transactions"
    new = sorted(p for p in tx.iterdir() if p.name.startswith("month=") and p.name[6:] >= since.strftime("%Y-%m"))
    if not new:
        parser.error(f"no month folder from {since} on in {tx}")
    aside = args.export / "held_aside"
    ws = args.export / ".liftlag"
    full_cfg = args.export / "liftlag_full.toml"
    full_cfg.write_text(config.read_text().replace('path = ".liftlag"', 'path = ".liftlag_full"'))
    shutil.rmtree(ws, ignore_errors=True)
    shutil.rmtree(args.export / ".liftlag_full", ignore_errors=True)
    load = os.getloadavg()[0]
    aside.mkdir(exist_ok=True)
    for p in new:
        shutil.move(p, aside / p.name)
    try:
        before = timed([_liftlag(), "build", "-c", str(config)])
    finally:
        for p in sorted(aside.iterdir()):
            shutil.move(p, tx / p.name)
        aside.rmdir()
    since_run = timed([_liftlag(), "build", "-c", str(config), "--since", str(since)])
    note = next((ln for ln in since_run["out"].splitlines() if "--since" in ln), "")
    full = timed([_liftlag(), "build", "-c", str(full_cfg), "--force"])
    a, b = tables(ws / "panels.duckdb"), tables(args.export / ".liftlag_full" / "panels.duckdb")
    differ = sorted(k for k in a.keys() | b.keys() if a.get(k) != b.get(k))
    counter = duckdb.connect()
    lines = counter.execute(f"SELECT count(*) FROM read_parquet('{tx}/**/*.parquet')").fetchone()[0]
    new_lines = counter.execute("SELECT count(*) FROM read_parquet(?)", [[str(p / "*.parquet") for p in new]]).fetchone()[0]
    counter.close()
    commit = subprocess.run(["git", "-C", str(HERE.parent), "rev-parse", "--short", "HEAD"],
                            capture_output=True, text=True).stdout.strip()
    row = (f"| {dt.datetime.now(dt.timezone.utc):%Y-%m-%d %H:%M} | {lines:,} | {since} | {new_lines:,} | "
           f"{before['wall']:.1f} / {before['cpu']:.1f} / {before['rss_mb']:,.0f} | "
           f"{since_run['wall']:.1f} / {since_run['cpu']:.1f} / {since_run['rss_mb']:,.0f} | "
           f"{full['wall']:.1f} / {full['cpu']:.1f} / {full['rss_mb']:,.0f} | "
           f"{'same' if not differ else 'DIFFER: ' + ', '.join(differ)} | load {load:.2f}, {commit} |")
    append_row(RESULTS, "# build --since against a full build\n\n`bench/run_since.py EXPORT SINCE` (see its "
               "docstring). Each cell: wall s / CPU s / peak RSS MB.",
               ["date (UTC)", "order lines", "since", "new lines", "build before the new months", "build --since",
                "build --force (full)", "tables", "notes"], row)
    print(note)
    print(row)
    return 0 if not differ else 1


if __name__ == "__main__":
    sys.exit(main())
