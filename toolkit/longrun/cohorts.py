"""Acquisition cohorts: do customers won with a deal stay, and do they later pay full price?

Customers acquired inside the data (``sql/longrun/longrun_cohort_customers.sql``: first seen on
or after the data's first day when the export has ``first_seen_at``; otherwise a first order at
least ``cohort_burn_in_days`` after the data's first order) are split by their first order:
``deal_acquired`` (it carried a promotion or a discount) or ``full_price_acquired``; and by the
quarter of that first order. For each cohort:

* **Retention** (:class:`CohortRetention`): Kaplan-Meier curve of the active life, the days from
  the first order to the last one. Censoring rule: a customer whose last order is at least
  ``lapse_days`` before the last day analysed has lapsed (the event, at their last order); one who
  ordered within the last ``lapse_days`` is still active and is censored at their latest order
  (their active life lasts at least that long). The curve at day ``d`` is the share of the
  cohort still buying ``d`` days after their first order; intervals are lifelines' exponential
  Greenwood intervals.
* **Later orders at full price**: of the orders after the first-order day, the share without a
  deal; interval from a customer-block bootstrap (all of a customer's orders move together).
* **BG/NBD** (:class:`~toolkit.longrun.bgnbd.BetaGeometricNBD`, Fader, Hardie & Lee 2005) fitted
  per cohort on the purchase days in weeks: the expected orders in the next quarter (13 weeks) and
  the probability of still being active, averaged over the cohort's customers; intervals from a
  one-step bootstrap: each round draws the customers again (blocks) and moves the parameters
  by one Newton step towards that draw's fit, so that they cover both the fit and the cohort's
  make-up.
* The contrast ``deal_minus_full_price`` of each measure, with an interval from the two cohorts'
  independent draws.

Cohorts with fewer than ``min_cohort_customers`` customers are suppressed (one row saying so and
why), and counts below ``[report] small_cell`` are not shown. These are descriptive comparisons:
deal-acquired customers differ from the others in more than the deal (when and why they came), so
a difference is not the effect of the welcome deal on a given customer.
"""

from __future__ import annotations

import datetime as dt
import warnings

import numpy as np
import pandas as pd
from lifelines import KaplanMeierFitter
from scipy import sparse

from ..errors import AnalysisError, ConvergenceError
from ..timing._base import FittedMixin, check_alpha, percentile_interval, single_threaded_blas
from . import _sql
from .bgnbd import BetaGeometricNBD

COHORTS = ("deal_acquired", "full_price_acquired")
CONTRAST = "deal_minus_full_price"
ALL_QUARTERS = "all"
NEXT_QUARTER_WEEKS = 13.0
RETENTION_COLUMNS = ["cohort", "first_quarter", "day", "customers", "at_risk", "lapsed", "survival", "ci_low",
                     "ci_high", "ci_level", "is_suppressed", "note"]
VALUE_COLUMNS = ["cohort", "first_quarter", "measure", "estimate", "ci_low", "ci_high", "customers", "ci_level",
                 "method", "is_suppressed", "note"]
MEASURES = ("later_full_price_share", "expected_orders_next_quarter", "probability_active")


class CohortRetention(FittedMixin):
    """Kaplan-Meier curve of the days from the first order to the last, with the lapse rule.

    Parameters
    ----------
    lapse_days : int, default=180
        A customer with no order in this many days up to the last day analysed has lapsed.
    step_days : int, default=30
        Spacing of the days the curve is reported at.
    alpha : float, default=0.05

    Attributes
    ----------
    curve_ : DataFrame
        ``day, at_risk, lapsed, survival, ci_low, ci_high``.
    n_customers_, n_lapsed_ : int
    """

    _fitted_attribute = "curve_"

    def __init__(self, *, lapse_days: int = 180, step_days: int = 30, alpha: float = 0.05):
        self.lapse_days = lapse_days
        self.step_days = step_days
        self.alpha = alpha

    def fit(self, days_first_to_last, days_since_last) -> "CohortRetention":
        """Fit on each customer's days from the first to the last order and days since the last."""
        check_alpha(self.alpha)
        if int(self.lapse_days) < 1 or int(self.step_days) < 1:
            raise AnalysisError(f"[longrun] lapse_days and retention_step_days must be at least 1, found "
                                f"{self.lapse_days!r}, {self.step_days!r}")
        duration = np.asarray(days_first_to_last, dtype=float)
        lapsed = np.asarray(days_since_last, dtype=float) >= self.lapse_days
        if len(duration) == 0:
            raise AnalysisError("cohort retention: no customers in the cohort")
        kmf = KaplanMeierFitter(alpha=self.alpha)
        kmf.fit(duration, event_observed=lapsed)
        grid = np.arange(0, max(duration.max(), 0) + 1, int(self.step_days), dtype=float)
        survival = kmf.survival_function_at_times(grid).to_numpy()
        ci = kmf.confidence_interval_survival_function_
        ci = ci.reindex(ci.index.union(grid)).sort_index().ffill().loc[grid]
        at_risk = np.array([(duration >= d).sum() for d in grid])
        lapsed_by = np.array([((duration <= d) & lapsed).sum() for d in grid])
        self.curve_ = pd.DataFrame({"day": grid.astype(int), "at_risk": at_risk, "lapsed": lapsed_by,
                                    "survival": survival, "ci_low": ci.iloc[:, 0].to_numpy(),
                                    "ci_high": ci.iloc[:, 1].to_numpy()})
        self.n_customers_ = int(len(duration))
        self.n_lapsed_ = int(lapsed.sum())
        return self

    def conf_int(self, alpha: float = 0.05) -> pd.DataFrame:
        self._check_fitted()
        if check_alpha(alpha) != self.alpha:
            raise AnalysisError(f"CohortRetention was fitted with alpha={self.alpha}; refit for alpha={alpha}")
        return self.curve_[["day", "ci_low", "ci_high"]]

    def _summary_frame(self) -> pd.DataFrame:
        return self.curve_

    def _header(self) -> dict[str, object]:
        return {"customers": self.n_customers_, "lapsed": self.n_lapsed_, "lapse days": self.lapse_days}


class CohortValue(FittedMixin):
    """Later full-price share and the BG/NBD forecasts of one cohort, with their draws.

    Parameters
    ----------
    horizon_weeks : float, default=13.0
        The "next quarter" of the expected orders.
    rounds : int, default=200
        Bootstrap rounds (full-price share) and parameter draws (BG/NBD forecasts).
    n_blocks : int, default=64
        Customer blocks of the bootstrap.
    seed : int, default=20261201
    alpha : float, default=0.05
    prior_scale : float, default=3.0
        Normal prior on the BG/NBD log-parameters (see :class:`BetaGeometricNBD`): keeps the
        dropout parameters finite in a cohort that shows almost no dropout.
    sample_customers : int or None, default=50000
        Larger cohorts are fitted (and forecast) on a seeded sample of this many customers.

    Attributes
    ----------
    estimates_ : dict of str -> float
    draws_ : dict of str -> ndarray
        Per measure, ``rounds`` draws (for intervals of contrasts).
    model_ : BetaGeometricNBD or None
    n_customers_ : int
    """

    _fitted_attribute = "estimates_"

    def __init__(self, *, horizon_weeks: float = NEXT_QUARTER_WEEKS, rounds: int = 200, n_blocks: int = 64,
                 seed: int = 20261201, alpha: float = 0.05, prior_scale: float = 3.0,
                 sample_customers: int | None = 50000):
        self.prior_scale = prior_scale
        self.sample_customers = sample_customers
        self.horizon_weeks = horizon_weeks
        self.rounds = rounds
        self.n_blocks = n_blocks
        self.seed = seed
        self.alpha = alpha

    def fit(self, customers: pd.DataFrame) -> "CohortValue":
        """Fit on rows of ``longrun_cohort_customers`` (one cohort)."""
        check_alpha(self.alpha)
        rng = np.random.default_rng(self.seed)
        n = len(customers)
        if n == 0:
            raise AnalysisError("cohort value: no customers in the cohort")
        self.n_customers_ = n
        self.estimates_: dict[str, float] = {}
        self.draws_: dict[str, np.ndarray] = {}
        self.notes_: list[str] = []

        later = customers["later_orders"].to_numpy(dtype=float)
        full = customers["later_full_price_orders"].to_numpy(dtype=float)
        blocks = rng.integers(0, max(int(self.n_blocks), 2), size=n)
        k = max(int(self.n_blocks), 2)
        later_b = np.bincount(blocks, weights=later, minlength=k)
        full_b = np.bincount(blocks, weights=full, minlength=k)
        # One set of block resamples, shared by every measure of the cohort: each row is a
        # bootstrap round, each column a block (how many times it was drawn).
        picks = rng.integers(0, k, size=(int(self.rounds), k))
        block_counts = np.stack([np.bincount(row, minlength=k) for row in picks])
        if later.sum() > 0:
            with np.errstate(invalid="ignore", divide="ignore"):
                draws = (block_counts @ full_b) / (block_counts @ later_b)
            self.estimates_["later_full_price_share"] = float(full.sum() / later.sum())
            self.draws_["later_full_price_share"] = draws
        else:
            self.notes_.append("no later orders: the full-price share of later orders is not estimable")

        frequency = customers["repeat_days"].to_numpy(dtype=float)
        recency = customers["days_first_to_last"].to_numpy(dtype=float) / 7.0
        age = customers["days_observed"].to_numpy(dtype=float) / 7.0
        keep = age > 0  # a first order on the last day analysed says nothing about repeat buying
        if self.sample_customers and keep.sum() > int(self.sample_customers):
            # A seeded sample bounds the fit's cost on a large cohort (its intervals are the
            # sample's, so they are honest about its size).
            chosen = rng.choice(np.flatnonzero(keep), size=int(self.sample_customers), replace=False)
            keep = np.zeros(n, bool)
            keep[chosen] = True
            self.notes_.append(f"BG/NBD fitted on a seeded sample of {int(self.sample_customers):,} of the "
                               f"cohort's {n:,} customers")
        self.model_ = None
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                model = BetaGeometricNBD(alpha=self.alpha, prior_scale=self.prior_scale).fit(
                    frequency=frequency[keep], recency=recency[keep], age=age[keep], time_unit="weeks")
        except (AnalysisError, ConvergenceError) as exc:
            self.notes_.append(f"BG/NBD not fitted: {exc}")
        else:
            self.model_ = model
            # Predictions are computed once per distinct summary (x, t_x, T), and summed per
            # customer block through a sparse block x summary count matrix: the cost follows the
            # number of distinct summaries, not of customers.
            table = pd.DataFrame({"x": frequency[keep], "t": recency[keep], "T": age[keep], "block": blocks[keep]})
            codes = table.groupby(["x", "t", "T"], sort=False).ngroup().to_numpy()
            first = pd.Series(np.arange(len(codes))).groupby(codes).first().to_numpy()
            summaries = {"frequency": table["x"].to_numpy()[first], "recency": table["t"].to_numpy()[first],
                         "age": table["T"].to_numpy()[first]}
            counts = np.bincount(codes, minlength=len(first)).astype(float)
            incidence = sparse.csr_matrix((np.ones(len(codes)), (table["block"].to_numpy(), codes)),
                                          shape=(k, len(first)))
            block_sizes = np.asarray(incidence.sum(axis=1)).ravel()
            n_kept = counts.sum()
            self.estimates_["expected_orders_next_quarter"] = float(
                counts @ model.expected_purchases(self.horizon_weeks, **summaries) / n_kept)
            self.estimates_["probability_active"] = float(counts @ model.probability_active(**summaries) / n_kept)
            # Each round draws the customers again (blocks) and refits the model to them by one
            # Newton step from the fit (the one-step bootstrap: theta_b = theta + H^-1 g_b, with
            # g_b the resampled blocks' score and H the information), so that the parameters
            # move with the customers drawn, as a full refit would make them, at the cost of a
            # sum. Drawing the parameters independently of the customers was seen to give
            # intervals about 20% too narrow.
            block_scores = incidence @ model.scores(**summaries)  # blocks x 4
            try:
                step = np.linalg.solve(model.hessian_, ((block_counts - 1.0) @ block_scores).T).T
            except np.linalg.LinAlgError:
                step = np.zeros((len(block_counts), 4))
            params = np.exp(np.clip(model.log_params_[None, :] + step, -12.0, 12.0))
            expected, active = [], []
            with warnings.catch_warnings(), np.errstate(all="ignore"):
                warnings.simplefilter("ignore", RuntimeWarning)
                for p, drawn in zip(params, block_counts):
                    total = float(drawn @ block_sizes) or 1.0
                    expected.append(float(drawn @ (incidence @ model.expected_purchases(
                        self.horizon_weeks, params=p, **summaries))) / total)
                    active.append(float(drawn @ (incidence @ model.probability_active(params=p, **summaries))) / total)
            self.draws_["expected_orders_next_quarter"] = np.array(expected)
            self.draws_["probability_active"] = np.array(active)
        return self

    def conf_int(self, alpha: float = 0.05) -> pd.DataFrame:
        self._check_fitted()
        check_alpha(alpha)
        rows = []
        for measure, value in self.estimates_.items():
            low, high = percentile_interval(self.draws_[measure][:, None], alpha)
            rows.append({"measure": measure, "ci_low": float(low[0]), "ci_high": float(high[0])})
        return pd.DataFrame(rows, columns=["measure", "ci_low", "ci_high"])

    def _summary_frame(self) -> pd.DataFrame:
        ci = self.conf_int(self.alpha).set_index("measure")
        return pd.DataFrame([{"measure": m, "estimate": v, "ci_low": ci.loc[m, "ci_low"], "ci_high": ci.loc[m, "ci_high"]}
                             for m, v in self.estimates_.items()])

    def _header(self) -> dict[str, object]:
        return {"customers": self.n_customers_, "horizon (weeks)": self.horizon_weeks}


def cohort_customers(con, through_end: dt.date, burn_in_days: int) -> pd.DataFrame:
    """The per-customer acquisition summary (``sql/longrun/longrun_cohort_customers.sql``)."""
    cur = con.cursor()
    try:
        _sql.run(cur, "longrun_cohort_customers", through_end=through_end, burn_in_days=int(burn_in_days))
        return cur.execute("SELECT * FROM longrun_cohort_customers ORDER BY customer_id").df()
    finally:
        cur.close()


def _cells(customers: pd.DataFrame):
    """(cohort, first_quarter, rows): all quarters together first, then each first-order quarter."""
    label = np.where(customers["first_is_deal"].fillna(False).to_numpy(dtype=bool), COHORTS[0], COHORTS[1])
    customers = customers.assign(cohort=label)
    quarters = sorted(customers["first_quarter"].unique())
    for first_quarter in [ALL_QUARTERS, *quarters]:
        for cohort in COHORTS:
            rows = customers[customers["cohort"] == cohort]
            if first_quarter != ALL_QUARTERS:
                rows = rows[rows["first_quarter"] == first_quarter]
            yield cohort, first_quarter, rows


def analyse(con, settings, through_end: dt.date) -> tuple[dict[str, pd.DataFrame], list[str]]:
    """Acquisition-cohort tables: ``cohort_retention`` and ``cohort_value``."""
    longrun = settings.longrun
    alpha = longrun.alpha
    small_cell = settings.report.small_cell
    minimum = int(longrun.min_cohort_customers)
    customers = cohort_customers(con, through_end, longrun.cohort_burn_in_days)
    notes: list[str] = []
    if customers.empty:
        raise AnalysisError(
            f"panel orders: no customer acquired inside the data on or before {through_end} (customers first seen "
            f"before the data starts, or first ordering within [longrun] cohort_burn_in_days = "
            f"{longrun.cohort_burn_in_days} of its first day, are not acquisitions)")
    retention_rows: list[pd.DataFrame] = []
    value_rows: list[dict] = []
    fitted: dict[tuple[str, str], CohortValue] = {}
    method_value = {
        "later_full_price_share": f"customer-block bootstrap ({longrun.n_blocks} blocks, {longrun.bootstrap_rounds} rounds)",
        "expected_orders_next_quarter": (f"BG/NBD (Fader, Hardie & Lee 2005), {NEXT_QUARTER_WEEKS:g} weeks; "
                                         f"{longrun.bootstrap_rounds} parameter draws"),
        "probability_active": f"BG/NBD (Fader, Hardie & Lee 2005); {longrun.bootstrap_rounds} parameter draws",
    }
    for index, (cohort, first_quarter, rows) in enumerate(_cells(customers)):
        n = len(rows)
        shown = n if n >= small_cell else None
        if n < minimum:
            reason = (f"suppressed: {n if n >= small_cell else f'fewer than {small_cell}'} customers, below "
                      f"[longrun] min_cohort_customers = {minimum}")
            if n == 0:
                reason = "no customers in this cohort"
            retention_rows.append(pd.DataFrame([{"cohort": cohort, "first_quarter": first_quarter, "customers": shown,
                                                 "is_suppressed": True, "note": reason}]))
            value_rows.append({"cohort": cohort, "first_quarter": first_quarter, "measure": "all", "customers": shown,
                               "is_suppressed": True, "note": reason})
            if first_quarter == ALL_QUARTERS and n > 0:
                notes.append(f"cohort {cohort}: {reason}")
            continue
        retention = CohortRetention(lapse_days=longrun.lapse_days, step_days=longrun.retention_step_days,
                                    alpha=alpha).fit(rows["days_first_to_last"], rows["days_since_last"])
        # The curve stops where fewer than [report] small_cell customers are still at risk: a
        # step there would be about a handful of people.
        shown_curve = retention.curve_[retention.curve_["at_risk"] >= small_cell]
        curve = shown_curve.assign(cohort=cohort, first_quarter=first_quarter, customers=n, is_suppressed=False,
                                   note=f"event: no order in the {longrun.lapse_days} days up to {through_end}; "
                                        "others censored at their latest order; the curve stops where fewer than "
                                        f"{small_cell} customers are at risk")
        retention_rows.append(curve)
        with single_threaded_blas():
            value = CohortValue(rounds=longrun.bootstrap_rounds, n_blocks=longrun.n_blocks,
                                seed=int(longrun.seed) + index, alpha=alpha,
                                sample_customers=int(longrun.cohort_sample_customers)).fit(rows)
        fitted[(cohort, first_quarter)] = value
        ci = value.conf_int(alpha).set_index("measure")
        for measure in MEASURES:
            if measure in value.estimates_:
                value_rows.append({"cohort": cohort, "first_quarter": first_quarter, "measure": measure,
                                   "estimate": value.estimates_[measure], "ci_low": ci.loc[measure, "ci_low"],
                                   "ci_high": ci.loc[measure, "ci_high"], "customers": n,
                                   "method": method_value[measure], "is_suppressed": False,
                                   "note": "; ".join(value.notes_)})
            else:
                value_rows.append({"cohort": cohort, "first_quarter": first_quarter, "measure": measure,
                                   "customers": n, "is_suppressed": False, "note": "not estimable: " + "; ".join(value.notes_)})
        if value.model_ is not None:
            params_ci = value.model_.conf_int(alpha)
            for name, estimate in value.model_.params_.items():
                value_rows.append({"cohort": cohort, "first_quarter": first_quarter, "measure": f"bgnbd_{name}",
                                   "estimate": float(estimate), "ci_low": float(params_ci.loc[name, "ci_low"]),
                                   "ci_high": float(params_ci.loc[name, "ci_high"]), "customers": n,
                                   "method": "maximum likelihood, Wald interval on the log scale",
                                   "is_suppressed": False,
                                   "note": f"log-likelihood {value.model_.log_likelihood_:.2f}; time unit weeks"})
    # Contrasts: deal-acquired minus full-price-acquired, where both cohorts were fitted.
    for first_quarter in [ALL_QUARTERS, *sorted(customers["first_quarter"].unique())]:
        deal, full = fitted.get((COHORTS[0], first_quarter)), fitted.get((COHORTS[1], first_quarter))
        if deal is None or full is None:
            continue
        for measure in MEASURES:
            if measure not in deal.estimates_ or measure not in full.estimates_:
                continue
            difference = deal.draws_[measure] - full.draws_[measure]
            low, high = percentile_interval(difference[:, None], alpha)
            value_rows.append({"cohort": CONTRAST, "first_quarter": first_quarter, "measure": measure,
                               "estimate": deal.estimates_[measure] - full.estimates_[measure],
                               "ci_low": float(low[0]), "ci_high": float(high[0]),
                               "customers": deal.n_customers_ + full.n_customers_,
                               "method": "difference of the cohorts' independent draws", "is_suppressed": False,
                               "note": "descriptive: the cohorts differ in more than the first deal"})
    retention = pd.concat(retention_rows, ignore_index=True) if retention_rows else pd.DataFrame()
    retention = retention.reindex(columns=RETENTION_COLUMNS)
    retention["ci_level"] = 1 - alpha
    value_table = pd.DataFrame(value_rows).reindex(columns=VALUE_COLUMNS)
    value_table["ci_level"] = 1 - alpha
    for frame in (retention, value_table):
        frame["customers"] = frame["customers"].astype("Int64")
        frame["is_suppressed"] = frame["is_suppressed"].astype(bool)
    if (customers["first_is_deal"].fillna(False)).sum() == 0:
        notes.append("no customer's first order was a deal: there is no deal-acquired cohort")
    notes.append("cohorts compare customers by how they were acquired; the difference is descriptive, not the "
                 "effect of a first-order deal")
    return {"cohort_retention": retention, "cohort_value": value_table}, notes
