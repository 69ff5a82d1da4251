"""Copy a generated export (bench/generate_export.py) into one partitioned by order month.

The order lines are rewritten by DuckDB into ``transactions/month=YYYY-MM/`` folders (hive layout,
sorted by time within each month); the small tables are copied; the config gains
``date_partition = "month"``. For the partition-pruning and ``build --since`` benchmarks
(bench/run_since.sh).

    python bench/partition_export.py /work/benchdata/lines_10m /work/benchdata/months_10m
"""

from __future__ import annotations

import argparse
import shutil
import sys
import time
from pathlib import Path

import duckdb


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("source", type=Path, help="an export written by bench/generate_export.py")
    parser.add_argument("out", type=Path, help="the partitioned copy (created; must not exist)")
    args = parser.parse_args(argv)
    if args.out.exists():
        parser.error(f"{args.out} exists; remove it first")
    started = time.perf_counter()
    args.out.mkdir(parents=True)
    for name in ("promotions.csv", "assignments.csv"):
        if (args.source / name).exists():
            shutil.copy2(args.source / name, args.out / name)
    con = duckdb.connect()
    con.execute("SET preserve_insertion_order = false")
    con.execute(
        f"COPY (SELECT *, strftime(ordered_at, '%Y-%m') AS month FROM read_parquet('{args.source}/transactions/*.parquet') "
        f"ORDER BY ordered_at) TO '{args.out}/transactions' (FORMAT parquet, PARTITION_BY (month))")
    lines = con.execute(f"SELECT count(*) FROM read_parquet('{args.out}/transactions/**/*.parquet')").fetchone()[0]
    con.close()
    config = (args.source / "liftlag.toml").read_text()
    config = config.replace('path = "transactions/*.parquet"',
                            'path = "transactions/**/*.parquet"\ndate_partition = "month"')
    if "date_partition" not in config:
        print("the source config does not read transactions/*.parquet; edit the copy's config by hand", file=sys.stderr)
        return 1
    (args.out / "liftlag.toml").write_text(config)
    months = sorted(p.name for p in (args.out / "transactions").iterdir())
    print(f"{lines:,} lines in {len(months)} month folders ({months[0]} to {months[-1]}) in "
          f"{time.perf_counter() - started:.1f} s: {args.out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
