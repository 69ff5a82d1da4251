"""What a campaign earned and what it paid for nothing.

- incremental margin: lift in margin after discount per treated customer (campaign window plus
  the window after it, so pulled-forward orders are netted) x treated customers. The panel's
  margin is already after the discount, so the discount cost is inside it.
- net incremental margin: incremental margin minus the promotion's cost per redemption x redemptions.
- discount cost: discount paid on this promotion's lines by treated customers.
- return on discount: net incremental margin / (discount cost + redemption cost); above 0 the
  campaign paid for itself (a gain of 0.5 = 50 cents per unit spent).
- cost per incremental buyer: (discount + redemption cost) / incremental buyers in the campaign window.
- discount paid for nothing, two ways:
  ``subsidy_to_sure_things``: discount paid to treated customers the model calls sure things;
  ``discount_paid_to_non_incremental``: discount cost x the share of treated buyers who would
  have bought anyway, holdout rate / treated rate (an experiment-based figure that needs no model).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from .outcomes import lift_of

ECONOMICS_COLUMNS = [
    "promotion_id", "currency", "n_treated", "n_holdout", "redemptions", "redemption_rate",
    "discount_cost", "redemption_cost", "incremental_buyers", "incremental_buyers_ci_low", "incremental_buyers_ci_high",
    "incremental_net_revenue", "incremental_margin", "incremental_margin_ci_low", "incremental_margin_ci_high",
    "net_incremental_margin", "net_incremental_margin_ci_low", "net_incremental_margin_ci_high",
    "return_on_discount", "cost_per_incremental_buyer", "non_incremental_buyer_share",
    "discount_paid_to_non_incremental", "subsidy_to_sure_things", "holdout_discount", "method", "ci_level", "note",
]


def campaign_economics(panel: pd.DataFrame, effects: pd.DataFrame, *, promotion_id: str,
                       cost_per_redemption: float | None = None, segments=None, currency: str = "EUR",
                       treatment_col: str = "is_treated", method: str = "cuped") -> pd.DataFrame:
    """One-row economics table of a campaign (see the module docstring)."""
    t = panel[treatment_col].to_numpy(dtype=bool)
    redeemed = np.nan_to_num(panel["redeemed"].to_numpy(dtype=float))
    discount = np.nan_to_num(panel["discount_amount"].to_numpy(dtype=float))
    n_t, n_c = int(t.sum()), int((~t).sum())
    redemptions = float(redeemed[t].sum())
    discount_cost = float(discount[t].sum())
    holdout_discount = float(discount[~t].sum())
    notes = []
    if cost_per_redemption is None or not np.isfinite(cost_per_redemption):
        redemption_cost = 0.0
        notes.append("no cost_per_redemption on the promotion: only the discount is counted as cost")
    else:
        redemption_cost = float(cost_per_redemption) * redemptions
    if holdout_discount > 0:
        notes.append(f"holdout customers were paid {holdout_discount:,.2f} of this promotion's discount: the holdout "
                     "was not fully kept from the offer, so the lift is understated")
    buyers = lift_of(effects, "buyers", "during", method)
    margin = lift_of(effects, "margin_after_discount", "total", method)
    revenue = lift_of(effects, "net_revenue", "total", method)
    welch_buyers = lift_of(effects, "buyers", "during", "welch")
    cost = discount_cost + redemption_cost
    incremental_buyers = buyers["lift"] * n_t
    incremental_margin = margin["lift"] * n_t
    net_margin = incremental_margin - redemption_cost
    treated_rate, holdout_rate = welch_buyers["treated_mean"], welch_buyers["holdout_mean"]
    non_incremental = min(max(holdout_rate / treated_rate, 0.0), 1.0) if treated_rate > 0 else math.nan
    if segments is not None:
        labels = np.asarray(segments, dtype=object)
        subsidy = float(discount[t & (labels == "sure_thing")].sum())
    else:
        subsidy = math.nan
    row = {
        "promotion_id": promotion_id, "currency": currency, "n_treated": n_t, "n_holdout": n_c,
        "redemptions": redemptions, "redemption_rate": redemptions / n_t if n_t else math.nan,
        "discount_cost": discount_cost, "redemption_cost": redemption_cost,
        "incremental_buyers": incremental_buyers,
        "incremental_buyers_ci_low": buyers["lift_ci_low"] * n_t, "incremental_buyers_ci_high": buyers["lift_ci_high"] * n_t,
        "incremental_net_revenue": revenue["lift"] * n_t,
        "incremental_margin": incremental_margin,
        "incremental_margin_ci_low": margin["lift_ci_low"] * n_t, "incremental_margin_ci_high": margin["lift_ci_high"] * n_t,
        "net_incremental_margin": net_margin,
        "net_incremental_margin_ci_low": margin["lift_ci_low"] * n_t - redemption_cost,
        "net_incremental_margin_ci_high": margin["lift_ci_high"] * n_t - redemption_cost,
        "return_on_discount": net_margin / cost if cost > 0 else math.nan,
        "cost_per_incremental_buyer": cost / incremental_buyers if incremental_buyers > 0 else math.nan,
        "non_incremental_buyer_share": non_incremental,
        "discount_paid_to_non_incremental": discount_cost * non_incremental if np.isfinite(non_incremental) else math.nan,
        "subsidy_to_sure_things": subsidy, "holdout_discount": holdout_discount,
        "method": str(margin["method"]), "ci_level": float(margin["ci_level"]), "note": "; ".join(notes),
    }
    if not incremental_buyers > 0:
        row["note"] = "; ".join(notes + ["no positive incremental buyers: cost per incremental buyer is not defined"])
    return pd.DataFrame([row], columns=ECONOMICS_COLUMNS)
