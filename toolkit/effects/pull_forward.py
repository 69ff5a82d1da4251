"""How much of a campaign's order bump was only pulled forward from the weeks after it.

With D the lift in orders per treated customer during the campaign and A the lift in the window
after it, the pull-forward share is -A / D: the part of the during-bump given back afterwards
(0 = none, 1 = all of it, negative = the campaign kept lifting orders after it ended). Both lifts
are CUPED estimates on pre-period orders (Deng et al. 2013); the interval of the share is the
delta method with the covariance of D and A, which come from the same customers
(common practice, no source). The share is only read when D is clearly positive.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import stats

PULL_FORWARD_COLUMNS = [
    "promotion_id", "during_lift_orders", "during_lift_ci_low", "during_lift_ci_high",
    "after_lift_orders", "after_lift_ci_low", "after_lift_ci_high",
    "pull_forward_share", "pull_forward_share_ci_low", "pull_forward_share_ci_high",
    "net_lift_orders", "net_lift_ci_low", "net_lift_ci_high",
    "n_treated", "n_holdout", "during_incremental_orders", "after_incremental_orders", "net_incremental_orders",
    "method", "ci_level", "note",
]


def _adjust(y: np.ndarray, x: np.ndarray) -> np.ndarray:
    var_x = x.var(ddof=1) if x.size > 1 else 0.0
    if var_x <= 0:
        return y
    theta = np.cov(y, x, ddof=1)[0, 1] / var_x
    return y - theta * (x - x.mean())


def pull_forward_table(panel: pd.DataFrame, *, promotion_id: str, alpha: float = 0.05,
                       treatment_col: str = "is_treated") -> pd.DataFrame:
    """One-row pull_forward table of a campaign (see the module docstring)."""
    t = panel[treatment_col].to_numpy(dtype=bool)
    x = np.nan_to_num(panel["pre_orders"].to_numpy(dtype=float))
    during = _adjust(np.nan_to_num(panel["during_orders"].to_numpy(dtype=float)), x)
    after = _adjust(np.nan_to_num(panel["after_orders"].to_numpy(dtype=float)), x)
    n_t, n_c = int(t.sum()), int((~t).sum())
    z = stats.norm.ppf(1 - alpha / 2)

    def arm_moments(mask):
        d, a = during[mask], after[mask]
        if mask.sum() < 2:
            return d.mean() if d.size else math.nan, a.mean() if a.size else math.nan, math.nan, math.nan, math.nan
        cov = np.cov(d, a, ddof=1)
        n = mask.sum()
        return d.mean(), a.mean(), cov[0, 0] / n, cov[1, 1] / n, cov[0, 1] / n

    dt, at, vdt, vat, cdt = arm_moments(t)
    dc, ac, vdc, vac, cdc = arm_moments(~t)
    d_lift, a_lift = dt - dc, at - ac
    var_d, var_a, cov_da = vdt + vdc, vat + vac, cdt + cdc
    se_d, se_a = math.sqrt(var_d), math.sqrt(var_a)
    se_net = math.sqrt(max(var_d + var_a + 2 * cov_da, 0.0))
    note = ""
    if d_lift > 0 and np.isfinite(se_d) and d_lift - z * se_d > 0:
        share = -a_lift / d_lift
        var_share = var_a / d_lift**2 + a_lift**2 * var_d / d_lift**4 - 2 * a_lift * cov_da / d_lift**3
        se_share = math.sqrt(max(var_share, 0.0))
        share_low, share_high = share - z * se_share, share + z * se_share
    elif d_lift > 0:
        share = -a_lift / d_lift
        share_low = share_high = math.nan
        note = "the lift in orders during the campaign is not clearly above zero; the pull-forward share is too noisy to read"
    else:
        share = share_low = share_high = math.nan
        note = "no positive lift in orders during the campaign; nothing was pulled forward"
    net = d_lift + a_lift
    row = {
        "promotion_id": promotion_id,
        "during_lift_orders": d_lift, "during_lift_ci_low": d_lift - z * se_d, "during_lift_ci_high": d_lift + z * se_d,
        "after_lift_orders": a_lift, "after_lift_ci_low": a_lift - z * se_a, "after_lift_ci_high": a_lift + z * se_a,
        "pull_forward_share": share, "pull_forward_share_ci_low": share_low, "pull_forward_share_ci_high": share_high,
        "net_lift_orders": net, "net_lift_ci_low": net - z * se_net, "net_lift_ci_high": net + z * se_net,
        "n_treated": n_t, "n_holdout": n_c,
        "during_incremental_orders": d_lift * n_t, "after_incremental_orders": a_lift * n_t,
        "net_incremental_orders": net * n_t, "method": "cuped", "ci_level": 1 - alpha, "note": note,
    }
    return pd.DataFrame([row], columns=PULL_FORWARD_COLUMNS)
