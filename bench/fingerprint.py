"""How long the staleness check takes: ``toolkit.freshness.current`` on an export.

Every analysis computes the inputs' fingerprint (twice: before building, and when it opens the
panels), so its cost is paid on every run. Prints the median of five runs with the default rule
(whole-content digests of files up to 16 MiB within a 64 MiB budget per table; Parquet footers, or the
first and last MiB, beyond) and with every file read whole, for comparison.

Usage::

    python bench/fingerprint.py /work/benchdata/lines_10m
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

from toolkit import config, freshness


def median_seconds(settings, rounds: int = 5) -> float:
    times = []
    for _ in range(rounds):
        started = time.perf_counter()
        freshness.current(settings)
        times.append(time.perf_counter() - started)
    return statistics.median(times)


def main(export: str) -> None:
    settings = config.load(Path(export) / "liftlag.toml")
    files = [Path(f["path"]) for fs in freshness.current(settings)["inputs"].values() for f in fs]
    total = sum(f.stat().st_size for f in files)
    default = median_seconds(settings)
    freshness.SMALL_FILE_BYTES = freshness.FULL_HASH_BUDGET_BYTES = 2**62
    whole = median_seconds(settings)
    print(f"| {export} | {len(files)} | {total / 2**20:,.1f} | {default:.3f} | {whole:.3f} |")


if __name__ == "__main__":
    main(sys.argv[1])
