"""The report's own results tables, derived from the analyses' tables (never in a template).

* ``quarter_campaigns``: the promotions that started in the quarter and what became of each;
* ``event_study``: orders per assigned customer by week around each targeted campaign's start,
  treated vs holdout and their difference (``sql/report/event_study_weekly.sql`` aggregates);
* ``uplift_tails``: the effect by uplift decile and by segment with an interval, flagged when a
  group moves against its campaign's average;
* ``quarter_economics``: the quarter's short-term gains and what they cost later, summed over its
  campaigns.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import stats

from ... import sqlfiles
from ...effects.holdout import newcombe_interval

SQL_DIR = sqlfiles.folder("report")  # sql/report in a clone, toolkit/sql/report in an installed package

QUARTER_CAMPAIGN_COLUMNS = ["promotion_id", "name", "audience", "mechanic", "depth", "starts_on", "ends_on", "status",
                            "randomisation_check", "n_treated", "n_holdout"]
EVENT_COLUMNS = ["promotion_id", "arm", "week", "week_starts_on", "customers", "orders", "mean_orders", "ci_low",
                 "ci_high", "ci_level", "is_complete_week"]
TAIL_COLUMNS = ["promotion_id", "group_kind", "group", "customers", "n_treated", "n_holdout", "treated_rate",
                "holdout_rate", "uplift", "ci_low", "ci_high", "ci_level", "average_lift", "average_ci_low",
                "average_ci_high", "is_against_average", "method"]
ECONOMICS_COLUMNS = ["item", "estimate", "ci_low", "ci_high", "ci_level", "campaigns", "customers", "unit", "method",
                     "note"]


def sql_text(name: str) -> str:
    return (SQL_DIR / f"{name}.sql").read_text(encoding="utf-8")


def quarter_campaigns(promotions: pd.DataFrame, status: dict, tables: dict) -> pd.DataFrame:
    """One row per promotion that started in the quarter."""
    economics = tables.get("campaign_economics")
    checks = {}
    if economics is not None and len(economics):
        for r in economics.itertuples():
            checks[str(r.promotion_id)] = (getattr(r, "randomisation_check", None), r.n_treated, r.n_holdout)
    rows = []
    for p in promotions.itertuples():
        pid = str(p.promotion_id)
        check, n_t, n_h = checks.get(pid, (None, None, None))
        if p.audience == "broadcast":
            state = "broadcast sale: counterfactual estimate (long-run analysis)"
        else:
            state = status.get(pid, "not analysed")
        rows.append({
            "promotion_id": pid, "name": p.name if isinstance(p.name, str) else None, "audience": p.audience,
            "mechanic": p.mechanic, "depth": p.depth, "starts_on": pd.Timestamp(p.starts_at).date(),
            "ends_on": pd.Timestamp(p.ends_at).date(), "status": state, "randomisation_check": check,
            "n_treated": n_t, "n_holdout": n_h,
        })
    frame = pd.DataFrame(rows, columns=QUARTER_CAMPAIGN_COLUMNS)
    for col in ("n_treated", "n_holdout"):
        frame[col] = pd.array(frame[col], dtype="Int64")
    frame["depth"] = pd.to_numeric(frame["depth"], errors="coerce")
    return frame


def event_study(con, promotion_ids: list[str], *, weeks_before: int, weeks_after: int, alpha: float) -> pd.DataFrame:
    """Weekly orders per assigned customer around each campaign's start, by arm, with the difference.

    Means and their normal-approximation intervals come from the per-week sums and sums of squares
    that the SQL aggregates (customers without an order in a week count as zero). The difference
    row is treated minus holdout with the Welch standard error of two independent means (common
    practice, no source).
    """
    if not promotion_ids:
        return pd.DataFrame(columns=EVENT_COLUMNS)
    cur = con.cursor()
    cur.execute("SET VARIABLE promotion_ids = ?", [list(promotion_ids)])
    cur.execute("SET VARIABLE weeks_before = ?", [int(weeks_before)])
    cur.execute("SET VARIABLE weeks_after = ?", [int(weeks_after)])
    weekly = cur.execute(sql_text("event_study_weekly")).df()
    cur.close()
    if weekly.empty:
        return pd.DataFrame(columns=EVENT_COLUMNS)
    z = float(stats.norm.ppf(1 - alpha / 2))
    n = weekly["customers"].astype(float)
    mean = weekly["orders"] / n
    variance = (weekly["orders_squared"] / n - mean ** 2).clip(lower=0) * n / (n - 1).clip(lower=1)
    se = np.sqrt(variance / n)
    weekly["mean_orders"] = mean
    weekly["se"] = se
    weekly["ci_low"] = mean - z * se
    weekly["ci_high"] = mean + z * se
    weekly["ci_level"] = 1 - alpha
    arms = weekly.pivot_table(index=["promotion_id", "week"], columns="arm",
                              values=["mean_orders", "se", "customers", "orders"], aggfunc="first")
    diff_rows = []
    if ("mean_orders", "treatment") in arms.columns and ("mean_orders", "holdout") in arms.columns:
        meta = weekly.drop_duplicates(["promotion_id", "week"]).set_index(["promotion_id", "week"])
        for key, r in arms.iterrows():
            if pd.isna(r[("mean_orders", "holdout")]) or pd.isna(r[("mean_orders", "treatment")]):
                continue
            d = r[("mean_orders", "treatment")] - r[("mean_orders", "holdout")]
            s = math.sqrt(r[("se", "treatment")] ** 2 + r[("se", "holdout")] ** 2)
            diff_rows.append({
                "promotion_id": key[0], "arm": "difference", "week": key[1],
                "week_starts_on": meta.loc[key, "week_starts_on"],
                "customers": int(r[("customers", "treatment")] + r[("customers", "holdout")]),
                "orders": int(r[("orders", "treatment")] + r[("orders", "holdout")]), "mean_orders": d,
                "ci_low": d - z * s, "ci_high": d + z * s, "ci_level": 1 - alpha,
                "is_complete_week": bool(meta.loc[key, "is_complete_week"]),
            })
    out = pd.concat([weekly[EVENT_COLUMNS], pd.DataFrame(diff_rows, columns=EVENT_COLUMNS)], ignore_index=True)
    out["week"] = out["week"].astype(int)
    out["customers"] = out["customers"].astype("int64")
    out["orders"] = out["orders"].astype("int64")
    out["is_complete_week"] = out["is_complete_week"].astype(bool)
    order = {"treatment": 0, "holdout": 1, "difference": 2}
    out = out.sort_values(["promotion_id", "arm", "week"], key=lambda c: c.map(order) if c.name == "arm" else c)
    return out.reset_index(drop=True)


def _average_effects(effects: pd.DataFrame | None) -> dict:
    """Each campaign's average effect on buyers during the campaign (randomised contrast: Welch)."""
    if effects is None or effects.empty:
        return {}
    rows = effects[(effects["outcome"] == "buyers") & (effects["window"] == "during")]
    out = {}
    for method in ("newcombe", "welch", "doubly_robust"):
        for r in rows[rows["method"] == method].itertuples():
            out.setdefault(str(r.promotion_id), (r.lift, r.lift_ci_low, r.lift_ci_high))
    return out


def uplift_tails(tables: dict, *, alpha: float) -> pd.DataFrame:
    """The buying-rate effect by uplift decile and by segment, with Newcombe intervals.

    A group moves against the average when its interval excludes zero on the side opposite to
    the campaign's average effect (buyers during the campaign) whose own interval excludes zero.
    Newcombe's hybrid score interval for a difference of proportions: Newcombe (1998), method 10.
    """
    averages = _average_effects(tables.get("campaign_effects"))
    rows = []
    for kind, name, label in (("decile", "uplift_deciles", "decile"), ("segment", "uplift_segments", "segment")):
        frame = tables.get(name)
        if frame is None or frame.empty:
            continue
        for r in frame.itertuples():
            n_t, n_h = int(r.n_treated), int(r.n_holdout)
            if n_t > 0 and n_h > 0 and pd.notna(r.treated_rate) and pd.notna(r.holdout_rate):
                low, high = newcombe_interval(round(r.treated_rate * n_t), n_t, round(r.holdout_rate * n_h), n_h,
                                              alpha=alpha)
                uplift = float(r.treated_rate - r.holdout_rate)
            else:
                low = high = uplift = math.nan
            avg, avg_low, avg_high = averages.get(str(r.promotion_id), (math.nan, math.nan, math.nan))
            against = False
            if pd.notna(avg_low) and pd.notna(low):
                if avg_low > 0 and high < 0:
                    against = True
                elif avg_high < 0 and low > 0:
                    against = True
            group = getattr(r, label)
            rows.append({
                "promotion_id": str(r.promotion_id), "group_kind": kind, "group": str(int(group)) if kind == "decile" else str(group),
                "customers": n_t + n_h, "n_treated": n_t, "n_holdout": n_h, "treated_rate": float(r.treated_rate),
                "holdout_rate": float(r.holdout_rate), "uplift": uplift, "ci_low": low, "ci_high": high,
                "ci_level": 1 - alpha, "average_lift": avg, "average_ci_low": avg_low, "average_ci_high": avg_high,
                "is_against_average": bool(against), "method": "newcombe",
            })
    return pd.DataFrame(rows, columns=TAIL_COLUMNS)


def _sum_with_interval(values, lows, highs, z: float) -> tuple[float, float, float]:
    """Sum of estimates; interval from the half-widths added in quadrature (independent campaigns)."""
    est = float(np.nansum(values))
    halves = [(h - lo) / 2 for lo, h in zip(lows, highs) if pd.notna(lo) and pd.notna(h)]
    if len(halves) != len(list(values)):
        return est, math.nan, math.nan
    half = math.sqrt(sum(h * h for h in halves))
    return est, est - half, est + half


def quarter_economics(tables: dict, *, currency: str, alpha: float) -> pd.DataFrame:
    """The quarter's gains and later costs summed over its targeted campaigns (and broadcast sales).

    Intervals of sums combine each campaign's interval half-width in quadrature: the campaigns'
    randomisations are independent, so their estimates' errors are (common practice, no source).
    """
    z = float(stats.norm.ppf(1 - alpha / 2))
    level = 1 - alpha
    rows = []
    economics = tables.get("campaign_economics")
    pull = tables.get("pull_forward")
    if economics is not None and len(economics):
        e = economics
        campaigns = int(len(e))
        customers = int(e["n_treated"].sum() + e["n_holdout"].sum())
        note = "targeted campaigns; " + ("randomised holdout contrasts" if (e["method"] != "doubly_robust").all()
                                          else "includes weighted comparisons without holdout")
        for item, col, unit in (("net_incremental_margin", "net_incremental_margin", currency),
                                ("incremental_margin", "incremental_margin", currency)):
            est, low, high = _sum_with_interval(e[col], e[f"{col}_ci_low"], e[f"{col}_ci_high"], z)
            rows.append({"item": item, "estimate": est, "ci_low": low, "ci_high": high, "ci_level": level,
                         "campaigns": campaigns, "customers": customers, "unit": unit, "method": "sum over campaigns",
                         "note": note})
        for item, col in (("discount_cost", "discount_cost"), ("discount_to_buyers_who_would_have_bought",
                                                              "discount_paid_to_non_incremental"),
                          ("subsidy_to_sure_things", "subsidy_to_sure_things")):
            values = pd.to_numeric(e[col], errors="coerce")
            rows.append({"item": item, "estimate": float(values.sum()) if values.notna().any() else math.nan,
                         "ci_low": math.nan, "ci_high": math.nan, "ci_level": level, "campaigns": int(values.notna().sum()),
                         "customers": int(e["n_treated"].sum()), "unit": currency, "method": "sum over campaigns",
                         "note": "treated customers' discount; an accounting figure, no interval"})
    if pull is not None and len(pull):
        n_t = pull["n_treated"].astype(float)
        for item, col, low_col, high_col in (("orders_during", "during_lift_orders", "during_lift_ci_low", "during_lift_ci_high"),
                                             ("orders_given_back_after", "after_lift_orders", "after_lift_ci_low", "after_lift_ci_high"),
                                             ("net_incremental_orders", "net_lift_orders", "net_lift_ci_low", "net_lift_ci_high")):
            est, low, high = _sum_with_interval(pull[col] * n_t, pull[low_col] * n_t, pull[high_col] * n_t, z)
            rows.append({"item": item, "estimate": est, "ci_low": low, "ci_high": high, "ci_level": level,
                         "campaigns": int(len(pull)), "customers": int(pull["n_treated"].sum() + pull["n_holdout"].sum()),
                         "unit": "orders", "method": "lift per treated customer x treated customers, summed",
                         "note": "negative after the campaign: orders pulled forward"})
    broadcast = tables.get("broadcast_effects")
    if broadcast is not None and len(broadcast):
        b = broadcast[(broadcast["window"] == "total")] if "window" in broadcast.columns else broadcast
        for outcome, frame in b.groupby("outcome", sort=False):
            est, low, high = _sum_with_interval(frame["estimate"], frame["ci_low"], frame["ci_high"], z)
            rows.append({"item": f"broadcast_incremental_{outcome}", "estimate": est, "ci_low": low, "ci_high": high,
                         "ci_level": level, "campaigns": int(frame["promotion_id"].nunique()), "customers": None,
                         "unit": currency if "revenue" in str(outcome) or "margin" in str(outcome) else str(outcome),
                         "method": "actual minus counterfactual, summed", "note": "broadcast sales: not randomised"})
    frame = pd.DataFrame(rows, columns=ECONOMICS_COLUMNS)
    frame["customers"] = pd.array(frame["customers"], dtype="Int64")
    return frame
