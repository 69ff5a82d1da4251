"""The campaign entry points: analyse_campaign, list_targeted_promotions, write_campaign, bad input."""

from __future__ import annotations

import re
import warnings

import numpy as np
import pandas as pd
import pytest

from toolkit.errors import AnalysisError, ConfigError, StatisticalWarning
from toolkit.effects import api
from toolkit.effects.api import analyse_campaign, list_targeted_promotions, write_campaign, write_campaigns
from toolkit.effects.readout import TABLE_NAMES


def test_list_targeted_promotions_shows_campaigns_with_assignments(workspace):
    listed = list_targeted_promotions(workspace["con"]).set_index("promotion_id")
    assert sorted(listed.index) == ["P1", "PH", "PK", "PS"]  # not the broadcast PB, not PE without rows
    assert listed.loc["P1", "assigned"] == 2500
    assert listed.loc["PH", "holdout"] == 0


def test_every_table_is_there_and_says_which_campaign(readouts, workspace):
    readout = readouts["P1"]
    assert list(readout.tables) == list(TABLE_NAMES)
    for name, table in readout.tables.items():
        if len(table):
            assert (table["promotion_id"] == "P1").all(), name
            assert (table["randomisation_check"] == "passed").all(), name
    effects = readout.tables["campaign_effects"]
    assert len(effects) == 4 * 3 * 2 + 3  # welch + cuped everywhere, newcombe for the 3 buyer windows
    assert set(effects.loc[effects["outcome"] == "buyers", "method"]) == {"welch", "cuped", "newcombe"}
    assert effects["is_randomised"].all() and (effects["ci_level"] == 0.95).all()
    assert len(readout.tables["uplift_scores"]) == 2500
    assert readout.tables["uplift_segments"]["customers"].sum() == 2500
    assert len(readout.tables["qini"]) == 3 * 101 and readout.tables["qini"]["is_chosen"].sum() == 101
    assert readout.tables["model_choice"]["is_chosen"].sum() == 1
    assert "customer_region=north" in readout.tables["model_choice"]["features"].iloc[0]
    assert readout.summary["method"].eq("cuped").all()


def test_buyers_lift_covers_the_synthetic_truth(readouts, workspace):
    panel = workspace["panels"]["P1"]
    truth = panel["true_uplift"].mean()
    effects = readouts["P1"].tables["campaign_effects"].set_index(["outcome", "window", "method"])
    for method in ("welch", "cuped", "newcombe"):
        row = effects.loc[("buyers", "during", method)]
        assert row["lift_ci_low"] < truth < row["lift_ci_high"], method


def test_total_window_adds_during_and_after(readouts, workspace):
    panel = workspace["panels"]["P1"]
    effects = readouts["P1"].tables["campaign_effects"].set_index(["outcome", "window", "method"])
    treated = panel["is_treated"]
    total_orders = (panel["during_orders"] + panel["after_orders"])[treated].mean()
    assert effects.loc[("orders", "total", "welch"), "treated_mean"] == pytest.approx(total_orders)
    either = ((panel["during_buyer"] + panel["after_buyer"]) > 0)[~treated].mean()
    assert effects.loc[("buyers", "total", "welch"), "holdout_mean"] == pytest.approx(either)


def test_a_failed_sample_ratio_check_travels_with_every_output(readouts):
    readout = readouts["PK"]
    assert readout.randomisation_check == "failed"
    for name, table in readout.tables.items():
        assert (table["randomisation_check"] == "failed").all(), name
    assert any("SAMPLE RATIO MISMATCH" in message for _, message in readout.notes)
    assert any("PK" in w and "randomisation check failed" in w for w in readouts["_warnings"])


def test_a_small_arm_gets_average_effects_but_no_uplift_models(readouts):
    readout = readouts["PS"]
    assert len(readout.tables["campaign_effects"]) == 27
    for name in ("uplift_scores", "uplift_deciles", "qini", "uplift_segments", "model_choice", "targeting_depth"):
        assert readout.tables[name].empty, name
    assert any("min_arm_size = 50" in message for _, message in readout.notes)
    assert any("PS" in w and "uplift models not fitted" in w for w in readouts["_warnings"])
    assert np.isnan(readout.tables["next_campaign"]["recommended_depth"].iloc[0])


def test_unknown_and_broadcast_promotions_are_argument_errors(workspace):
    with pytest.raises(ConfigError, match=r"'P9' is not in the promotions table.*P1, PH, PK, PS") as error:
        analyse_campaign(workspace["con"], workspace["settings"], "P9")
    assert error.value.exit_code == 2
    with pytest.raises(ConfigError, match="broadcast.*has no holdout.*liftlag longrun") as error:
        analyse_campaign(workspace["con"], workspace["settings"], "PB")
    # every command the message names exists in this version
    from toolkit.cli import build_parser

    commands = set(next(a for a in build_parser()._actions if getattr(a, "choices", None)).choices)
    named = set(re.findall(r"`liftlag (\w+)", str(error.value)))
    assert named and named <= commands


def test_targeted_promotion_without_assignments_or_holdout_is_refused(workspace):
    with pytest.raises(AnalysisError, match="no rows in the campaign_windows panel"):
        analyse_campaign(workspace["con"], workspace["settings"], "PE")
    with pytest.raises(AnalysisError, match="no holdout customers.*comparison") as error:
        analyse_campaign(workspace["con"], workspace["settings"], "PH")
    assert error.value.exit_code == 1


def test_no_holdout_with_a_comparison_frame_is_weighted_and_says_not_randomised(workspace, panel_factory):
    comparison = panel_factory(customers=1500, promotion_id="PH", seed=12, holdout_share=1.0)
    comparison["customer_id"] = "X" + comparison["customer_id"]
    readout = analyse_campaign(workspace["con"], workspace["settings"], "PH", comparison=comparison)
    assert readout.randomisation_check == "not randomised" and not readout.is_randomised
    effects = readout.tables["campaign_effects"]
    assert set(effects["method"]) == {"ipw", "doubly_robust"} and not effects["is_randomised"].any()
    for name, table in readout.tables.items():
        assert (table["randomisation_check"] == "not randomised").all(), name
    assert readout.tables["uplift_scores"].empty
    checks = readout.tables["randomisation_checks"]
    assert {"randomisation", "overlap", "weighted_balance"} <= set(checks["check"])
    assert "not randomised" in readout.tables["campaign_economics"]["note"].iloc[0]
    assert readout.summary["method"].eq("doubly_robust").all()


def test_one_arm_and_constant_outcomes_on_frames(workspace, panel_factory):
    settings = workspace["settings"]
    panel = panel_factory(customers=400, promotion_id="PZ", seed=13)
    treated_only = panel[~panel["is_treated"]]
    with pytest.raises(AnalysisError, match="no treated customers"):
        api.analyse_panel(treated_only, promotion={"promotion_id": "PZ"}, settings=settings)
    flat = panel.copy()
    for col in ("during_buyer", "after_buyer", "during_orders", "after_orders", "during_net_amount",
                "after_net_amount", "during_margin_amount", "after_margin_amount", "redeemed", "discount_amount"):
        flat[col] = 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", StatisticalWarning)
        readout = api.analyse_panel(flat, promotion={"promotion_id": "PZ"}, settings=settings)
    messages = " ".join(m for _, m in readout.notes)
    assert "buyers (during) is the same for every customer" in messages
    assert "uplift models not fitted" in messages and "constant" in messages
    assert readout.tables["uplift_scores"].empty


def test_write_campaign_merges_by_promotion_and_leaves_nothing_half_written(readouts, tmp_path, monkeypatch):
    out = tmp_path / "results"
    write_campaign(readouts["P1"], out)
    write_campaigns([readouts["PS"], readouts["P1"]], out)  # P1 again: replaced, not duplicated
    effects = pd.read_parquet(out / "campaign_effects.parquet")
    assert sorted(effects["promotion_id"].unique()) == ["P1", "PS"]
    assert (effects["promotion_id"] == "P1").sum() == 27
    assert (out / "campaign_P1.html").exists() and (out / "campaign_PS.html").exists()
    scores = pd.read_parquet(out / "uplift_scores.parquet")
    assert set(scores["promotion_id"]) == {"P1"}  # PS had no uplift scores
    assert pd.read_parquet(out / "randomisation_checks.parquet")["passed"].dtype == "boolean"
    before = (out / "campaign_effects.parquet").read_bytes()

    calls = {"n": 0}
    real = api._to_parquet

    def failing(frame, path):
        calls["n"] += 1
        if calls["n"] == 3:
            raise OSError("disk full")
        real(frame, path)

    monkeypatch.setattr(api, "_to_parquet", failing)
    with pytest.raises(OSError, match="disk full"):
        write_campaign(readouts["PK"], out)
    assert (out / "campaign_effects.parquet").read_bytes() == before
    assert not (out / "campaign_PK.html").exists()
    assert not [p for p in out.iterdir() if p.name.startswith(".campaign-")]
