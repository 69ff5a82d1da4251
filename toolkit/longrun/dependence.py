"""Discount dependence: how much of each customer's buying needs a deal, quarter by quarter.

The dependence index of a customer in a quarter (computed in ``sql/longrun/longrun_dependence.sql``)
is the depth-weighted share of the quarter's orders bought on a deal::

    index = (1 / orders) x sum over the quarter's orders of w(order)
    w = 0                                  for an order at full price
    w = min(1, depth / reference_depth)    for a deal order with a recorded discount
    w = 1                                  for a deal order without one (free shipping, bundle)

Why this shape: a customer who buys only on deals is more dependent than one who mixes deals with
full-price orders (the share), and a customer who waits for 30% off is more dependent than one who
happens to use a 5% voucher (the depth weight). The weight saturates at ``reference_depth``
(setting, default 0.2): deeper deals than that do not make an order count more than once. A deal
whose depth is not measured is counted as a full deal, so that dependence is overstated rather than
hidden. The index is 0 for a customer who bought only at full price and 1 for one who bought only
on deals at least ``reference_depth`` deep. It is computed on the quarter's purchases only (no
look-back), so it is not biased by the start of the export.

Bands: ``full_price`` (no deal order), ``occasional`` (some deals, index below
``dependent_threshold``), ``dependent`` (index at or above it).

Intervals: customers are hashed into ``n_blocks`` blocks; each bootstrap round draws blocks with
replacement and recomputes every share from the block sums (a customer-clustered bootstrap:
all of a customer's orders move together).
"""

from __future__ import annotations

import datetime as dt
import warnings

import numpy as np
import pandas as pd

from ..errors import AnalysisError
from . import _sql

#: statistic -> (numerator column, denominator column) of longrun_dependence_blocks.
RATIOS = {
    "deal_share_orders": ("deal_orders", "orders"),
    "deal_share_revenue": ("deal_net_amount", "net_amount"),
    "deal_only_share": ("deal_only_customers", "customers"),
    "full_price_share": ("full_price_customers", "customers"),
    "dependent_share": ("dependent_customers", "customers"),
    "mean_depth": ("deal_depth_sum", "deal_orders"),
    "dependence_index_mean": ("dependence_index_sum", "customers"),
}
BLOCK_COLUMNS = ("customers", "orders", "deal_orders", "net_amount", "deal_net_amount", "deal_depth_sum",
                 "deal_only_customers", "full_price_customers", "dependent_customers", "dependence_index_sum")
BANDS = ("full_price", "occasional", "dependent")


def _movement(band_from: str, band_to: str) -> str:
    """Plain-words name of a move between bands (common practice, no source)."""
    if band_from == "new":
        return "new"
    if band_to == "inactive":
        return "stayed_inactive" if band_from == "inactive" else "left"
    if band_from == "inactive":
        return "returned"
    if band_from == band_to:
        return "stayed"
    if band_to == "dependent":
        return "becoming_dependent"
    if band_from == "dependent":
        return "recovering"
    return "more_deals" if band_to == "occasional" else "fewer_deals"


class DependenceByQuarter:
    """Deal shares per quarter with customer-block bootstrap intervals.

    Parameters
    ----------
    alpha : float, default=0.05
        Significance level of the intervals (0.05 gives 95% intervals).
    bootstrap_rounds : int, default=200
    seed : int, default=20261201

    Attributes
    ----------
    params_ : DataFrame
        One row per quarter, one column per statistic of :data:`RATIOS`.
    replicates_ : ndarray, shape (bootstrap_rounds, quarters, statistics)
    quarters_ : list of str
    n_customers_ : Series
        Customers with a purchase, per quarter.
    n_blocks_ : int

    Examples
    --------
    >>> blocks = pd.DataFrame({"quarter": ["2026Q1"] * 2, "block": [0, 1], "customers": [2, 1],
    ...     "orders": [3, 1], "deal_orders": [1, 1], "net_amount": [30.0, 8.0], "deal_net_amount": [8.0, 8.0],
    ...     "deal_depth_sum": [0.2, 0.2], "deal_only_customers": [0, 1], "full_price_customers": [1, 0],
    ...     "dependent_customers": [1, 1], "dependence_index_sum": [0.5, 1.0]})
    >>> DependenceByQuarter(bootstrap_rounds=20).fit(blocks).params_.loc["2026Q1", "deal_share_orders"]
    0.5
    """

    def __init__(self, *, alpha: float = 0.05, bootstrap_rounds: int = 200, seed: int = 20261201) -> None:
        self.alpha = alpha
        self.bootstrap_rounds = bootstrap_rounds
        self.seed = seed

    def fit(self, blocks: pd.DataFrame) -> "DependenceByQuarter":
        """Fit on the block sums (``longrun_dependence_blocks``: quarter, block and :data:`BLOCK_COLUMNS`)."""
        missing = [c for c in ("quarter", "block", *BLOCK_COLUMNS) if c not in blocks.columns]
        if missing:
            raise AnalysisError(f"table longrun_dependence_blocks: columns {', '.join(missing)} are missing")
        if not 0 < self.alpha < 1:
            raise AnalysisError(f"alpha must be between 0 and 1, found {self.alpha!r}")
        if self.bootstrap_rounds < 1:
            raise AnalysisError(f"bootstrap_rounds must be at least 1, found {self.bootstrap_rounds!r}")
        quarters = sorted(blocks["quarter"].unique(), key=lambda q: (int(q[:4]), int(q[-1])))
        block_ids = np.sort(blocks["block"].unique())
        # sums[q, b, column]: dense over quarters x blocks (an empty block adds zeros)
        cube = (blocks.set_index(["quarter", "block"])[list(BLOCK_COLUMNS)]
                .reindex(pd.MultiIndex.from_product([quarters, block_ids]), fill_value=0.0)
                .to_numpy(dtype=float).reshape(len(quarters), len(block_ids), len(BLOCK_COLUMNS)))
        totals = cube.sum(axis=1)
        self.quarters_ = list(quarters)
        self.n_blocks_ = len(block_ids)
        self.n_customers_ = pd.Series(totals[:, 0].astype(np.int64), index=self.quarters_, name="customers")
        self.params_ = pd.DataFrame(self._ratios(totals), index=self.quarters_, columns=list(RATIOS))
        rng = np.random.default_rng(self.seed)
        weights = rng.multinomial(self.n_blocks_, np.full(self.n_blocks_, 1.0 / self.n_blocks_),
                                  size=self.bootstrap_rounds).astype(float)
        resampled = np.einsum("rb,qbc->rqc", weights, cube)  # rounds x quarters x columns
        self.replicates_ = self._ratios(resampled)
        return self

    @staticmethod
    def _ratios(sums: np.ndarray) -> np.ndarray:
        index = {c: i for i, c in enumerate(BLOCK_COLUMNS)}
        out = []
        with np.errstate(invalid="ignore", divide="ignore"):
            for numerator, denominator in RATIOS.values():
                num, den = sums[..., index[numerator]], sums[..., index[denominator]]
                out.append(np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan))
        return np.stack(out, axis=-1)

    def conf_int(self, alpha: float | None = None) -> pd.DataFrame:
        """Percentile intervals: one row per quarter x statistic (``ci_low``, ``ci_high``)."""
        alpha = self.alpha if alpha is None else alpha
        with np.errstate(invalid="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # a statistic with no data (no deal orders): NaN
            low = np.nanquantile(self.replicates_, alpha / 2, axis=0) if len(self.replicates_) else np.nan
            high = np.nanquantile(self.replicates_, 1 - alpha / 2, axis=0) if len(self.replicates_) else np.nan
        rows = []
        for i, quarter in enumerate(self.quarters_):
            for j, statistic in enumerate(RATIOS):
                rows.append({"quarter": quarter, "statistic": statistic, "ci_low": low[i, j], "ci_high": high[i, j]})
        return pd.DataFrame(rows).set_index(["quarter", "statistic"])

    @property
    def summary(self) -> pd.DataFrame:
        """One row per quarter: customers, each statistic and its interval (``<statistic>_ci_low/high``)."""
        ci = self.conf_int()
        out = self.params_.copy()
        for statistic in RATIOS:
            out[f"{statistic}_ci_low"] = ci.xs(statistic, level="statistic")["ci_low"].to_numpy()
            out[f"{statistic}_ci_high"] = ci.xs(statistic, level="statistic")["ci_high"].to_numpy()
        out.insert(0, "customers", self.n_customers_)
        out.index.name = "quarter"
        return out.reset_index()

    def to_html(self) -> str:
        return (f"<p>Discount dependence by quarter: customer-block bootstrap ({self.n_blocks_} blocks, "
                f"{self.bootstrap_rounds} rounds), {1 - self.alpha:.0%} intervals</p>" + self.summary.to_html(index=False))

    def _repr_html_(self) -> str:
        return self.to_html()


def _suppress(frame: pd.DataFrame, count_col: str, small_cell: int, value_cols: list[str]) -> pd.DataFrame:
    small = frame[count_col] < small_cell
    frame = frame.copy()
    frame["is_suppressed"] = small
    frame[value_cols] = frame[value_cols].astype(float)
    frame.loc[small, value_cols] = np.nan
    return frame


def analyse(con, settings, through_end: dt.date) -> tuple[dict[str, pd.DataFrame], list[str]]:
    """Dependence tables: ``dependence_by_quarter``, ``dependence_transitions``, ``dependence_distribution``."""
    longrun = settings.longrun
    small_cell = settings.report.small_cell
    notes: list[str] = []
    if not longrun.reference_depth > 0:
        raise AnalysisError(f"[longrun] reference_depth must be above 0, found {longrun.reference_depth!r}")
    cur = con.cursor()
    try:
        _sql.run(cur, "longrun_dependence", through_end=through_end, reference_depth=float(longrun.reference_depth),
                 dependent_threshold=float(longrun.dependent_threshold), n_blocks=int(longrun.n_blocks),
                 seed=int(longrun.seed))
        for name in ("longrun_dependence_blocks", "longrun_dependence_transitions", "longrun_dependence_distribution"):
            _sql.run(cur, name)
        blocks = cur.execute("SELECT * FROM longrun_dependence_blocks ORDER BY quarter_on, block").df()
        if blocks.empty:
            raise AnalysisError(f"panel orders: no purchases on or before {through_end}")
        percentiles = cur.execute(
            "SELECT quarter, quantile_cont(dependence_index, 0.5) AS dependence_index_p50, "
            "quantile_cont(dependence_index, 0.9) AS dependence_index_p90 FROM longrun_dependence GROUP BY quarter"
        ).df()
        transitions = cur.execute("SELECT * FROM longrun_dependence_transitions ORDER BY from_on, band_from, band_to").df()
        distribution = cur.execute("SELECT * FROM longrun_dependence_distribution ORDER BY quarter_on, bin").df()
    finally:
        cur.close()

    fit = DependenceByQuarter(alpha=longrun.alpha, bootstrap_rounds=longrun.bootstrap_rounds, seed=longrun.seed).fit(blocks)
    by_quarter = fit.summary.merge(percentiles, on="quarter", how="left")
    value_cols = [c for c in by_quarter.columns if c not in ("quarter", "customers")]
    by_quarter = _suppress(by_quarter, "customers", small_cell, value_cols)
    by_quarter["ci_level"] = 1 - longrun.alpha
    by_quarter["method"] = (f"customer-block bootstrap ({fit.n_blocks_} blocks, {longrun.bootstrap_rounds} rounds); "
                            f"index: depth-weighted deal share, reference depth {longrun.reference_depth:g}")
    order = ["quarter", "customers", "deal_share_orders", "deal_share_revenue", "deal_only_share", "full_price_share",
             "mean_depth", "dependence_index_p50", "dependence_index_p90", "dependence_index_mean", "dependent_share"]
    ci_cols = [f"{s}_ci_{side}" for s in RATIOS for side in ("low", "high")]
    by_quarter = by_quarter[order + ci_cols + ["ci_level", "is_suppressed", "method"]]
    if (by_quarter["deal_share_orders"].fillna(0) == 0).all():
        notes.append("no deal orders in the data: every dependence index is 0")

    tables = {
        "dependence_by_quarter": by_quarter,
        "dependence_transitions": _transitions(transitions, small_cell),
        "dependence_distribution": _distribution(distribution, small_cell),
    }
    if len(fit.quarters_) < 2:
        notes.append("dependence_transitions needs two quarters with purchases; the data has one")
    return tables, notes


def _transitions(frame: pd.DataFrame, small_cell: int) -> pd.DataFrame:
    columns = ["quarter_from", "quarter_to", "band_from", "band_to", "movement", "customers", "share", "is_suppressed"]
    if frame.empty:
        return pd.DataFrame({c: pd.Series(dtype="float64" if c in ("customers", "share") else "object") for c in columns})
    frame = frame.copy()
    frame["movement"] = [_movement(a, b) for a, b in zip(frame["band_from"], frame["band_to"])]
    frame["share"] = frame["customers"] / frame.groupby(["quarter_from", "band_from"])["customers"].transform("sum")
    frame = _suppress(frame, "customers", small_cell, ["customers", "share"])
    return frame[columns].reset_index(drop=True)


def _distribution(frame: pd.DataFrame, small_cell: int) -> pd.DataFrame:
    frame = frame.copy()
    frame["share"] = frame["customers"] / frame.groupby("quarter")["customers"].transform("sum")
    frame["index_from"] = np.where(frame["bin"] == 0, 0.0, (frame["bin"] - 1) / 10)
    frame["index_to"] = np.where(frame["bin"] == 0, 0.0, frame["bin"] / 10)
    frame["band_label"] = np.where(frame["bin"] == 0, "0 (full price only)",
                                   [f"({(b - 1) / 10:.1f}, {b / 10:.1f}]" for b in frame["bin"]])
    frame = _suppress(frame, "customers", small_cell, ["customers", "share"])
    return frame[["quarter", "bin", "band_label", "index_from", "index_to", "customers", "share",
                  "is_suppressed"]].reset_index(drop=True)
