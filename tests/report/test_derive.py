"""The report's own tables: the event study on the hand-made tiny export, the tails' flag."""

from __future__ import annotations

import math

import pandas as pd
import pytest

from toolkit import config, panels, workspace
from toolkit.report.quarter import derive


def test_event_study_counts_weekly_orders_per_assigned_customer_by_arm(tiny_config):
    """Tiny export (tests/conftest.py): PA starts Mon 2026-03-02; c1 and c3 treated, c2 holdout.
    Worked by hand: c1 orders on 03-03 (week 0) and 03-18 (week 2; the 03-21 return is no purchase),
    c3 on 03-17 (week 2) and 04-06 (week 5); c2 on 02-20 (day -10: week -2) and 03-05 (week 0)."""
    settings = config.load(tiny_config)
    panels.build(settings)
    con = workspace.connect(settings)
    try:
        table = derive.event_study(con, ["PA"], weeks_before=4, weeks_after=5, alpha=0.05)
    finally:
        con.close()
    t = table[table["arm"] == "treatment"].set_index("week")
    h = table[table["arm"] == "holdout"].set_index("week")
    d = table[table["arm"] == "difference"].set_index("week")
    assert list(t.index) == list(range(-4, 6))
    assert t.loc[2, "orders"] == 2 and t.loc[2, "customers"] == 2 and t.loc[2, "mean_orders"] == 1.0
    assert t.loc[0, "orders"] == 1 and t.loc[0, "mean_orders"] == 0.5
    assert t.loc[-4, "orders"] == 1  # c1's order of 02-02 is 28 days before: week -4
    assert h.loc[-2, "orders"] == 1 and h.loc[0, "orders"] == 1 and h.loc[0, "customers"] == 1
    assert d.loc[0, "mean_orders"] == pytest.approx(0.5 - 1.0)
    # week 0 treated: values 1 and 0 -> sample variance 0.5, se sqrt(0.5 / 2) = 0.5
    assert t.loc[0, "ci_high"] - t.loc[0, "mean_orders"] == pytest.approx(1.959963984540054 * 0.5)
    # the export ends on 04-06: week 5 (04-06 to 04-12) is not complete
    assert not bool(t.loc[5, "is_complete_week"]) and bool(t.loc[4, "is_complete_week"])


def _tables(decile_rates):
    deciles = pd.DataFrame([{"promotion_id": "P", "model": "m", "decile": i + 1, "n_treated": 400, "n_holdout": 400,
                             "treated_rate": tr, "holdout_rate": hr, "uplift": tr - hr, "mean_predicted_uplift": 0.0,
                             "score_min": 0, "score_max": 1} for i, (tr, hr) in enumerate(decile_rates)])
    effects = pd.DataFrame([{"promotion_id": "P", "outcome": "buyers", "window": "during", "method": "newcombe",
                             "lift": 0.05, "lift_ci_low": 0.03, "lift_ci_high": 0.07}])
    return {"uplift_deciles": deciles, "campaign_effects": effects}


def test_a_decile_with_a_clearly_negative_effect_moves_against_a_positive_average():
    tails = derive.uplift_tails(_tables([(0.30, 0.20), (0.20, 0.30), (0.22, 0.20)]), alpha=0.05)
    flags = tails.set_index("group")["is_against_average"]
    assert not flags["1"] and flags["2"] and not flags["3"]
    low, high = tails.set_index("group").loc["2", ["ci_low", "ci_high"]]
    assert high < 0 < 0.05


def test_no_flag_when_the_average_itself_could_be_zero():
    tables = _tables([(0.20, 0.30)])
    tables["campaign_effects"].loc[0, ["lift_ci_low", "lift_ci_high"]] = [-0.01, 0.07]
    assert not derive.uplift_tails(tables, alpha=0.05)["is_against_average"].any()


def test_quarter_economics_sums_campaigns_and_combines_intervals():
    """Two campaigns: 100 (50 to 150) and 200 (180 to 220): sum 300, half-width sqrt(50^2 + 20^2)."""
    econ = pd.DataFrame({
        "promotion_id": ["A", "B"], "n_treated": [10, 20], "n_holdout": [5, 5], "method": ["welch", "welch"],
        "net_incremental_margin": [100.0, 200.0], "net_incremental_margin_ci_low": [50.0, 180.0],
        "net_incremental_margin_ci_high": [150.0, 220.0], "incremental_margin": [1.0, 2.0],
        "incremental_margin_ci_low": [0.0, 1.0], "incremental_margin_ci_high": [2.0, 3.0],
        "discount_cost": [5.0, 6.0], "discount_paid_to_non_incremental": [1.0, 2.0], "subsidy_to_sure_things": [math.nan, 1.0]})
    table = derive.quarter_economics({"campaign_economics": econ}, currency="EUR", alpha=0.05).set_index("item")
    assert table.loc["net_incremental_margin", "estimate"] == 300.0
    half = math.sqrt(50 ** 2 + 20 ** 2)
    assert table.loc["net_incremental_margin", "ci_low"] == pytest.approx(300 - half)
    assert table.loc["discount_cost", "estimate"] == 11.0 and math.isnan(table.loc["discount_cost", "ci_low"])
    assert table.loc["subsidy_to_sure_things", "campaigns"] == 1
