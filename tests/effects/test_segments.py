"""Segments from predicted uplift and the purchase chance without the coupon (rules stated in segments.py)."""

from __future__ import annotations

import numpy as np
import pytest

from toolkit.effects.segments import SEGMENTS, assign_segments, segment_table


def test_segment_rules_by_hand():
    # uplift, baseline -> expected (thresholds 0.02 and 0.3; common practice, no source)
    cases = [(0.05, 0.1, "persuadable"), (0.02, 0.9, "persuadable"), (-0.02, 0.9, "do_not_disturb"),
             (-0.2, 0.0, "do_not_disturb"), (0.0, 0.3, "sure_thing"), (0.019, 0.8, "sure_thing"),
             (0.0, 0.29, "lost_cause"), (-0.019, 0.0, "lost_cause")]
    uplift, baseline, expected = zip(*cases)
    labels = assign_segments(uplift, baseline, uplift_threshold=0.02, baseline_threshold=0.3)
    assert labels.tolist() == list(expected)


def test_segment_table_counts_redemptions_and_discount_of_treated_customers():
    segments = np.array(["persuadable", "persuadable", "sure_thing", "sure_thing", "lost_cause", "persuadable"])
    treated = np.array([True, False, True, True, True, True])
    bought = np.array([1, 0, 1, 1, 0, 1])
    redeemed = np.array([1, 0, 1, 0, 0, 1])
    discount = np.array([5.0, 9.0, 4.0, 0.0, 0.0, 3.0])  # the holdout's 9.0 must not count
    table = segment_table(segments=segments, treated=treated, outcome=bought, redeemed=redeemed,
                          discount_amount=discount, uplift=np.array([0.1, 0.1, 0, 0, 0, 0.1]),
                          baseline_probability=np.full(6, 0.2), uplift_threshold=0.02, baseline_threshold=0.15)
    table = table.set_index("segment")
    assert list(table.index) == list(SEGMENTS)
    assert table.loc["persuadable", "customers"] == 3 and table.loc["persuadable", "n_treated"] == 2
    assert table.loc["persuadable", "discount_cost"] == pytest.approx(8.0)
    assert table.loc["persuadable", "redemption_rate"] == pytest.approx(1.0)
    assert table.loc["sure_thing", "redemption_rate"] == pytest.approx(0.5)
    assert table.loc["persuadable", "observed_uplift"] == pytest.approx(1.0 - 0.0)
    assert table.loc["do_not_disturb", "customers"] == 0
    assert table["share"].sum() == pytest.approx(1.0)
    assert (table["uplift_threshold"] == 0.02).all() and (table["baseline_threshold"] == 0.15).all()
