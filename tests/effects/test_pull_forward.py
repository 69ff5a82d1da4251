"""Pull-forward share from the during and after lifts in orders."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from toolkit.effects.pull_forward import pull_forward_table


def _frame(during_t, after_t, during_c, after_c):
    n_t, n_c = len(during_t), len(during_c)
    return pd.DataFrame({
        "is_treated": [True] * n_t + [False] * n_c,
        "during_orders": during_t + during_c, "after_orders": after_t + after_c,
        "pre_orders": [1] * (n_t + n_c),  # constant covariate: CUPED changes nothing
    })


def test_share_is_minus_after_over_during_worked_by_hand():
    # treated: during mean 1.0, after mean 0.5; holdout: during 0.5, after 0.75
    # during lift 0.5, after lift -0.25 -> share 0.5; net lift 0.25 per customer, x 4 treated = 1 order
    frame = _frame([1, 1, 1, 1], [0, 1, 0, 1], [0, 1, 0, 1], [1, 1, 0, 1])
    row = pull_forward_table(frame, promotion_id="P").iloc[0]
    assert row["during_lift_orders"] == pytest.approx(0.5)
    assert row["after_lift_orders"] == pytest.approx(-0.25)
    assert row["net_lift_orders"] == pytest.approx(0.25)
    assert row["net_incremental_orders"] == pytest.approx(1.0)


def test_known_giveback_is_recovered_with_positive_sign(panel_factory):
    """Synthetic campaigns give back 60% of the during-bump in buyers afterwards: the share is positive."""
    shares = []
    for seed in range(6):
        panel = panel_factory(customers=6000, seed=40 + seed, after_giveback=0.6)
        row = pull_forward_table(panel, promotion_id="P").iloc[0]
        shares.append(row["pull_forward_share"])
        assert row["pull_forward_share_ci_low"] < row["pull_forward_share"] < row["pull_forward_share_ci_high"]
    assert np.median(shares) > 0.2


def test_no_positive_during_lift_leaves_the_share_undefined():
    frame = _frame([0, 1, 0, 0], [0, 0, 1, 0], [1, 1, 0, 0], [0, 0, 0, 1])
    row = pull_forward_table(frame, promotion_id="P").iloc[0]
    assert np.isnan(row["pull_forward_share"]) and "no positive lift" in row["note"]
