"""Responsiveness drift: as customers receive more coupons, does their full-price buying fall and
their response to a coupon rise? (The question of Mela, Gupta & Lehmann 1997, Journal of
Marketing Research 34(2), on the long-term effect of promotions on consumer response.)

A linear probability model on customer-weeks (``sql/longrun/longrun_week_grid.sql``)::

    purchased[i, w] = customer[i] + week[w]
                      + b1 coupon_available[i, w]
                      + b2 coupons_before[i, w]
                      + b3 coupon_available[i, w] x coupons_before[i, w]
                      + b4 after_coupon[i, w] + error

Customer effects absorb each customer's own purchase rate; week effects absorb the season, broadcast
sales and any common trend. ``b2`` is the change in the weekly chance of buying without a coupon per
coupon received before (below 0: the full-price baseline is falling), ``b3`` the change in the
coupon's effect per coupon received before (above 0: customers respond more as they learn).
``after_coupon`` keeps the short-run dip after a promotion out of ``b2``. Standard errors are
clustered by customer. With targeted campaigns randomised against a holdout, the number of coupons a
customer has received varies for reasons of the draw, which is what identifies ``b2`` and ``b3``
beside the week effects; with targeting that follows behaviour they are associations.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd

from ..errors import AnalysisError
from . import _sql
from .fixed_effects import FixedEffectsRegression

TERMS = ("coupon_available", "coupons_before", "coupon_available_x_coupons_before", "after_coupon")
#: Fewer clusters than this make cluster-robust errors unreliable (Cameron & Miller 2015, "A
#: practitioner's guide to cluster-robust inference", J. Human Resources 50(2): a few dozen at least).
MIN_CUSTOMERS = 30
METHOD = "linear probability model, customer and week fixed effects absorbed, customer-clustered errors"
COLUMNS = ["term", "estimate", "ci_low", "ci_high", "std_error", "p_value", "ci_level", "n_customers", "n_weeks",
           "n_calendar_weeks", "method", "sentence"]


def week_grid(con, settings, through_end: dt.date) -> tuple[pd.DataFrame, int]:
    """The sampled customer-week grid, and the number of customers it was sampled from."""
    longrun = settings.longrun
    cur = con.cursor()
    try:
        _sql.run(cur, "longrun_week_grid", through_end=through_end,
                 sample_customers=int(longrun.responsiveness_sample_customers), seed=int(longrun.seed),
                 coupons_cap=int(longrun.coupons_cap), dip_days=int(settings.timing.dip_days))
        grid = cur.execute("SELECT * FROM longrun_week_grid").df()
        population = cur.execute("SELECT count(DISTINCT customer_id) FROM orders").fetchall()[0][0]
    finally:
        cur.close()
    return grid, int(population)


def _points(value: float) -> str:
    return f"{100 * value:+.2f} points"


def sentence(summary: pd.DataFrame, alpha: float) -> str:
    """The finding in plain words."""
    rows = summary.set_index("term")
    level = f"{1 - alpha:.0%}"

    def clear(term):
        return rows.loc[term, "ci_low"] > 0 or rows.loc[term, "ci_high"] < 0

    def said(term):
        r = rows.loc[term]
        return f"{_points(r['estimate'])} ({level} interval {100 * r['ci_low']:+.2f} to {100 * r['ci_high']:+.2f})"

    parts = [f"Each coupon received before changed the weekly chance of buying without a coupon by "
             f"{said('coupons_before')} and the extra chance when a coupon is available by "
             f"{said('coupon_available_x_coupons_before')}."]
    baseline_falls = clear("coupons_before") and rows.loc["coupons_before", "estimate"] < 0
    response_rises = clear("coupon_available_x_coupons_before") and rows.loc["coupon_available_x_coupons_before", "estimate"] > 0
    if baseline_falls and response_rises:
        parts.append("The full-price baseline is falling and the response to coupons rising as customers receive more "
                     "of them: customers are learning to buy on the deal.")
    elif baseline_falls:
        parts.append("The full-price baseline is falling as customers receive more coupons; their response to a coupon "
                     "shows no clear change.")
    elif response_rises:
        parts.append("Customers respond more to a coupon the more they have received; their full-price baseline "
                     "shows no clear fall.")
    else:
        parts.append("Neither a falling full-price baseline nor a rising response to coupons shows clearly in this "
                     "data (the intervals include no change or point the other way).")
    return " ".join(parts)


def analyse(con, settings, through_end: dt.date) -> tuple[dict[str, pd.DataFrame], list[str]]:
    """The ``responsiveness_drift`` table."""
    longrun = settings.longrun
    notes: list[str] = []
    grid, population = week_grid(con, settings, through_end)
    if grid.empty:
        raise AnalysisError("responsiveness_drift: no whole week after any customer's first week on or before "
                            f"{through_end}; the regression needs weeks of purchase history")
    if grid["customer_no"].nunique() < MIN_CUSTOMERS:
        raise AnalysisError(f"responsiveness_drift: {grid['customer_no'].nunique()} customers with whole weeks of "
                            f"history; the customer-clustered errors need at least {MIN_CUSTOMERS}")
    if grid["coupon_available"].sum() == 0:
        raise AnalysisError("responsiveness_drift: no customer held a targeted (treatment-arm) coupon in the weeks "
                            "analysed; the response to coupons cannot be estimated")
    grid["coupon_available_x_coupons_before"] = grid["coupon_available"] * grid["coupons_before"]
    grid["week_no"] = (pd.to_datetime(grid["week_on"]) - pd.Timestamp("1970-01-05")).dt.days // 7
    terms = [t for t in TERMS if grid[t].nunique() > 1]
    for term in set(TERMS) - set(terms):
        notes.append(f"term {term} never varies in the weeks analysed; left out of the regression")
    if "coupons_before" not in terms:
        raise AnalysisError("responsiveness_drift: no customer had received a coupon before a week analysed; "
                            "the drift with coupons received cannot be estimated")
    fit = FixedEffectsRegression(alpha=longrun.alpha).fit(
        grid, outcome="purchased", terms=terms, absorb=["customer_no", "week_no"], cluster="customer_no",
        table="longrun_week_grid")
    customers = int(grid["customer_no"].nunique())
    summary = fit.summary
    summary["n_customers"] = customers
    summary["n_weeks"] = fit.n_obs_
    summary["n_calendar_weeks"] = int(grid["week_no"].nunique())
    sampled = customers < population
    summary["method"] = METHOD + (f"; seeded sample of {customers:,} of {population:,} customers" if sampled else "")
    if {"coupons_before", "coupon_available_x_coupons_before"} <= set(terms):
        summary["sentence"] = sentence(summary, longrun.alpha)
    else:
        summary["sentence"] = None
    if sampled:
        notes.append(f"responsiveness_drift fitted on a seeded sample of {customers:,} of {population:,} customers "
                     f"([longrun] responsiveness_sample_customers)")
    return {"responsiveness_drift": summary[COLUMNS]}, notes
