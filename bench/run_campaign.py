"""Campaign benchmark: one campaign readout (every model, cross-fitted) on a large synthetic panel.

Times ``toolkit.effects.api.analyse_panel`` and ``write_campaign`` for one targeted campaign with
``--customers`` assigned customers (default 1,000,000) and reports the peak resident set of the
process that ran them. The script starts itself again as a child process under ``/usr/bin/time -v``
so the peak RSS is that process's alone; the child builds the panel, runs the analysis, writes
the readout to a temporary folder and prints its figures as one JSON line.

    /work/venv/bin/python bench/run_campaign.py [--customers N] [--seed S]

The synthetic ``campaign_windows`` panel has the panel's columns (``toolkit.contract.PANELS``),
20 % of the customers in the holdout, skewed purchase histories (gamma-distributed rates,
Poisson order counts, lognormal basket amounts) and an uplift in ``during_buyer`` that grows with
past deal share and falls with recency, so the uplift models have something to find. It is for
speed and memory only; the planted effect is not checked here (the demo data does that).
"""

from __future__ import annotations

import argparse
import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

PROMOTION_ID = "BENCH01"
STARTS_ON = pd.Timestamp("2026-03-02")
DAYS = 14          # campaign window length
AFTER_DAYS = 28    # window after it (settings.windows.after_days below)
HOLDOUT_SHARE = 0.2


def make_panel(customers: int, seed: int) -> pd.DataFrame:
    """A seeded synthetic ``campaign_windows`` panel for one campaign (vectorised numpy)."""
    from toolkit.contract import PANELS

    rng = np.random.default_rng(seed)
    n = customers
    treated = rng.random(n) >= HOLDOUT_SHARE
    # purchase rate per customer (orders per 90 days), skewed
    rate = rng.gamma(shape=0.8, scale=2.5, size=n)
    frequency = rng.poisson(rate * 2.0)                               # pre-period of 180 days
    basket = np.exp(rng.normal(3.6, 0.6, size=n))                    # typical order value (~40)
    monetary = np.where(frequency > 0, frequency * basket * rng.lognormal(0, 0.2, n), 0.0).round(2)
    has_orders = frequency > 0
    recency = np.where(has_orders, np.minimum(rng.exponential(180 / (frequency + 1)), 179).astype(int) + 1, -1)
    tenure = rng.integers(30, 1500, size=n)
    new = rng.random(n) < 0.05
    deal_propensity = rng.beta(1.5, 4.0, size=n)
    deal_orders = rng.binomial(frequency, deal_propensity)
    past_deal_share = np.where(has_orders, deal_orders / np.maximum(frequency, 1), np.nan)
    past_coupons = rng.poisson(1.2 * deal_propensity + 0.3)
    window_rate = rate * DAYS / 90.0
    pre_orders = rng.poisson(window_rate)
    pre_net = (pre_orders * basket * rng.lognormal(0, 0.25, n)).round(2)
    margin = 0.38

    # baseline chance of buying in the window, and an uplift driven by the features:
    # deal-seekers and recent buyers respond, lapsed customers hardly at all.
    base_p = 1.0 - np.exp(-window_rate)
    share = np.nan_to_num(past_deal_share, nan=0.0)
    recent = np.where(has_orders, np.exp(-np.maximum(recency, 0) / 60.0), 0.0)
    uplift = np.clip(0.01 + 0.12 * share + 0.05 * recent - 0.02 * (past_coupons > 3), 0.0, 0.3)
    p_during = np.clip(base_p + treated * uplift, 0.0, 0.99)
    during_buyer = rng.random(n) < p_during
    during_orders = np.where(during_buyer, 1 + rng.poisson(window_rate), 0)
    during_net = (during_orders * basket * rng.lognormal(0, 0.25, n)).round(2)
    # pull-forward: treated buyers who bought because of the offer buy a little less afterwards
    after_rate = rate * AFTER_DAYS / 90.0 * np.where(treated & during_buyer, 0.9, 1.0)
    after_orders = rng.poisson(after_rate)
    after_net = (after_orders * basket * rng.lognormal(0, 0.25, n)).round(2)
    redeemed = treated & during_buyer & (rng.random(n) < 0.6)
    discount = np.where(redeemed, (0.15 * during_net / np.maximum(during_orders, 1)).round(2), 0.0)

    starts = np.full(n, STARTS_ON.to_datetime64().astype("datetime64[D]"))
    panel = pd.DataFrame({
        "promotion_id": PROMOTION_ID,
        "customer_id": np.char.add("C", np.arange(n).astype("U9")),
        "arm": np.where(treated, "treatment", "holdout"),
        "is_treated": treated,
        "assigned_at": pd.to_datetime(starts) - pd.to_timedelta(rng.integers(1, 4 * 86400, n), unit="s"),
        "starts_on": pd.to_datetime(starts),
        "ends_on": pd.to_datetime(starts + np.timedelta64(DAYS - 1, "D")),
        "after_ends_on": pd.to_datetime(starts + np.timedelta64(DAYS - 1 + AFTER_DAYS, "D")),
        "recency_days": pd.array(np.where(has_orders, recency, 0), dtype="Int32"),
        "frequency": frequency.astype(np.int64),
        "monetary": monetary,
        "tenure_days": pd.array(tenure, dtype="Int32"),
        "past_deal_share": past_deal_share,
        "past_coupons": past_coupons.astype(np.int64),
        "pre_buyer": (pre_orders > 0).astype(np.int32),
        "pre_orders": pre_orders.astype(np.int64),
        "pre_net_amount": pre_net,
        "pre_margin_amount": (pre_net * margin).round(2),
        "during_buyer": during_buyer.astype(np.int32),
        "during_orders": during_orders.astype(np.int64),
        "during_net_amount": during_net,
        "during_margin_amount": (during_net * margin).round(2),
        "after_buyer": (after_orders > 0).astype(np.int32),
        "after_orders": after_orders.astype(np.int64),
        "after_net_amount": after_net,
        "after_margin_amount": (after_net * margin).round(2),
        "redeemed": redeemed.astype(np.int32),
        "discount_amount": discount,
    })
    panel.loc[~has_orders, "recency_days"] = pd.NA
    panel.loc[new, "tenure_days"] = pd.NA
    return panel[[c.name for c in PANELS["campaign_windows"]]]


def promotion_row() -> dict:
    """The promotions row of the benchmark campaign (contract columns)."""
    return {"promotion_id": PROMOTION_ID, "starts_at": STARTS_ON, "ends_at": STARTS_ON + pd.Timedelta(days=DAYS - 1),
            "mechanic": "percent_off", "depth": 0.15, "audience": "targeted", "cost_per_redemption": 0.5,
            "name": "Benchmark coupon"}


def settings(workdir: Path):
    """Settings from a minimal config (only the tables the parser requires, plus the windows)."""
    from toolkit import config

    text = (
        "[tables.transactions]\npath = \"transactions/*.parquet\"\n"
        "[tables.promotions]\npath = \"promotions.csv\"\n"
        "[tables.assignments]\npath = \"assignments.csv\"\n"
        f"[windows]\nafter_days = {AFTER_DAYS}\n"
        "[economics]\nmargin_rate = 0.38\n"
    )
    path = workdir / "liftlag.toml"
    path.write_text(text, encoding="utf-8")
    return config.load(path)


def child(customers: int, seed: int) -> None:
    """Build the panel, analyse and write it; print the figures as one JSON line."""
    import warnings

    from toolkit.effects.api import analyse_panel, write_campaign

    workdir = Path(tempfile.mkdtemp(prefix="liftlag-campaign-bench-"))
    clock = time.perf_counter()
    panel = make_panel(customers, seed)
    generate_s = time.perf_counter() - clock
    run_settings = settings(workdir)
    clock = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        readout = analyse_panel(panel, promotion=promotion_row(), settings=run_settings)
    analyse_s = time.perf_counter() - clock
    clock = time.perf_counter()
    written = write_campaign(readout, workdir / "campaigns")
    write_s = time.perf_counter() - clock
    choice = readout.tables["model_choice"]
    print(json.dumps({
        "rows": int(len(panel)), "treated": int(panel["is_treated"].sum()),
        "generate_s": round(generate_s, 1), "analyse_s": round(analyse_s, 1), "write_s": round(write_s, 1),
        "stages_s": {k: round(v, 1) for k, v in readout.meta.get("seconds", {}).items()},
        "chosen_model": readout.meta.get("chosen_model"), "randomisation_check": readout.randomisation_check,
        "qini": {r["learner"]: round(float(r["qini_coefficient"]), 4) for _, r in choice.iterrows()},
        # model_choice.all_learners_fit_seconds: the fit of all learners together (the same on every row)
        "fit_s": round(float(choice["all_learners_fit_seconds"].max()), 1) if len(choice) else None,
        "files": len(written), "out": str(workdir),
    }))
    shutil.rmtree(workdir, ignore_errors=True)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--customers", type=int, default=1_000_000, help="assigned customers (default 1,000,000)")
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        child(args.customers, args.seed)
        return 0
    timer = "/usr/bin/time"
    if not os.access(timer, os.X_OK):
        print(f"{timer} missing: apt-get update && apt-get install -y time", file=sys.stderr)
        return 2
    with open("/proc/loadavg") as handle:
        load = handle.read().strip()
    repo = Path(__file__).resolve().parents[1]
    commit = subprocess.run(["git", "-C", str(repo), "rev-parse", "--short", "HEAD"],
                            capture_output=True, text=True).stdout.strip() or "?"
    if subprocess.run(["git", "-C", str(repo), "status", "--porcelain", "--", "toolkit", "sql"],
                      capture_output=True, text=True).stdout.strip():
        commit += "+uncommitted"
    print(f"== date (UTC):  {time.strftime('%Y-%m-%d %H:%M:%S', time.gmtime())}")
    print(f"== customers:   {args.customers:,} (seed {args.seed})")
    print(f"== commit:      {commit}")
    print(f"== loadavg:     {load}")
    # The child runs on a frozen copy of toolkit/ and sql/ (ahead of the editable install), so
    # edits to the tree during the run cannot change the code half-way; BENCH_SNAPSHOT=0 runs the
    # tree as it is.
    env = dict(os.environ)
    snapshot = None
    if env.get("BENCH_SNAPSHOT", "1") != "0":
        snapshot = Path(tempfile.mkdtemp(prefix="liftlag-bench-"))
        for name in ("toolkit", "sql"):
            if (repo / name).is_dir():
                shutil.copytree(repo / name, snapshot / name)
        env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(snapshot), env.get("PYTHONPATH")]))
    started = time.perf_counter()
    try:
        proc = subprocess.run([timer, "-v", sys.executable, __file__, "--child", "--customers", str(args.customers),
                               "--seed", str(args.seed)], capture_output=True, text=True, env=env)
    finally:
        if snapshot is not None:
            shutil.rmtree(snapshot, ignore_errors=True)
    wall = time.perf_counter() - started
    report = proc.stderr
    rss = re.search(r"Maximum resident set size \(kbytes\): (\d+)", report)
    user = re.search(r"User time \(seconds\): ([\d.]+)", report)
    system = re.search(r"System time \(seconds\): ([\d.]+)", report)
    lines = [line for line in proc.stdout.splitlines() if line.startswith("{")]
    if proc.returncode != 0 or not lines:
        print(f"== failed (exit {proc.returncode})")
        print("\n".join(report.splitlines()[-40:]))
        return 1
    figures = json.loads(lines[-1])
    print(f"== rows:        {figures['rows']:,} ({figures['treated']:,} treated)")
    print(f"== generate s:  {figures['generate_s']}")
    print(f"== analyse s:   {figures['analyse_s']}  (stages: {figures['stages_s']})")
    print(f"== write s:     {figures['write_s']}  ({figures['files']} files)")
    print(f"== process s:   {wall:.1f} wall, cpu user {user.group(1) if user else '?'} + sys "
          f"{system.group(1) if system else '?'}")
    print(f"== peak RSS MB: {int(rss.group(1)) / 1024:.0f}" if rss else "== peak RSS MB: ?")
    print(f"== chosen:      {figures['chosen_model']}  (qini {figures['qini']}; all learners fitted in {figures['fit_s']} s; "
          f"randomisation check {figures['randomisation_check']})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
