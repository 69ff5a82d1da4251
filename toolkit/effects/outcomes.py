"""The campaign outcomes (buyers, orders, net revenue, margin after discount) in each window,
and the campaign_effects table built from them.

Windows: ``during`` the campaign, ``after`` it (the following ``after_days``), and ``total``
(= during + after; for buyers: bought in either window). Each outcome has a pre-period version
over a window of the campaign's length before it, used as the CUPED covariate.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import StatisticalWarning
from .holdout import HoldoutComparison


@dataclass(frozen=True)
class Outcome:
    name: str
    during: str
    after: str
    covariate: str
    binary: bool


OUTCOMES = (
    Outcome("buyers", "during_buyer", "after_buyer", "pre_buyer", True),
    Outcome("orders", "during_orders", "after_orders", "pre_orders", False),
    Outcome("net_revenue", "during_net_amount", "after_net_amount", "pre_net_amount", False),
    Outcome("margin_after_discount", "during_margin_amount", "after_margin_amount", "pre_margin_amount", False),
)
WINDOWS = ("during", "after", "total")
EFFECT_COLUMNS = ["promotion_id", "outcome", "window", "method", "treated_mean", "holdout_mean", "lift", "lift_se",
                  "lift_ci_low", "lift_ci_high", "relative_lift", "relative_lift_ci_low", "relative_lift_ci_high",
                  "p_value", "n_treated", "n_holdout", "variance_reduction", "ci_level", "is_randomised"]


def outcome_values(panel: pd.DataFrame, outcome: Outcome, window: str) -> np.ndarray:
    """Per-customer values of an outcome in a window (0 where the panel has no value)."""
    during = panel[outcome.during].to_numpy(dtype=float)
    after = panel[outcome.after].to_numpy(dtype=float)
    during = np.where(np.isnan(during), 0.0, during)
    after = np.where(np.isnan(after), 0.0, after)
    if window == "during":
        return during
    if window == "after":
        return after
    if window == "total":
        return np.maximum(during, after) if outcome.binary else during + after
    raise ValueError(f"window must be one of {WINDOWS}, found {window!r}")


def campaign_effects_table(panel: pd.DataFrame, *, promotion_id: str, alpha: float = 0.05,
                           treatment_col: str = "is_treated") -> tuple[pd.DataFrame, list[str]]:
    """Welch, CUPED and (buyers) Newcombe estimates for every outcome and window of one campaign.

    Returns the table (columns :data:`EFFECT_COLUMNS`, ``is_randomised`` True) and notes on
    outcomes that are constant.
    """
    notes: list[str] = []
    rows = []
    work = pd.DataFrame({treatment_col: panel[treatment_col].to_numpy(dtype=bool)})
    for outcome in OUTCOMES:
        covariate = panel[outcome.covariate].to_numpy(dtype=float)
        work["covariate"] = np.where(np.isnan(covariate), 0.0, covariate)
        for window in WINDOWS:
            work["y"] = outcome_values(panel, outcome, window)
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always", StatisticalWarning)
                fit = HoldoutComparison(alpha=alpha).fit(
                    work, outcome_col="y", treatment_col=treatment_col, covariate_col="covariate",
                    binary=outcome.binary,
                )
            if any(issubclass(w.category, StatisticalWarning) for w in caught):
                notes.append(f"{outcome.name} ({window}) is the same for every customer; its lift has no interval")
            summary = fit.summary.reset_index()
            summary["outcome"] = outcome.name
            summary["window"] = window
            rows.append(summary)
    table = pd.concat(rows, ignore_index=True)
    table["promotion_id"] = promotion_id
    table["is_randomised"] = True
    return table[EFFECT_COLUMNS], notes


def lift_of(effects: pd.DataFrame, outcome: str, window: str, method: str = "cuped") -> pd.Series:
    """One row of a campaign_effects table (falls back to welch, then doubly_robust, when the method is missing)."""
    sel = effects[(effects["outcome"] == outcome) & (effects["window"] == window)]
    for name in (method, "welch", "doubly_robust"):
        row = sel[sel["method"] == name]
        if len(row):
            return row.iloc[0]
    raise KeyError(f"no {outcome} ({window}) row in the effects table")
