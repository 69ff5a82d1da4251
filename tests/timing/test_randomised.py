"""The randomised timing contrasts (toolkit.timing.randomised, sql/timing/timing_arm_cells.sql) on a
simulated campaign_windows panel with a known treatment-vs-holdout rate ratio after the campaign.

The simulation: customers with gamma-distributed purchase rates (so orders cluster by customer),
each campaign assigns a random half of them, a fifth of those to the holdout; orders in the
campaign window and in the 28 days after it are Poisson with the customer's rate, multiplied by the
planted ratio in the treatment arm. Reference: statsmodels' Poisson GLM on one row per assigned
customer, with cluster-robust (by customer) standard errors.
"""

from __future__ import annotations

from datetime import date, timedelta

import duckdb
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from toolkit.timing.randomised import ArmRateRatio, fit_windows
from toolkit.timing.spells import sql_text

STARTS = [date(2025, 3, 3), date(2025, 5, 5), date(2025, 7, 7)]
CAMPAIGN_DAYS, AFTER_DAYS = 10, 28


def simulate_panel(*, customers=3000, during_ratio=1.5, after_ratio=0.8, seed=11, export_end=date(2025, 12, 31)):
    rng = np.random.default_rng(seed)
    rate = rng.gamma(1.0, 0.02, customers)  # orders per day; shape 1: strongly skewed, clustered
    rows = []
    for k, start in enumerate(STARTS):
        members = np.flatnonzero(rng.random(customers) < 0.5)
        treated = rng.random(len(members)) >= 0.2
        r = rate[members]
        rows.append(pd.DataFrame({
            "promotion_id": f"T{k + 1}", "customer_id": [f"C{i:05d}" for i in members],
            "arm": np.where(treated, "treatment", "holdout"), "is_treated": treated,
            "starts_on": pd.Timestamp(start), "ends_on": pd.Timestamp(start + timedelta(days=CAMPAIGN_DAYS - 1)),
            "after_ends_on": pd.Timestamp(start + timedelta(days=CAMPAIGN_DAYS - 1 + AFTER_DAYS)),
            "during_orders": rng.poisson(r * CAMPAIGN_DAYS * np.where(treated, during_ratio, 1.0)),
            "after_orders": rng.poisson(r * AFTER_DAYS * np.where(treated, after_ratio, 1.0)),
        }))
    return pd.concat(rows, ignore_index=True), export_end


def arm_cells(panel: pd.DataFrame, export_end: date, *, n_blocks: int = 64) -> pd.DataFrame:
    """Run sql/timing/timing_arm_cells.sql on a connection holding the panel."""
    con = duckdb.connect()
    con.register("panel", panel)
    con.execute("CREATE TABLE campaign_windows AS SELECT * REPLACE (CAST(starts_on AS DATE) AS starts_on, "
                "CAST(ends_on AS DATE) AS ends_on, CAST(after_ends_on AS DATE) AS after_ends_on) FROM panel")
    con.execute("CREATE TABLE purchase_gaps AS SELECT DATE '2025-01-01' AS ordered_on, "
                f"CAST(date_diff('day', DATE '2025-01-01', DATE '{export_end.isoformat()}') AS INTEGER) AS days_to_next_order")
    con.execute("SET VARIABLE timing_n_blocks = ?", [n_blocks])
    con.execute("SET VARIABLE timing_seed = ?", [20261201])
    con.execute(sql_text("timing_arm_cells"))
    return con.execute("SELECT * FROM timing_arm_cells").df()


def pooled_row(fit: ArmRateRatio) -> pd.Series:
    return fit.ratios_.set_index("stratum").loc["all"]


@pytest.fixture(scope="module")
def planted():
    panel, end = simulate_panel(after_ratio=0.8)
    return panel, fit_windows(arm_cells(panel, end), alpha=0.05, bootstrap_rounds=200, seed=5, min_arm_customers=30)


def test_randomised_dip_recovers_the_known_after_window_rate_ratio(planted):
    """Planted 0.8 after the campaign (and 1.5 during it): each is inside its pooled interval, and
    the dip's interval lies below 1."""
    _, fits = planted
    after, during = pooled_row(fits["after"]), pooled_row(fits["during"])
    assert after["ci_low"] <= 0.8 <= after["ci_high"] and after["ci_high"] < 1, after.to_dict()
    assert during["ci_low"] <= 1.5 <= during["ci_high"] and during["ci_low"] > 1, during.to_dict()
    per_campaign = fits["after"].ratios_.set_index("stratum").drop(index="all")
    assert per_campaign["is_estimable"].all() and len(per_campaign) == 3


def test_randomised_dip_without_effect_gives_an_interval_that_includes_one():
    panel, end = simulate_panel(after_ratio=1.0, during_ratio=1.0, seed=12)
    fits = fit_windows(arm_cells(panel, end), alpha=0.05, bootstrap_rounds=200, seed=5, min_arm_customers=30)
    for window in ("during", "after"):
        row = pooled_row(fits[window])
        assert row["ci_low"] <= 1 <= row["ci_high"], (window, row.to_dict())


def test_pooled_ratio_equals_statsmodels_poisson_on_customer_rows_and_bootstrap_matches_cluster_robust_se(planted):
    """statsmodels GLM (Poisson, log link, offset log days, one intercept per campaign) on one row per
    assigned customer: the same estimate to 1e-8 (the per-arm sums are its sufficient statistics);
    its cluster-robust standard error by customer within 35 % of the block-bootstrap one (200 rounds
    of 64 blocks: the bootstrap's own sampling error is about 10 %)."""
    panel, fits = planted
    design = pd.get_dummies(panel["promotion_id"], dtype=float)
    design.insert(0, "treated", panel["is_treated"].astype(float))
    groups = pd.factorize(panel["customer_id"])[0]
    model = sm.GLM(panel["after_orders"].astype(float), design, family=sm.families.Poisson(),
                   offset=np.log(np.full(len(panel), AFTER_DAYS, dtype=float)))
    result = model.fit(cov_type="cluster", cov_kwds={"groups": groups})
    fit = fits["after"]
    np.testing.assert_allclose(fit.params_["all"], result.params["treated"], atol=1e-8)
    bootstrap_se = fit.bootstrap_params_["all"].std(ddof=1)
    assert 0.65 < bootstrap_se / result.bse["treated"] < 1.35, (bootstrap_se, result.bse["treated"])


def test_per_campaign_ratio_is_the_ratio_of_the_arms_rates(planted):
    """Hand computation: orders / customer-days of each arm, then their ratio (common practice, no source)."""
    panel, fits = planted
    part = panel[panel["promotion_id"] == "T2"]
    rates = part.groupby("is_treated")["after_orders"].sum() / (part.groupby("is_treated").size() * AFTER_DAYS)
    row = fits["after"].ratios_.set_index("stratum").loc["T2"]
    assert row["rate_ratio"] == pytest.approx(rates[True] / rates[False], rel=1e-12)


def test_thin_arms_late_windows_and_campaigns_without_holdout_are_not_estimable():
    panel, _ = simulate_panel(customers=1200, seed=3)
    # T1: keep only 10 holdout customers; T3: after-window past the export's end; T4: no holdout.
    holdout_t1 = panel.index[(panel["promotion_id"] == "T1") & ~panel["is_treated"]]
    panel = panel.drop(index=holdout_t1[10:])
    no_holdout = panel[(panel["promotion_id"] == "T2") & panel["is_treated"]].assign(promotion_id="T4")
    panel = pd.concat([panel, no_holdout], ignore_index=True)
    end = STARTS[2] + timedelta(days=CAMPAIGN_DAYS - 1)  # T3's last campaign day
    cells = arm_cells(panel, end)
    assert "T4" not in set(cells["promotion_id"])
    fits = fit_windows(cells, alpha=0.05, bootstrap_rounds=20, seed=5, min_arm_customers=30)
    after = fits["after"].ratios_.set_index("stratum")
    assert not after.loc["T1", "is_estimable"] and np.isnan(after.loc["T1", "rate_ratio"])
    assert after.loc["T1", "reason"] == ("not estimable: " + f"{int(after.loc['T1', 'n_treated'])} treated and 10 holdout "
                                         "customers; each arm needs at least 30")
    assert not after.loc["T3", "is_estimable"] and "ends after the export's last day" in after.loc["T3", "reason"]
    assert after.loc["T2", "is_estimable"] and after.loc["all", "is_estimable"]
    assert fits["during"].ratios_.set_index("stratum").loc["T3", "is_estimable"]  # its campaign window is complete
