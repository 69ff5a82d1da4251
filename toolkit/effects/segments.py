"""Four response segments from predicted uplift and the purchase probability without the coupon.

- persuadable: predicted uplift >= ``uplift_threshold`` (buys because of the coupon)
- do_not_disturb: predicted uplift <= -``uplift_threshold`` (the coupon puts them off)
- sure_thing: |uplift| below the threshold and purchase probability without the coupon
  >= ``baseline_threshold`` (buys anyway: a coupon given to them is discount paid for nothing)
- lost_cause: |uplift| below the threshold and purchase probability below ``baseline_threshold``

The four names are the usual terms of the trade (common practice, no source). The thresholds are
always written beside the counts. The readout's default ``baseline_threshold`` is the holdout's
buying rate in the campaign window: a sure thing is more likely than the average customer to buy
anyway, whatever the offer.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

SEGMENTS = ("persuadable", "sure_thing", "lost_cause", "do_not_disturb")
UPLIFT_THRESHOLD = 0.02
SEGMENT_COLUMNS = ["segment", "customers", "share", "n_treated", "n_holdout", "redemption_rate", "discount_cost",
                   "treated_rate", "holdout_rate", "observed_uplift", "mean_predicted_uplift",
                   "mean_baseline_probability", "uplift_threshold", "baseline_threshold"]


def assign_segments(uplift, baseline_probability, *, uplift_threshold: float = UPLIFT_THRESHOLD,
                    baseline_threshold: float) -> np.ndarray:
    """Segment label per customer (see the module docstring)."""
    tau = np.asarray(uplift, dtype=float)
    base = np.asarray(baseline_probability, dtype=float)
    labels = np.where(base >= baseline_threshold, "sure_thing", "lost_cause").astype(object)
    labels[tau >= uplift_threshold] = "persuadable"
    labels[tau <= -uplift_threshold] = "do_not_disturb"
    return labels


def segment_table(*, segments, treated, outcome, redeemed, discount_amount, uplift, baseline_probability,
                  uplift_threshold: float, baseline_threshold: float) -> pd.DataFrame:
    """Counts, redemption and discount cost per segment (treated customers for redemption and cost)."""
    frame = pd.DataFrame({
        "segment": pd.Categorical(np.asarray(segments, dtype=object), categories=SEGMENTS),
        "treated": np.asarray(treated, dtype=bool),
        "outcome": np.asarray(outcome, dtype=float),
        "redeemed": np.asarray(redeemed, dtype=float),
        "discount": np.asarray(discount_amount, dtype=float),
        "uplift": np.asarray(uplift, dtype=float),
        "baseline": np.asarray(baseline_probability, dtype=float),
    })
    frame["t_outcome"] = np.where(frame["treated"], frame["outcome"], 0.0)
    frame["c_outcome"] = np.where(frame["treated"], 0.0, frame["outcome"])
    frame["t_redeemed"] = np.where(frame["treated"], frame["redeemed"], 0.0)
    frame["t_discount"] = np.where(frame["treated"], frame["discount"], 0.0)
    g = frame.groupby("segment", observed=False)
    out = pd.DataFrame({
        "customers": g.size(),
        "n_treated": g["treated"].sum(),
        "t_outcome": g["t_outcome"].sum(),
        "c_outcome": g["c_outcome"].sum(),
        "t_redeemed": g["t_redeemed"].sum(),
        "discount_cost": g["t_discount"].sum(),
        "mean_predicted_uplift": g["uplift"].mean(),
        "mean_baseline_probability": g["baseline"].mean(),
    }).reset_index()
    out["segment"] = out["segment"].astype(str)
    out["customers"] = out["customers"].astype(np.int64)
    out["n_treated"] = out["n_treated"].astype(np.int64)
    out["n_holdout"] = out["customers"] - out["n_treated"]
    total = out["customers"].sum()
    out["share"] = out["customers"] / total if total else np.nan
    with np.errstate(divide="ignore", invalid="ignore"):
        out["redemption_rate"] = np.where(out["n_treated"] > 0, out["t_redeemed"] / out["n_treated"], np.nan)
        out["treated_rate"] = np.where(out["n_treated"] > 0, out["t_outcome"] / out["n_treated"], np.nan)
        out["holdout_rate"] = np.where(out["n_holdout"] > 0, out["c_outcome"] / out["n_holdout"], np.nan)
    out["observed_uplift"] = out["treated_rate"] - out["holdout_rate"]
    out["uplift_threshold"] = float(uplift_threshold)
    out["baseline_threshold"] = float(baseline_threshold)
    return out[SEGMENT_COLUMNS]
