"""Qini curve, Qini coefficient and AUUC on examples worked by hand (Radcliffe 2007; Gutierrez & Gérardy 2017)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from toolkit.effects.qini import (
    area_under_uplift_curve,
    decile_of,
    qini_coefficient,
    qini_curve,
    qini_points,
    uplift_by_decile,
)

# Six customers, already in score order (worked by hand):
#
#   score  arm  bought | after k: n_t n_c y_t y_c | g(k) = y_t - y_c n_t / n_c | g / N_t (N_t = 3)
#   0.9    T    1      | k=1      1   0   1   0   | 1 - 0           = 1        | 1/3
#   0.8    C    0      | k=2      1   1   1   0   | 1 - 0 * 1/1     = 1        | 1/3
#   0.7    T    1      | k=3      2   1   2   0   | 2 - 0 * 2/1     = 2        | 2/3
#   0.6    C    1      | k=4      2   2   2   1   | 2 - 1 * 2/2     = 1        | 1/3
#   0.5    T    0      | k=5      3   2   2   1   | 2 - 1 * 3/2     = 0.5      | 1/6
#   0.4    C    1      | k=6      3   3   2   2   | 2 - 2 * 3/3     = 0        | 0
#
# The random line ends at g(6) / 3 = 0, so it is 0 everywhere. With points every 1/6 the
# trapezoid area is (1/6) (0/2 + 1/3 + 1/3 + 2/3 + 1/3 + 1/6 + 0/2) = (1/6)(11/6) = 11/36.
#
# Uplift curve u(k) = (y_t/n_t - y_c/n_c) (n_t + n_c) / N with N = 6 (a rate is 0 while its arm is empty):
#   k=1: (1 - 0) 1/6 = 1/6;  k=2: (1 - 0) 2/6 = 2/6;  k=3: (1 - 0) 3/6 = 3/6;
#   k=4: (1 - 1/2) 4/6 = 2/6;  k=5: (2/3 - 1/2) 5/6 = 5/36;  k=6: (2/3 - 2/3) = 0.
# AUUC = (1/6) (1/6 + 2/6 + 3/6 + 2/6 + 5/36) = (1/6)(53/36) = 53/216.
SCORE = np.array([0.9, 0.8, 0.7, 0.6, 0.5, 0.4])
TREATED = np.array([True, False, True, False, True, False])
BOUGHT = np.array([1, 0, 1, 1, 0, 1])


def test_qini_curve_matches_the_hand_worked_example():
    points = qini_points(SCORE, TREATED, BOUGHT)
    assert points["fraction_targeted"].tolist() == pytest.approx([0, 1 / 6, 2 / 6, 3 / 6, 4 / 6, 5 / 6, 1])
    assert points["qini"].tolist() == pytest.approx([0, 1 / 3, 1 / 3, 2 / 3, 1 / 3, 1 / 6, 0])
    assert points["random"].tolist() == pytest.approx([0] * 7)
    assert qini_coefficient(SCORE, TREATED, BOUGHT) == pytest.approx(11 / 36, rel=1e-12)


def test_auuc_matches_the_hand_worked_example():
    points = qini_points(SCORE, TREATED, BOUGHT)
    assert points["uplift_curve"].tolist() == pytest.approx([0, 1 / 6, 2 / 6, 3 / 6, 2 / 6, 5 / 36, 0])
    assert area_under_uplift_curve(SCORE, TREATED, BOUGHT) == pytest.approx(53 / 216, rel=1e-12)


def test_input_order_does_not_matter_and_ties_are_taken_together():
    # Shuffled rows give the same curve.
    order = np.array([3, 0, 5, 1, 4, 2])
    assert qini_coefficient(SCORE[order], TREATED[order], BOUGHT[order]) == pytest.approx(11 / 36, rel=1e-12)
    # Ties (worked by hand): scores 0.5, 0.5, 0.1, 0.1; arms T, C, T, C; bought 1, 0, 0, 1; N_t = 2.
    # Points only where the score changes: k=2: g = 1 - 0 = 1 -> 1/2; k=4: g = 1 - 1 * 2/2 = 0.
    # Curve (0, 0), (0.5, 0.5), (1, 0); random line 0; area 0.25 whatever the order inside a tie.
    score = np.array([0.5, 0.5, 0.1, 0.1])
    treated = np.array([True, False, True, False])
    bought = np.array([1, 0, 0, 1])
    assert qini_points(score, treated, bought)["qini"].tolist() == pytest.approx([0, 0.5, 0])
    assert qini_coefficient(score, treated, bought) == pytest.approx(0.25)
    flipped = np.array([1, 0, 3, 2])
    assert qini_coefficient(score[flipped], treated[flipped], bought[flipped]) == pytest.approx(0.25)


def test_curve_end_is_the_average_lift_and_random_scores_give_about_zero():
    rng = np.random.default_rng(5)
    n = 200_000
    treated = rng.random(n) < 0.7
    true_uplift = rng.uniform(0, 0.2, n)
    bought = (rng.random(n) < 0.1 + true_uplift * treated).astype(int)
    curve = qini_curve(true_uplift, treated, bought)
    assert len(curve) == 101
    average_lift = bought[treated].mean() - bought[~treated].mean()
    assert curve["qini"].iloc[-1] == pytest.approx(average_lift, rel=1e-9)
    assert curve["random"].iloc[-1] == pytest.approx(average_lift, rel=1e-9)
    assert qini_coefficient(rng.random(n), treated, bought) == pytest.approx(0.0, abs=0.003)
    # ranking by the true uplift: area of a concave curve over a line rising to 0.1,
    # for uplift ~ U(0, 0.2) the curve is 0.2 f - 0.1 f^2, so the area above the line is 0.1/6
    assert qini_coefficient(true_uplift, treated, bought) == pytest.approx(0.1 / 6, rel=0.08)


def test_uplift_by_decile_counts_and_rates():
    n = 100
    score = np.arange(n, 0, -1, dtype=float)  # customer 0 has the highest score
    treated = np.arange(n) % 2 == 0
    bought = np.where(np.arange(n) < 10, treated, 0).astype(int)  # in decile 1 every treated customer buys
    table = uplift_by_decile(score, treated, bought)
    assert table["decile"].tolist() == list(range(1, 11))
    assert table["n_treated"].tolist() == [5] * 10 and table["n_holdout"].tolist() == [5] * 10
    assert table.loc[0, ["treated_rate", "holdout_rate", "uplift"]].tolist() == [1.0, 0.0, 1.0]
    assert (table.loc[1:, "uplift"] == 0).all()
    assert decile_of(score)[:10].tolist() == [1] * 10 and decile_of(score)[-1] == 10
    assert isinstance(table, pd.DataFrame)
