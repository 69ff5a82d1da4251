"""Recovery of the demo scenario's known truth (truth.json, truth_uplift.parquet) from its built workspace.

The demo generator records, per campaign, the exact expected lift in buyers during the campaign
and the pull-forward share, and per assigned customer the true uplift in buying. The analysis
never reads these files; only this test does.
"""

from __future__ import annotations

import dataclasses
import json
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "demo_data"

@pytest.fixture(scope="module")
def demo(demo_settings):
    from toolkit import workspace
    from toolkit.effects.api import analyse_campaign, list_targeted_promotions

    settings = demo_settings  # the shipped demo export, built for this test session
    # 3 folds instead of the configured 5 keeps this test near ten seconds; the estimates of the
    # average effects do not depend on the folds, the uplift scores only a little
    settings = dataclasses.replace(settings, campaign=dataclasses.replace(settings.campaign, folds=3))
    con = workspace.connect(settings)
    try:
        ids = list_targeted_promotions(con)["promotion_id"].tolist()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            readouts = {pid: analyse_campaign(con, settings, pid) for pid in ids}
    finally:
        con.close()
    truth = json.loads((DEMO / "truth.json").read_text())
    return {
        "readouts": readouts,
        "campaigns": {c["promotion_id"]: c for c in truth["campaigns"]},
        "uplift": pd.read_parquet(DEMO / "truth_uplift.parquet"),
    }


def test_every_targeted_campaign_is_analysed_and_passes_its_checks(demo):
    assert set(demo["readouts"]) == set(demo["campaigns"])
    statuses = [r.randomisation_check for r in demo["readouts"].values()]
    assert statuses.count("passed") >= len(statuses) - 1  # randomised with the planned 0.2 holdout


def test_buyers_lift_intervals_cover_the_known_effect_for_most_campaigns(demo):
    """95% intervals: about 13 of 14 should cover; at least 12 must (binomial, common practice)."""
    covered = []
    for pid, readout in demo["readouts"].items():
        effects = readout.tables["campaign_effects"].set_index(["outcome", "window", "method"])
        row = effects.loc[("buyers", "during", "cuped")]
        true = demo["campaigns"][pid]["during_buyer"]["effect"]
        covered.append(row["lift_ci_low"] <= true <= row["lift_ci_high"])
    assert sum(covered) >= len(covered) - 2


def test_top_uplift_decile_holds_clearly_more_true_uplift_than_the_bottom(demo):
    truth = demo["uplift"][["promotion_id", "customer_id", "true_uplift_buyer"]]
    gaps = []
    for pid, readout in demo["readouts"].items():
        scores = readout.tables["uplift_scores"].merge(truth, on=["promotion_id", "customer_id"], how="inner")
        assert len(scores) == len(readout.tables["uplift_scores"])  # every scored customer has a truth
        order = np.argsort(-scores["uplift_score"].to_numpy(), kind="stable")
        tenth = len(order) // 10
        top = scores["true_uplift_buyer"].to_numpy()[order[:tenth]].mean()
        bottom = scores["true_uplift_buyer"].to_numpy()[order[-tenth:]].mean()
        gaps.append(top - bottom)
    gaps = np.array(gaps)
    assert (gaps > 0).sum() >= len(gaps) - 1
    assert gaps.mean() > 0.05  # true uplift averages 0.067: the top decile holds far more of it


def test_pull_forward_share_has_the_known_sign(demo):
    """The demo's post-promotion dip gives back part of every campaign's bump (truth: share > 0 everywhere)."""
    assert all(c["pull_forward_share"] > 0 for c in demo["campaigns"].values())
    tables = pd.concat([r.tables["pull_forward"] for r in demo["readouts"].values()], ignore_index=True)
    positive = (tables["pull_forward_share"] > 0).sum()
    assert positive >= len(tables) * 0.7
    pooled = -tables["after_incremental_orders"].sum() / tables["during_incremental_orders"].sum()
    assert pooled > 0
