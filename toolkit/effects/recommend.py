"""Next time: how deep to target, how much to keep random, how big a holdout.

Targeting depth. Customers are ranked by their out-of-fold predicted uplift. For the top 10%,
20%, ..., 100% the lift in margin after discount (campaign window plus the window after it) is
estimated by Welch's difference of means among those customers, and multiplied by their number:
the incremental margin a campaign sent only to them would have earned. The recommended depth is
the one where that total is largest, i.e. the deepest point before the next customers' expected
incremental margin turns negative; 0 when no depth earns a positive margin. It is read from this
campaign's customers, so it is optimistic where the curve is flat; its interval is shown.

Learning. Whatever the depth, ``untargeted_share`` of the next campaign's customers are given the
coupon at random (ignoring the scores) so that the next readout can check and refit the model, and
both parts keep a randomised holdout.

Holdout size. The minimum detectable effect (MDE) of this campaign's holdout for the buying rate
(power 0.8, the campaign's alpha; statsmodels NormalIndPower with Cohen's h) and the holdout a
target lift needs beside this many treated customers.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from .holdout import mean_difference
from .power import holdout_size_needed, minimum_detectable_rate_lift, rate_sample_size_per_arm

POWER = 0.8
DEPTH_COLUMNS = ["fraction_targeted", "customers", "n_treated", "n_holdout", "margin_lift_per_customer",
                 "margin_lift_ci_low", "margin_lift_ci_high", "incremental_margin", "incremental_margin_ci_low",
                 "incremental_margin_ci_high", "is_recommended"]
NEXT_COLUMNS = ["promotion_id", "recommended_depth", "untargeted_share", "targeted_share", "expected_incremental_margin",
                "expected_incremental_margin_ci_low", "expected_incremental_margin_ci_high",
                "all_customers_incremental_margin", "holdout_share_used", "n_treated", "n_holdout", "holdout_rate",
                "mde_buyers", "target_lift_buyers", "target_lift_source", "holdout_needed", "holdout_share_needed",
                "per_arm_equal_split", "power", "alpha", "currency", "recommendation"]


def targeting_depth_table(score, treated, margin, *, alpha: float = 0.05, steps: int = 10) -> pd.DataFrame:
    """Incremental margin of targeting the top 1/steps, 2/steps, ... of customers by score."""
    score = np.asarray(score, dtype=float)
    t = np.asarray(treated, dtype=bool)
    y = np.asarray(margin, dtype=float)
    n = score.size
    order = np.argsort(-score, kind="stable")
    rows = []
    for k in range(1, steps + 1):
        top = order[: int(round(n * k / steps))]
        tt, yy = t[top], y[top]
        if tt.sum() >= 2 and (~tt).sum() >= 2:
            comp = mean_difference(yy[tt], yy[~tt])
            low, high = comp.interval(alpha)
            lift = comp.lift
        else:
            lift = low = high = math.nan
        rows.append({"fraction_targeted": k / steps, "customers": int(top.size), "n_treated": int(tt.sum()),
                     "n_holdout": int((~tt).sum()), "margin_lift_per_customer": lift, "margin_lift_ci_low": low,
                     "margin_lift_ci_high": high, "incremental_margin": lift * top.size,
                     "incremental_margin_ci_low": low * top.size, "incremental_margin_ci_high": high * top.size})
    out = pd.DataFrame(rows, columns=DEPTH_COLUMNS[:-1])
    values = out["incremental_margin"].to_numpy()
    out["is_recommended"] = False
    if np.isfinite(values).any() and np.nanmax(values) > 0:
        out.loc[int(np.nanargmax(values)), "is_recommended"] = True
    return out


def next_campaign_table(*, promotion_id: str, depth: pd.DataFrame | None, n_treated: int, n_holdout: int,
                        holdout_rate: float, observed_lift: float, untargeted_share: float, alpha: float,
                        target_lift: float | None = None, currency: str = "EUR") -> pd.DataFrame:
    """One-row recommendation for the next campaign of this kind."""
    mde = minimum_detectable_rate_lift(n_treated=n_treated, n_holdout=n_holdout, holdout_rate=holdout_rate,
                                       alpha=alpha, power=POWER)
    if target_lift is not None:
        target, source = float(target_lift), "given"
    elif np.isfinite(observed_lift) and observed_lift > 0:
        target, source = float(observed_lift), "this campaign's lift in buyers (during)"
    else:
        target, source = math.nan, "none: this campaign showed no positive lift; give a target lift"
    needed = holdout_size_needed(target_lift=target, n_treated=n_treated, holdout_rate=holdout_rate,
                                 alpha=alpha, power=POWER) if np.isfinite(target) else math.nan
    equal = rate_sample_size_per_arm(holdout_rate=holdout_rate, target_lift=target, alpha=alpha, power=POWER)
    total = n_treated + n_holdout
    share_needed = needed / (needed + n_treated) if np.isfinite(needed) else (1.0 if needed == math.inf else math.nan)
    rec_depth = exp = exp_low = exp_high = all_margin = math.nan
    if depth is not None and len(depth):
        all_margin = float(depth["incremental_margin"].iloc[-1])
        chosen = depth[depth["is_recommended"]]
        if len(chosen):
            r = chosen.iloc[0]
            rec_depth = float(r["fraction_targeted"])
            exp, exp_low, exp_high = (float(r["incremental_margin"]), float(r["incremental_margin_ci_low"]),
                                      float(r["incremental_margin_ci_high"]))
        else:
            rec_depth, exp = 0.0, 0.0
    targeted_share = (1 - untargeted_share) * rec_depth if np.isfinite(rec_depth) else math.nan
    text = _sentence(rec_depth, untargeted_share, exp, exp_low, mde, target, needed, n_treated, n_holdout, alpha, currency)
    row = {
        "promotion_id": promotion_id, "recommended_depth": rec_depth, "untargeted_share": untargeted_share,
        "targeted_share": targeted_share, "expected_incremental_margin": exp,
        "expected_incremental_margin_ci_low": exp_low, "expected_incremental_margin_ci_high": exp_high,
        "all_customers_incremental_margin": all_margin, "holdout_share_used": n_holdout / total if total else math.nan,
        "n_treated": n_treated, "n_holdout": n_holdout, "holdout_rate": holdout_rate, "mde_buyers": mde,
        "target_lift_buyers": target, "target_lift_source": source, "holdout_needed": needed,
        "holdout_share_needed": share_needed, "per_arm_equal_split": equal, "power": POWER, "alpha": alpha,
        "currency": currency, "recommendation": text,
    }
    return pd.DataFrame([row], columns=NEXT_COLUMNS)


def _sentence(depth, untargeted, exp, exp_low, mde, target, needed, n_t, n_c, alpha, currency) -> str:
    parts = []
    if not np.isfinite(depth):
        parts.append("No targeting depth: the uplift models could not be fitted on this campaign.")
    elif depth == 0:
        parts.append("No targeting depth earned a positive margin after discount: do not repeat this offer as it is "
                     f"(still send it at random to {untargeted:.0%} with a holdout if you want to keep learning).")
    else:
        sure = "" if np.isfinite(exp_low) and exp_low > 0 else " (its interval includes zero: treat it as a guess)"
        parts.append(f"Send the offer to the top {depth:.0%} of scored customers by predicted uplift, which earned "
                     f"about {exp:,.0f} {currency} of incremental margin after discount here{sure}; "
                     f"send it at random to another {untargeted:.0%} so the next readout can check the model.")
    parts.append(f"This holdout ({n_c:,} beside {n_t:,} treated) detects a lift in buying rate of "
                 f"{mde * 100:.1f} points with power {POWER:.0%} at alpha {alpha:g}.")
    if np.isfinite(target):
        if needed == math.inf:
            parts.append(f"A lift of {target * 100:.1f} points cannot be detected with {n_t:,} treated customers at any holdout size.")
        elif np.isfinite(needed):
            parts.append(f"To detect a lift of {target * 100:.1f} points keep a holdout of at least {math.ceil(needed):,} customers.")
    return " ".join(parts)
