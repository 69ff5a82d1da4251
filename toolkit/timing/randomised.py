"""Randomised timing contrasts: treatment arm vs holdout arm, by assignment, per window.

Where a targeted campaign kept a randomised holdout, the cleanest reading of what it did to
*when* customers buy is the contrast of the two arms: the daily order rate of every customer
assigned to the treatment arm over the rate of every customer assigned to the holdout, in the
campaign window (``acceleration``) and in the window after it (``post_promotion_dip``). By
assignment, not by redemption (intention to treat): the arms differ only by the coin, so the
ratio needs no adjustment and no model of who redeems. It is diluted by customers who never
used the coupon, so it is the campaign's effect on its whole audience, not on its redeemers.

:class:`ArmRateRatio` fits this on per (campaign x arm x customer block) sums that SQL builds
(``sql/timing/timing_arm_cells.sql``):

* per campaign, the ratio of the two arms' rates (orders / customer-days), which is the Poisson
  maximum-likelihood rate ratio of that campaign;
* pooled, the common rate ratio of a Poisson model with one intercept per campaign (stratified
  by campaign, so campaigns of different size, season and audience are never compared with each
  other), fitted on the per-arm sums (the same estimate as on one row per customer, since those
  sums are the model's sufficient statistics; checked against statsmodels' GLM in the tests);
* intervals by a customer-block bootstrap: customers are hashed into blocks, each round draws
  blocks with replacement and recomputes every ratio, so a customer assigned to several
  campaigns is resampled as one cluster and extra-Poisson variation between customers is
  carried into the interval.

A campaign is not estimable, and says why, when an arm has fewer than ``min_arm_customers``
customers, no order, or no day in the window (an after-window past the export's end).
"""

from __future__ import annotations


import numpy as np
import pandas as pd

from ..errors import AnalysisError
from ._base import FittedMixin, check_alpha, percentile_interval, z_value
from .checks import check_columns, check_numeric

POOLED = "all"


class ArmRateRatio(FittedMixin):
    """Treatment-vs-holdout ratio of daily order rates, per stratum and pooled over strata.

    Parameters
    ----------
    alpha : float, default=0.05
    bootstrap_rounds : int, default=50
        Customer-block bootstrap rounds (0: Wald intervals from the Poisson model, which treat
        customers' orders as independent and are too narrow when orders cluster).
    seed : int, default=20261201
    min_arm_customers : int, default=30
        Fewest customers an arm of a stratum needs for its ratio to be shown.

    Attributes
    ----------
    ratios_ : DataFrame
        One row per stratum and one for the pooled estimate (``stratum`` = ``"all"``):
        ``rate_ratio``, ``ci_low``, ``ci_high``, ``treated_rate``, ``holdout_rate`` (orders per
        customer-day), ``n_treated``, ``n_holdout``, ``treated_orders``, ``holdout_orders``,
        ``is_estimable``, ``reason``.
    bootstrap_params_ : DataFrame
        Log rate ratios per round (columns: the estimable strata, then ``"all"``).

    Examples
    --------
    >>> import pandas as pd
    >>> cells = pd.DataFrame({"campaign": ["A", "A", "B", "B"], "is_treated": [1, 0, 1, 0],
    ...                       "customers": [800, 200, 900, 300], "orders": [400, 125, 300, 125],
    ...                       "days": [22400, 5600, 25200, 8400]})
    >>> fit = ArmRateRatio(bootstrap_rounds=0).fit(cells, stratum_col="campaign", orders_col="orders",
    ...                                            days_col="days")
    >>> fit.ratios_.set_index("stratum")["rate_ratio"].round(3).to_dict()
    {'A': 0.8, 'B': 0.8, 'all': 0.8}
    """

    _fitted_attribute = "ratios_"

    def __init__(self, *, alpha: float = 0.05, bootstrap_rounds: int = 50, seed: int = 20261201,
                 min_arm_customers: int = 30) -> None:
        self.alpha = alpha
        self.bootstrap_rounds = bootstrap_rounds
        self.seed = seed
        self.min_arm_customers = min_arm_customers

    def fit(self, cells: pd.DataFrame, *, stratum_col: str, orders_col: str, days_col: str,
            treated_col: str = "is_treated", customers_col: str = "customers", block_col: str | None = None,
            table: str = "arm cells") -> "ArmRateRatio":
        """Fit on sums per stratum x arm (x customer block).

        Parameters
        ----------
        cells : DataFrame
            Columns ``stratum_col``, ``treated_col`` (1 treatment, 0 holdout), ``customers_col``,
            ``orders_col`` and ``days_col`` (customer-days in the window), and ``block_col``.
        """
        check_alpha(self.alpha)
        keys = [stratum_col, treated_col, customers_col, orders_col, days_col] + ([block_col] if block_col else [])
        check_columns(cells, keys, table=table)
        check_numeric(cells, [treated_col, customers_col, orders_col, days_col], table=table)
        data = cells.copy()
        data[stratum_col] = data[stratum_col].astype(str)
        strata = sorted(data[stratum_col].unique())
        self.strata_ = strata
        self._cols = (stratum_col, treated_col, customers_col, orders_col, days_col)
        sums = self._sums(data, strata)  # strata x 6: n1, n0, orders1, orders0, days1, days0
        rows, usable = [], []
        for i, stratum in enumerate(strata):
            n1, n0, o1, o0, d1, d0 = sums[i]
            reason = self._reason(n1, n0, o1, o0, d1, d0)
            rows.append({"stratum": stratum, "rate_ratio": np.nan if reason else (o1 / d1) / (o0 / d0),
                         "treated_rate": o1 / d1 if d1 else np.nan, "holdout_rate": o0 / d0 if d0 else np.nan,
                         "n_treated": int(n1), "n_holdout": int(n0), "treated_orders": int(o1),
                         "holdout_orders": int(o0), "is_estimable": not reason, "reason": reason})
            if not reason:
                usable.append(i)
        self.usable_ = [strata[i] for i in usable]
        pooled_reason = "" if usable else "no campaign has a usable randomised contrast in this window"
        pooled = self._pooled(sums[usable]) if usable else np.nan
        total = sums[usable].sum(axis=0) if usable else np.zeros(6)
        rows.append({"stratum": POOLED, "rate_ratio": float(np.exp(pooled)) if usable else np.nan,
                     "treated_rate": total[2] / total[4] if total[4] else np.nan,
                     "holdout_rate": total[3] / total[5] if total[5] else np.nan,
                     "n_treated": int(total[0]), "n_holdout": int(total[1]), "treated_orders": int(total[2]),
                     "holdout_orders": int(total[3]), "is_estimable": bool(usable), "reason": pooled_reason})
        ratios = pd.DataFrame(rows)
        self.params_ = np.log(ratios.set_index("stratum")["rate_ratio"].where(ratios.set_index("stratum")["is_estimable"]))
        self.bootstrap_params_ = self._bootstrap(data, strata, usable, block_col)
        low, high = self._interval(sums, usable)
        ratios["ci_low"] = np.exp(low)
        ratios["ci_high"] = np.exp(high)
        ratios["ci_level"] = 1 - self.alpha
        self.ratios_ = ratios
        return self

    # -- pieces ---------------------------------------------------------------------------------
    def _sums(self, data: pd.DataFrame, strata: list[str], weight=None) -> np.ndarray:
        stratum_col, treated_col, customers_col, orders_col, days_col = self._cols
        codes = pd.Categorical(data[stratum_col], categories=strata).codes
        treated = data[treated_col].to_numpy(int) == 1
        out = np.zeros((len(strata), 6))
        w = np.ones(len(data)) if weight is None else weight
        for j, column in enumerate((customers_col, orders_col, days_col)):
            values = data[column].to_numpy(float) * w
            out[:, 2 * j] = np.bincount(codes[treated], weights=values[treated], minlength=len(strata))
            out[:, 2 * j + 1] = np.bincount(codes[~treated], weights=values[~treated], minlength=len(strata))
        return out

    def _reason(self, n1, n0, o1, o0, d1, d0) -> str:
        if d1 <= 0 or d0 <= 0:
            return "not estimable: the window has no day inside the data (it ends after the export's last day)"
        if min(n1, n0) < self.min_arm_customers:
            return (f"not estimable: {int(n1)} treated and {int(n0)} holdout customers; each arm needs at least "
                    f"{self.min_arm_customers}")
        if o1 == 0 or o0 == 0:
            return f"not estimable: {int(o1)} treated and {int(o0)} holdout orders in the window; both arms need orders"
        return ""

    @staticmethod
    def _pooled(sums: np.ndarray) -> float:
        """Common log rate ratio of a Poisson model with one intercept per stratum.

        Solved on the stratum sums by Newton's method on the likelihood conditional on each
        stratum's total orders (binomial: a treated share ``d1 r / (d1 r + d0)`` of them), whose
        maximum is that of the Poisson model with free stratum intercepts. Written out because it
        runs once per bootstrap round; ``tests/timing/test_randomised.py`` checks it against
        statsmodels' Poisson GLM on one row per customer.
        """
        orders1, orders0, days1, days0 = sums[:, 2], sums[:, 3], sums[:, 4], sums[:, 5]
        total = orders1 + orders0
        # Start from the Mantel-Haenszel rate ratio (Rothman, Greenland & Lash, Modern Epidemiology).
        weight_days = days1 + days0
        beta = float(np.log(np.sum(orders1 * days0 / weight_days) / np.sum(orders0 * days1 / weight_days)))
        for _ in range(50):
            share = days1 * np.exp(beta) / (days1 * np.exp(beta) + days0)
            score = float(np.sum(orders1 - total * share))
            information = float(np.sum(total * share * (1 - share)))
            step = score / information
            beta += step
            if abs(step) < 1e-12:
                break
        return beta

    def _bootstrap(self, data, strata, usable, block_col) -> pd.DataFrame:
        columns = [strata[i] for i in usable] + [POOLED]
        if not self.bootstrap_rounds or not block_col or not usable:
            return pd.DataFrame(columns=columns, dtype=float)
        stratum_col, treated_col, customers_col, orders_col, days_col = self._cols
        blocks, block_codes = np.unique(data[block_col].to_numpy(), return_inverse=True)
        # Sums per block first, so each round is a weighted sum of block sums.
        per_block = np.stack([self._sums(data, strata, weight=(block_codes == b).astype(float))
                              for b in range(len(blocks))])  # blocks x strata x 6
        rng = np.random.default_rng(self.seed)
        draws = np.full((self.bootstrap_rounds, len(columns)), np.nan)
        for r in range(self.bootstrap_rounds):
            weight = np.bincount(rng.integers(0, len(blocks), len(blocks)), minlength=len(blocks)).astype(float)
            sums = np.tensordot(weight, per_block, axes=1)[usable]
            with np.errstate(divide="ignore", invalid="ignore"):
                ratio = np.log((sums[:, 2] / sums[:, 4]) / (sums[:, 3] / sums[:, 5]))
            draws[r, :-1] = np.where(np.isfinite(ratio), ratio, np.nan)
            good = np.isfinite(ratio)
            draws[r, -1] = self._pooled(sums[good]) if good.any() else np.nan
        return pd.DataFrame(draws, columns=columns)

    def _interval(self, sums, usable) -> tuple[np.ndarray, np.ndarray]:
        names = list(self.strata_) + [POOLED]
        low = np.full(len(names), np.nan)
        high = np.full(len(names), np.nan)
        estimable = [self.strata_[i] for i in usable] + ([POOLED] if usable else [])
        if self._is_bootstrapped():
            lo, hi = percentile_interval(self.bootstrap_params_[estimable].to_numpy(float), self.alpha)
            for name, a, b in zip(estimable, lo, hi):
                low[names.index(name)], high[names.index(name)] = a, b
            return low, high
        z = z_value(self.alpha)
        for name in estimable:  # Wald, Poisson counts (var of a log count ratio = 1/o1 + 1/o0)
            part = sums[usable] if name == POOLED else sums[[self.strata_.index(name)]]
            o1, o0 = part[:, 2].sum(), part[:, 3].sum()
            se = np.sqrt(1 / o1 + 1 / o0)
            i = names.index(name)
            low[i], high[i] = self.params_[name] - z * se, self.params_[name] + z * se
        return low, high

    def _is_bootstrapped(self) -> bool:
        return bool(len(self.bootstrap_params_) and self.bootstrap_params_.notna().any().any())

    @property
    def interval_method_(self) -> str:
        if self._is_bootstrapped():
            return f"customer-block bootstrap, {len(self.bootstrap_params_)} rounds, percentile"
        return "Wald on Poisson counts (orders treated as independent; too narrow when they cluster)"

    def _summary_frame(self) -> pd.DataFrame:
        return self.ratios_.assign(ci_method=self.interval_method_)

    def _header(self) -> dict[str, object]:
        return {"strata": len(self.strata_), "estimable strata": len(self.usable_),
                "interval": f"{1 - self.alpha:.0%} {self.interval_method_}"}


def fit_windows(cells: pd.DataFrame, *, alpha: float, bootstrap_rounds: int, seed: int,
                min_arm_customers: int) -> dict[str, ArmRateRatio]:
    """Fit :class:`ArmRateRatio` on the campaign window and on the window after it.

    ``cells`` is ``timing_arm_cells``. Returns ``{"during": fit, "after": fit}``.
    """
    if cells.empty:
        raise AnalysisError("timing_arm_cells: no targeted campaign has both a treatment and a holdout arm")
    fits = {}
    for window in ("during", "after"):
        fits[window] = ArmRateRatio(alpha=alpha, bootstrap_rounds=bootstrap_rounds, seed=seed,
                                    min_arm_customers=min_arm_customers).fit(
            cells, stratum_col="promotion_id", orders_col=f"{window}_orders", days_col=f"{window}_days",
            block_col="block", table=f"timing_arm_cells ({window} window)")
    return fits
