"""How well a ranking of customers by predicted uplift finds the incremental ones.

Rank customers from the highest predicted uplift down; after the top k customers count treated
customers n_t(k), holdout customers n_c(k), and buyers among them y_t(k), y_c(k).

- Qini curve (Radcliffe 2007, "Using control groups to target on predicted lift"):
  g(k) = y_t(k) - y_c(k) n_t(k) / n_c(k), the incremental buyers in the treated arm's scale
  (the holdout term counts as 0 while n_c(k) = 0). We divide by the treated total N_t, so the
  curve at fraction 1 equals the campaign's average lift in buying rate, and curves of
  campaigns of different sizes can be compared.
- Random line: a straight line from (0, 0) to (1, g(N) / N_t), what a random ordering gives on average.
- Qini coefficient: area between the Qini curve and the random line over the fraction targeted
  (trapezoid rule). Zero for a ranking no better than chance.
- Uplift curve and AUUC (Gutierrez & Gérardy 2017, "Causal inference and uplift modelling: a
  review of the literature"): u(k) = (y_t(k)/n_t(k) - y_c(k)/n_c(k)) (n_t(k) + n_c(k)), divided
  by the number of customers N; AUUC is the area under it.

Customers with equal scores are taken together: the curves have a point only where the score
changes, so the result does not depend on the order of ties. Everything is one sort and cumulative
sums: O(n log n), fine for millions of customers.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

GRID_POINTS = 101
DECILE_COLUMNS = ["decile", "n_treated", "n_holdout", "treated_rate", "holdout_rate", "uplift",
                  "mean_predicted_uplift", "score_min", "score_max"]


def _cumulative(score: np.ndarray, treated: np.ndarray, outcome: np.ndarray):
    score = np.asarray(score, dtype=float)
    treated = np.asarray(treated, dtype=bool)
    outcome = np.asarray(outcome, dtype=float)
    if not (score.shape == treated.shape == outcome.shape):
        raise ValueError("score, treated and outcome must have the same length")
    order = np.argsort(-score, kind="stable")
    s, t, y = score[order], treated[order], outcome[order]
    n_t = np.cumsum(t)
    n_c = np.cumsum(~t)
    y_t = np.cumsum(np.where(t, y, 0.0))
    y_c = np.cumsum(np.where(t, 0.0, y))
    # keep the last position of each run of equal scores
    last = np.r_[s[1:] != s[:-1], True]
    return n_t[last], n_c[last], y_t[last], y_c[last]


def qini_points(score, treated, outcome) -> pd.DataFrame:
    """The Qini and uplift curves at every distinct score cut-off, starting from (0, 0).

    Returns
    -------
    DataFrame
        fraction_targeted, qini, random, uplift_curve (see the module docstring for the scaling).
    """
    n_t, n_c, y_t, y_c = _cumulative(score, treated, outcome)
    total = n_t + n_c
    big_n = total[-1] if total.size else 0
    big_nt = n_t[-1] if n_t.size else 0
    if big_n == 0 or big_nt == 0:
        return pd.DataFrame({"fraction_targeted": [0.0], "qini": [0.0], "random": [0.0], "uplift_curve": [0.0]})
    with np.errstate(divide="ignore", invalid="ignore"):
        holdout_term = np.where(n_c > 0, y_c * n_t / np.maximum(n_c, 1), 0.0)
        rate_t = np.where(n_t > 0, y_t / np.maximum(n_t, 1), 0.0)
        rate_c = np.where(n_c > 0, y_c / np.maximum(n_c, 1), 0.0)
    qini = (y_t - holdout_term) / big_nt
    uplift_curve = (rate_t - rate_c) * total / big_n
    fraction = total / big_n
    fraction = np.r_[0.0, fraction]
    qini = np.r_[0.0, qini]
    uplift_curve = np.r_[0.0, uplift_curve]
    return pd.DataFrame({"fraction_targeted": fraction, "qini": qini, "random": fraction * qini[-1],
                         "uplift_curve": uplift_curve})


def qini_coefficient(score, treated, outcome) -> float:
    """Area between the Qini curve and the random line (see the module docstring)."""
    pts = qini_points(score, treated, outcome)
    return float(np.trapezoid(pts["qini"] - pts["random"], pts["fraction_targeted"]))


def area_under_uplift_curve(score, treated, outcome) -> float:
    """AUUC: area under the uplift curve, per customer (see the module docstring)."""
    pts = qini_points(score, treated, outcome)
    return float(np.trapezoid(pts["uplift_curve"], pts["fraction_targeted"]))


def qini_curve(score, treated, outcome, *, points: int = GRID_POINTS) -> pd.DataFrame:
    """The Qini curve and random line on an even grid of fractions targeted (for tables and charts).

    The grid values are linear interpolations of :func:`qini_points`; coefficients are computed on
    the full curve, not on the grid.
    """
    pts = qini_points(score, treated, outcome)
    grid = np.linspace(0.0, 1.0, points)
    return pd.DataFrame({
        "fraction_targeted": grid,
        "qini": np.interp(grid, pts["fraction_targeted"], pts["qini"]),
        "random": grid * pts["qini"].iloc[-1],
        "uplift_curve": np.interp(grid, pts["fraction_targeted"], pts["uplift_curve"]),
    })


def decile_of(score) -> np.ndarray:
    """Decile 1 (highest predicted uplift) to 10 by rank; ties are split in their stored order."""
    score = np.asarray(score, dtype=float)
    n = score.size
    order = np.argsort(-score, kind="stable")
    deciles = np.empty(n, dtype=np.int64)
    deciles[order] = np.arange(n) * 10 // max(n, 1) + 1
    return deciles


def uplift_by_decile(score, treated, outcome) -> pd.DataFrame:
    """Observed buying rates of each arm and their difference within each decile of the score."""
    score = np.asarray(score, dtype=float)
    treated = np.asarray(treated, dtype=bool)
    outcome = np.asarray(outcome, dtype=float)
    deciles = decile_of(score)
    k = 11
    n_t = np.bincount(deciles, weights=treated, minlength=k)[1:]
    n_c = np.bincount(deciles, weights=~treated, minlength=k)[1:]
    y_t = np.bincount(deciles, weights=np.where(treated, outcome, 0.0), minlength=k)[1:]
    y_c = np.bincount(deciles, weights=np.where(treated, 0.0, outcome), minlength=k)[1:]
    n_all = np.bincount(deciles, minlength=k)[1:]
    s_sum = np.bincount(deciles, weights=score, minlength=k)[1:]
    with np.errstate(divide="ignore", invalid="ignore"):
        treated_rate = np.where(n_t > 0, y_t / n_t, np.nan)
        holdout_rate = np.where(n_c > 0, y_c / n_c, np.nan)
        mean_score = np.where(n_all > 0, s_sum / n_all, np.nan)
    s_min = pd.Series(score).groupby(deciles).min().reindex(range(1, 11)).to_numpy()
    s_max = pd.Series(score).groupby(deciles).max().reindex(range(1, 11)).to_numpy()
    out = pd.DataFrame({
        "decile": np.arange(1, 11), "n_treated": n_t.astype(np.int64), "n_holdout": n_c.astype(np.int64),
        "treated_rate": treated_rate, "holdout_rate": holdout_rate, "uplift": treated_rate - holdout_rate,
        "mean_predicted_uplift": mean_score, "score_min": s_min, "score_max": s_max,
    })
    return out[(out["n_treated"] + out["n_holdout"]) > 0].reset_index(drop=True)
