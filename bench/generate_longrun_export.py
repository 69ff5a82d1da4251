"""Generate a demo-scenario export for the long-run benchmark: CUSTOMERS customers over 8 quarters.

The demo scenario's ``learning`` variant (``toolkit.demo``) extended to the end of 2026, so
the history has 8 whole quarters (2025Q1-2026Q4) and 4 year-over-year pairs.

Usage::

    python bench/generate_longrun_export.py --customers 1000000 --out /tmp/longrun_bench/export
"""

from __future__ import annotations

import argparse
import time
from datetime import date

from toolkit.demo import Scenario, generate


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--customers", type=int, default=1_000_000)
    parser.add_argument("--out", required=True)
    parser.add_argument("--seed", type=int, default=7)
    args = parser.parse_args()
    scenario = Scenario.for_effects("learning", ends_on=date(2026, 12, 31), new_until=date(2026, 11, 30))
    started = time.perf_counter()
    config = generate(args.out, seed=args.seed, customers=args.customers, scenario=scenario)
    print(f"generated {args.customers:,} customers in {time.perf_counter() - started:.0f} s: {config}")


if __name__ == "__main__":
    main()
