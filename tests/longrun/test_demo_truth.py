"""Recovery of the demo's long-run truth, and no false alarm on its stationary variant.

The demo's ``learning`` variant is the default demo (``all``) with learning customers; its truth
(truth.json, ``mechanisms.learning``): every coupon a customer receives lowers
their purchase hazard by the factor exp(-learning_full_price_per_coupon) and raises the hazard
ratio of their next coupons by exp(learning_coupon_per_coupon) (up to learning_cap coupons). So
(1) discount dependence rises over the quarters against the same customers without learning (same
seed, the default demo without learning: the counterfactual); (2) the responsiveness regression finds the
full-price baseline falling and the coupon response rising; (3) a year later the customers can be
told apart. The ``stationary`` variant (no learning, no new customers, the same campaign calendar
every year) must give a year-over-year drift AUC whose interval includes 0.5 and a responsiveness
interaction whose interval includes 0. Exports are generated in the test session (3,000 customers).
"""

from __future__ import annotations

import dataclasses
import json

import pytest

from toolkit import config, panels, workspace
from toolkit.config import LongrunSettings, WorkspaceSettings
from toolkit.demo import generate
from toolkit.longrun import dependence, drift, responsiveness

CUSTOMERS = 3000
SEED = 20261201


def _build(tmp_path_factory, name, **kwargs):
    out = tmp_path_factory.mktemp(name)
    cfg = generate(out / "export", seed=SEED, customers=CUSTOMERS, **kwargs)
    settings = config.load(cfg)
    settings = dataclasses.replace(
        settings, workspace=WorkspaceSettings(path=out / "ws"),
        longrun=LongrunSettings(bootstrap_rounds=100, drift_adjacent=False, drift_permutation_repeats=2))
    panels.build(settings)
    truth = json.loads((cfg.parent / "truth.json").read_text())
    return settings, truth


def _run(settings, module):
    con = workspace.connect(settings)
    try:
        end = con.execute("SELECT max(ordered_on) FROM orders").fetchall()[0][0]
        return module.analyse(con, settings, end)[0]
    finally:
        con.close()


@pytest.fixture(scope="module")
def learning(tmp_path_factory):
    return _build(tmp_path_factory, "learning", effects="learning")


@pytest.fixture(scope="module")
def stationary(tmp_path_factory):
    return _build(tmp_path_factory, "stationary", effects="stationary")


def test_dependence_rises_against_the_same_customers_without_learning(learning, tmp_path_factory):
    settings, truth = learning
    assert truth["mechanisms"]["learning"]["active"]
    twin, twin_truth = _build(tmp_path_factory, "no_learning", effects="all")  # the same demo without learning
    assert not twin_truth["mechanisms"]["learning"]["active"]
    with_learning = _run(settings, dependence)["dependence_by_quarter"].set_index("quarter")
    without = _run(twin, dependence)["dependence_by_quarter"].set_index("quarter")
    gap = with_learning["dependence_index_mean"] - without["dependence_index_mean"]
    first, last = gap.index[0], gap.index[-1]
    # before many coupons have arrived the two demos are alike; by the last quarter learning shows
    assert abs(gap[first]) < 0.02, gap.to_dict()
    assert gap[last] > 0.03, gap.to_dict()
    assert with_learning.loc[last, "dependence_index_mean_ci_low"] > without.loc[last, "dependence_index_mean_ci_high"]
    # the gap grows over the year: the second half of the quarters is above the first half
    half = len(gap) // 2
    assert gap.iloc[half:].mean() > gap.iloc[:half].mean() + 0.02, gap.to_dict()


def test_responsiveness_finds_the_baseline_falling_and_the_response_rising(learning):
    settings, truth = learning
    table = _run(settings, responsiveness)["responsiveness_drift"].set_index("term")
    assert table.loc["coupons_before", "ci_high"] < 0, table.to_dict()
    assert table.loc["coupon_available_x_coupons_before", "ci_low"] > 0, table.to_dict()
    assert "falling and the response to coupons rising" in table["sentence"].iloc[0]


def test_responsiveness_interaction_includes_zero_on_the_stationary_demo(stationary):
    settings, truth = stationary
    assert not truth["mechanisms"]["learning"]["active"]
    table = _run(settings, responsiveness)["responsiveness_drift"].set_index("term")
    row = table.loc["coupon_available_x_coupons_before"]
    assert row["ci_low"] <= 0 <= row["ci_high"], row.to_dict()
    assert table.loc["coupon_available", "ci_low"] > 0  # the coupon itself still works


def test_year_over_year_drift_is_found_on_the_learning_demo(learning):
    settings, _ = learning
    table = _run(settings, drift)["population_drift"]
    yoy = table[table["comparison"] == "year_over_year"]
    assert len(yoy) == 3  # 2026Q1-Q3 against 2025Q1-Q3 (2026Q3 is whole: the demo ends on 30 September)
    assert (yoy["ci_low"] > 0.5).all(), yoy[["quarter_from", "quarter_to", "auc", "ci_low", "ci_high"]]


def test_year_over_year_drift_interval_includes_half_on_the_stationary_demo(stationary):
    settings, _ = stationary
    table = _run(settings, drift)["population_drift"]
    yoy = table[table["comparison"] == "year_over_year"]
    assert len(yoy) == 3
    assert ((yoy["ci_low"] <= 0.5) & (yoy["ci_high"] >= 0.5)).all(), yoy[["quarter_from", "quarter_to", "auc",
                                                                            "ci_low", "ci_high"]]
    assert yoy["sentence"].str.contains("cannot be told apart").all()
