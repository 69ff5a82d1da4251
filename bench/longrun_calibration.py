"""How often the long-run models' 95% intervals raise a false alarm, on simulated data with no effect.

Not part of the test suite (it takes minutes). Two checks, each over many seeds:

* broadcast: the counterfactual (toolkit.longrun.counterfactual.BroadcastCounterfactual, shipped
  settings) on the simulated daily series of tests/longrun/test_counterfactual.py (a drifting
  level, a weekday pattern, noise, no sale): share of runs whose interval excludes zero, per window;
* cohorts: two cohorts drawn from one BG/NBD process (tests/longrun/test_bgnbd.simulate_bgnbd):
  share of runs whose interval of the contrast of expected orders next quarter excludes zero.

A well-calibrated 95% interval excludes zero in about 5% of runs.

    .venv/bin/python bench/longrun_calibration.py --runs 60
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tests.longrun.test_cohorts import _simulated_cohort  # noqa: E402
from tests.longrun.test_counterfactual import simulated_days  # noqa: E402
from toolkit.longrun.cohorts import CohortValue  # noqa: E402
from toolkit.longrun.counterfactual import WINDOWS, BroadcastCounterfactual  # noqa: E402


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--runs", type=int, default=60)
    args = parser.parse_args()
    warnings.simplefilter("ignore")
    started = time.perf_counter()
    misses = {w: 0 for w in WINDOWS}
    for seed in range(args.runs):
        series, start = simulated_days(seed=1000 + seed)
        fit = BroadcastCounterfactual().fit(series, starts_on=start, ends_on=start + pd.Timedelta(days=6), after_days=14)
        for row in fit.effects_.itertuples():
            misses[row.window] += not (row.ci_low <= 0 <= row.ci_high)
    print(f"broadcast, {args.runs} series without a sale: share of 95% intervals excluding zero "
          + ", ".join(f"{w} {misses[w] / args.runs:.2f}" for w in WINDOWS)
          + f" ({time.perf_counter() - started:.0f} s)")
    started = time.perf_counter()
    params = {"r": 0.8, "alpha": 6.0, "a": 1.2, "b": 3.0}
    excluded = 0
    for seed in range(args.runs):
        a = CohortValue(rounds=200, seed=seed).fit(_simulated_cohort(600, 2000 + 2 * seed, **params))
        b = CohortValue(rounds=200, seed=seed + 1).fit(_simulated_cohort(1200, 2001 + 2 * seed, **params))
        difference = a.draws_["expected_orders_next_quarter"] - b.draws_["expected_orders_next_quarter"]
        low, high = np.quantile(difference, [0.025, 0.975])
        excluded += not (low <= 0 <= high)
    print(f"cohorts, {args.runs} pairs from one process: share of 95% intervals excluding zero "
          f"{excluded / args.runs:.2f} ({time.perf_counter() - started:.0f} s)")


if __name__ == "__main__":
    main()
