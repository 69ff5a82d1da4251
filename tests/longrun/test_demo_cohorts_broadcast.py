"""Recovery of the demo's known truth (truth.json) by the cohort and broadcast analyses, on the
shipped demo, on the variant with no effect at all (``none``), and on a variant whose sale and
welcome offer are planted on other dates.

What the truth says (toolkit/demo/truth.py, toolkit/demo/generate.py):
- broadcasts[].during_orders.incremental: expected orders with the sale minus without it, over
  every customer, during the sale (exact expectation under the generating process); the sale
  moves no purchase (after_orders.incremental = 0).
- acquisition.cohort_rate_ratio: mean baseline purchase hazard of the customers whose first order
  was a deal over that of the others (customers first seen inside the history, as the analysis
  defines its cohorts). The demo process has no dropout, so expected orders in a coming quarter
  are proportional to that hazard and the ratio of the cohorts' expected orders estimates it.

Tolerances: the broadcast interval (95%) must cover the truth and the estimate be within 35% of
it (realised orders differ from their expectation by about sqrt(600) = 25, and the model's
baseline is a forecast); the cohort ratio within 0.12 of the truth's.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import json
from pathlib import Path

import pytest

from toolkit import config, panels, workspace
from toolkit.config import WorkspaceSettings
from toolkit.longrun import cohorts, counterfactual

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "demo_data"
MOVED = {"broadcast_starts_on": dt.date(2026, 3, 20),
         "welcome_offer_starts_on": dt.date(2025, 10, 1), "welcome_offer_ends_on": dt.date(2025, 12, 31)}


def _fast(settings):
    return dataclasses.replace(settings, longrun=dataclasses.replace(settings.longrun, bootstrap_rounds=100,
                                                                     broadcast_parameter_draws=60))


def _analyse(settings):
    con = workspace.connect(settings)
    try:
        through = con.execute("SELECT max(ordered_on) FROM orders").fetchall()[0][0]
        cohort_tables, _ = cohorts.analyse(con, settings, through)
        broadcast_tables, notes = counterfactual.analyse(con, settings, through)
    finally:
        con.close()
    return {**cohort_tables, **broadcast_tables}, notes


def _variant(tmp_path_factory, name, **scenario):
    from toolkit.demo import Scenario, generate

    folder = tmp_path_factory.mktemp(name)
    effects = "none" if name == "none" else "all"
    config_path = generate(folder, scenario=Scenario.for_effects(effects, **scenario))
    settings = config.load(config_path)
    settings = dataclasses.replace(settings, workspace=WorkspaceSettings(path=folder / ".liftlag"))
    panels.build(settings)
    return _fast(settings), json.loads((folder / "truth.json").read_text())


@pytest.fixture(scope="module")
def demo(demo_settings):
    return _analyse(_fast(demo_settings)), json.loads((DEMO / "truth.json").read_text())


@pytest.fixture(scope="module")
def none_variant(tmp_path_factory):
    settings, truth = _variant(tmp_path_factory, "none")
    return _analyse(settings), truth


@pytest.fixture(scope="module")
def moved_variant(tmp_path_factory):
    settings, truth = _variant(tmp_path_factory, "moved", **MOVED)
    return _analyse(settings), truth


def _effect(tables, window, outcome="orders"):
    effects = tables["broadcast_effects"]
    return effects[(effects["outcome"] == outcome) & (effects["window"] == window)].iloc[0]


def _cohort_ratio(tables, first_quarter="all"):
    value = tables["cohort_value"]
    rows = value[(value["measure"] == "expected_orders_next_quarter") & (value["first_quarter"] == first_quarter)]
    rows = rows.set_index("cohort")
    return rows.loc["deal_acquired", "estimate"] / rows.loc["full_price_acquired", "estimate"], rows


def _check_sale_found(tables, truth):
    during = _effect(tables, "during")
    incremental = truth["broadcasts"][0]["during_orders"]["incremental"]
    assert during["ci_low"] <= incremental <= during["ci_high"], (during.to_dict(), incremental)
    assert during["estimate"] == pytest.approx(incremental, rel=0.35)
    assert during["ci_low"] > 0
    after = _effect(tables, "after")  # the sale moves no purchase: its own pull-forward is null
    assert after["ci_low"] <= 0 <= after["ci_high"], after.to_dict()
    placebo = tables["broadcast_placebo"].set_index("outcome")
    assert placebo.loc["orders", "includes_zero"]  # the outcome the truth is about


@pytest.mark.slow
def test_demo_broadcast_sale_effect_is_recovered(demo):
    (tables, notes), truth = demo
    _check_sale_found(tables, truth)
    notes_table = tables["broadcast_notes"]
    assert (notes_table["kind"] == "assumption").sum() == len(counterfactual.ASSUMPTIONS)
    series = tables["broadcast_series"]
    assert set(series["period"]) == {"pre", "during", "after"}
    assert set(series["outcome"]) == {"orders", "net_revenue"}


@pytest.mark.slow
def test_demo_deal_acquired_cohort_buys_less_as_the_truth_says(demo):
    (tables, _), truth = demo
    expected_ratio = truth["acquisition"]["cohort_rate_ratio"]
    assert expected_ratio < 1  # the truth's sign: deal-acquired customers buy less often
    ratio, rows = _cohort_ratio(tables)
    assert ratio == pytest.approx(expected_ratio, abs=0.12)
    value = tables["cohort_value"]
    contrast = value[(value["cohort"] == "deal_minus_full_price") & (value["first_quarter"] == "all")
                     & (value["measure"] == "expected_orders_next_quarter")].iloc[0]
    assert contrast["ci_high"] < 0  # the truth's sign, and clearly
    # The welcome offer ran in 2025Q2: that quarter's cohort is shown, the others too small.
    quarter = value[(value["cohort"] == "deal_acquired") & (value["first_quarter"] == "2025Q2")]
    assert not quarter["is_suppressed"].any()
    retention = tables["cohort_retention"]
    assert {"deal_acquired", "full_price_acquired"} <= set(retention.loc[~retention["is_suppressed"], "cohort"])


@pytest.mark.slow
def test_no_sale_variant_gives_a_broadcast_interval_that_includes_zero(none_variant):
    """effects="none": the sale changes no one's behaviour (truth: incremental 0)."""
    (tables, _), truth = none_variant
    assert truth["broadcasts"][0]["during_orders"]["incremental"] == 0
    during = _effect(tables, "during")
    assert during["ci_low"] <= 0 <= during["ci_high"], during.to_dict()
    assert tables["broadcast_placebo"].set_index("outcome").loc["orders", "includes_zero"]


@pytest.mark.slow
def test_no_effect_variant_cohort_ratio_follows_the_truth(none_variant):
    """effects="none": the welcome offer changes no one's purchase rate; what remains is that a
    first order that came on its own is more often a frequent buyer's (truth ratio about 0.97)."""
    (tables, _), truth = none_variant
    expected_ratio = truth["acquisition"]["cohort_rate_ratio"]
    assert expected_ratio > 0.9
    ratio, _ = _cohort_ratio(tables)
    assert ratio == pytest.approx(expected_ratio, abs=0.12)


@pytest.mark.slow
def test_sale_and_welcome_offer_planted_on_other_dates_are_found(moved_variant):
    """The sale on 2026-03-20 (not 2025-11-21) and the welcome offer in 2025Q4 (not 2025Q2)."""
    (tables, _), truth = moved_variant
    assert truth["broadcasts"][0]["starts_on"] == "2026-03-20"
    _check_sale_found(tables, truth)
    ratio, _ = _cohort_ratio(tables)
    assert ratio == pytest.approx(truth["acquisition"]["cohort_rate_ratio"], abs=0.12)
    value = tables["cohort_value"]
    quarter = value[(value["cohort"] == "deal_minus_full_price") & (value["first_quarter"] == "2025Q4")
                    & (value["measure"] == "expected_orders_next_quarter")]
    assert len(quarter) == 1 and quarter["ci_high"].iloc[0] < 0
