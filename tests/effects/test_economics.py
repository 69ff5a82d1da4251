"""Campaign economics on a small campaign worked by hand."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from toolkit.effects.economics import campaign_economics
from toolkit.effects.outcomes import campaign_effects_table


def _campaign():
    # 8 treated, 4 holdout. Treated: 4 buyers (3 redeemed a coupon worth 2.0 each); holdout: 1 buyer.
    # Margin after discount (during, after): treated buyers 10 - 2 = 8 when redeemed, 10 otherwise.
    rows = []
    for i in range(8):
        bought = i < 4
        redeemed = i < 3
        rows.append({"is_treated": True, "during_buyer": int(bought), "after_buyer": 0, "during_orders": int(bought),
                     "after_orders": 0, "during_net_amount": 25.0 * bought - 2.0 * redeemed, "after_net_amount": 0.0,
                     "during_margin_amount": (10.0 - 2.0 * redeemed) * bought, "after_margin_amount": 0.0,
                     "redeemed": int(redeemed), "discount_amount": 2.0 * redeemed})
    for i in range(4):
        bought = i < 1
        rows.append({"is_treated": False, "during_buyer": int(bought), "after_buyer": 0, "during_orders": int(bought),
                     "after_orders": 0, "during_net_amount": 25.0 * bought, "after_net_amount": 0.0,
                     "during_margin_amount": 10.0 * bought, "after_margin_amount": 0.0, "redeemed": 0,
                     "discount_amount": 0.0})
    frame = pd.DataFrame(rows)
    for col in ("pre_buyer", "pre_orders", "pre_net_amount", "pre_margin_amount"):
        frame[col] = 0.0
    return frame


def test_economics_worked_by_hand():
    frame = _campaign()
    effects, _ = campaign_effects_table(frame, promotion_id="P")
    segments = np.array(["sure_thing"] * 2 + ["persuadable"] * 6 + ["lost_cause"] * 4)
    row = campaign_economics(frame, effects, promotion_id="P", cost_per_redemption=0.5, segments=segments).iloc[0]
    # buying rate 4/8 vs 1/4: lift 0.25 x 8 treated = 2 incremental buyers
    assert row["incremental_buyers"] == pytest.approx(2.0)
    # margin per treated (8+8+8+10)/8 = 4.25 vs holdout 10/4 = 2.5: lift 1.75 x 8 = 14
    assert row["incremental_margin"] == pytest.approx(14.0)
    assert row["discount_cost"] == pytest.approx(6.0) and row["redemption_cost"] == pytest.approx(1.5)
    assert row["net_incremental_margin"] == pytest.approx(12.5)
    assert row["return_on_discount"] == pytest.approx(12.5 / 7.5)
    assert row["cost_per_incremental_buyer"] == pytest.approx(7.5 / 2)
    # holdout rate / treated rate = 0.25 / 0.5: half the treated buyers would have bought anyway
    assert row["non_incremental_buyer_share"] == pytest.approx(0.5)
    assert row["discount_paid_to_non_incremental"] == pytest.approx(3.0)
    assert row["subsidy_to_sure_things"] == pytest.approx(4.0)  # customers 0 and 1 redeemed 2.0 each


def test_holdout_discount_and_missing_cost_are_noted():
    frame = _campaign()
    frame.loc[frame.index[-1], "discount_amount"] = 1.0  # a holdout customer got the discount somehow
    effects, _ = campaign_effects_table(frame, promotion_id="P")
    row = campaign_economics(frame, effects, promotion_id="P", cost_per_redemption=None).iloc[0]
    assert row["redemption_cost"] == 0 and "no cost_per_redemption" in row["note"]
    assert "holdout customers were paid" in row["note"] and row["holdout_discount"] == pytest.approx(1.0)
    assert np.isnan(row["subsidy_to_sure_things"])
