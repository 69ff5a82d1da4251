"""Days to the next order after a deal purchase and after a full-price purchase.

:class:`TimeToNextOrder` fits one Kaplan-Meier curve per group (lifelines
``KaplanMeierFitter``, exponential Greenwood pointwise intervals), compares the groups with the
log-rank test, and reports each group's median and restricted mean time to the next order up to a
horizon (RMST, the area under the curve). The difference in RMST between the first and the second
group is the ``gap_after_deal`` effect, in days.

The input is counts, not rows: one row per group x days x event flag (x block) with the number of
gaps, as built in SQL (``sql/timing/timing_gap_counts.sql``), so the fit costs the same for a
thousand customers or a million.

Interval of the RMST difference: customer-block bootstrap. One customer's gaps are not
independent of each other (a frequent buyer contributes many short gaps to both groups), so the
analytic (Greenwood-type) variance of the RMST, which treats every gap as independent, is too
narrow. Customers are hashed into blocks in SQL; each bootstrap round draws blocks with
replacement, rebuilds both curves from the drawn blocks' counts and takes the difference in RMST;
the interval is the percentile interval of the rounds. Blocks are random groups of whole customers,
so resampling them is a cluster bootstrap (with 64 or more blocks its variance is close to a
customer-level one).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from lifelines import KaplanMeierFitter
from lifelines.statistics import logrank_test

from ..errors import AnalysisError, StatisticalWarning
from ._base import FittedMixin, check_alpha, percentile_interval
from .checks import check_columns


def km_from_counts(days: np.ndarray, events: np.ndarray, exits: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Kaplan-Meier survival at each distinct day from counts.

    Parameters
    ----------
    days : ndarray of float
        Distinct exit times, ascending.
    events : ndarray
        Events at each time.
    exits : ndarray
        All exits (events + censored) at each time.

    Returns
    -------
    days, survival, at_risk : ndarray
        Survival just after each time, and the number at risk just before it.
    """
    at_risk = exits[::-1].cumsum()[::-1]
    with np.errstate(invalid="ignore", divide="ignore"):
        step = np.where(at_risk > 0, 1.0 - events / at_risk, 1.0)
    return days, np.cumprod(step), at_risk


def logrank_from_counts(days_a, events_a, exits_a, days_b, events_b, exits_b) -> tuple[float, float]:
    """Two-group log-rank chi-square (1 df) and its p-value from counts per distinct day."""
    grid = np.union1d(days_a, days_b)

    def on_grid(days, values):
        out = np.zeros(len(grid))
        out[np.searchsorted(grid, days)] = values
        return out

    ea, xa = on_grid(days_a, events_a), on_grid(days_a, exits_a)
    eb, xb = on_grid(days_b, events_b), on_grid(days_b, exits_b)
    na = xa[::-1].cumsum()[::-1]
    nb = xb[::-1].cumsum()[::-1]
    n, d = na + nb, ea + eb
    with np.errstate(invalid="ignore", divide="ignore"):
        expected_a = np.where(n > 0, d * na / n, 0.0)
        variance = np.where(n > 1, d * (na / n) * (nb / n) * (n - d) / (n - 1), 0.0)
    statistic = float((ea.sum() - expected_a.sum()) ** 2 / variance.sum()) if variance.sum() > 0 else 0.0
    from scipy import stats

    return statistic, float(stats.chi2.sf(statistic, 1))


def median_from_curve(days: np.ndarray, survival: np.ndarray) -> float:
    """First day on which survival drops to 0.5 or below (inf when it never does)."""
    below = np.flatnonzero(survival <= 0.5)
    return float(days[below[0]]) if len(below) else float("inf")


def restricted_mean(days: np.ndarray, survival: np.ndarray, horizon: float) -> float:
    """Area under a right-continuous step survival curve from 0 to ``horizon``.

    ``survival[i]`` holds on ``[days[i], days[i+1])``; before the first day the curve is 1.
    """
    days = np.asarray(days, dtype=float)
    survival = np.asarray(survival, dtype=float)
    keep = days < horizon
    knots = np.concatenate([[0.0], days[keep], [horizon]])
    levels = np.concatenate([[1.0], survival[keep]])
    return float(np.sum(levels * np.diff(knots)))


class TimeToNextOrder(FittedMixin):
    """Kaplan-Meier curves, log-rank test, medians and RMST of the days to the next order.

    Parameters
    ----------
    horizon_days : int, default=90
        Horizon of the restricted mean (settings.timing.horizon_days).
    alpha : float, default=0.05
        Significance level of every interval.
    bootstrap_rounds : int, default=50
        Rounds of the customer-block bootstrap of the RMST difference (0: no interval).
    seed : int, default=20261201
    min_events : int, default=10
        Fewer events than this in a group: the group's RMST is not estimated.
    small_cell : int, default=10
        Curve points with fewer gaps at risk are not reported (no small cells in outputs).
    curves : bool, default=True
        Fit the curves with lifelines (pointwise intervals, median intervals, lifelines' log-rank).
        With False everything is computed from the counts directly (same estimates, no pointwise
        intervals): the fast path for comparing many promotions.

    Attributes
    ----------
    curves_ : DataFrame
        group, days, survival, ci_low, ci_high, at_risk.
    groups_ : DataFrame
        One row per group: gaps, events, median_days (and its interval), rmst_days.
    logrank_ : dict
        test_statistic, p_value, degrees_of_freedom.
    params_ : pandas.Series
        ``rmst_difference``: RMST of the first group minus the second, in days.
    bootstrap_draws_ : ndarray
        The RMST difference in each bootstrap round.

    Examples
    --------
    >>> import pandas as pd
    >>> counts = pd.DataFrame({"group": ["deal"] * 3 + ["full_price"] * 3, "days": [5, 10, 20] * 2,
    ...                        "is_event": [True] * 6, "gaps": [20, 10, 10, 10, 10, 20]})
    >>> fit = TimeToNextOrder(horizon_days=30, bootstrap_rounds=0).fit(counts, groups=("deal", "full_price"))
    >>> round(float(fit.params_["rmst_difference"]), 2)
    -3.75
    """

    def __init__(
        self,
        *,
        horizon_days: int = 90,
        alpha: float = 0.05,
        bootstrap_rounds: int = 50,
        seed: int = 20261201,
        min_events: int = 10,
        small_cell: int = 10,
        curves: bool = True,
    ) -> None:
        self.horizon_days = horizon_days
        self.alpha = alpha
        self.bootstrap_rounds = bootstrap_rounds
        self.seed = seed
        self.min_events = min_events
        self.small_cell = small_cell
        self.curves = curves

    def fit(
        self,
        counts: pd.DataFrame,
        *,
        groups: tuple[str, str],
        group_col: str = "group",
        days_col: str = "days",
        event_col: str = "is_event",
        count_col: str = "gaps",
        block_col: str | None = None,
        table: str = "gap counts",
    ) -> "TimeToNextOrder":
        """Fit both curves from counts of gaps.

        Parameters
        ----------
        counts : DataFrame
            One row per group x days x event flag (x block): the number of gaps.
        groups : (str, str)
            The two groups compared; the RMST difference is first minus second.
        block_col : str, optional
            Customer block of each row, for the bootstrap. Without it the bootstrap resamples
            rows of counts as if every gap were independent (and says so with a warning).
        """
        alpha = check_alpha(self.alpha)
        if self.horizon_days <= 0:
            raise AnalysisError(f"horizon_days must be positive, found {self.horizon_days!r}")
        needed = [group_col, days_col, event_col, count_col] + ([block_col] if block_col else [])
        check_columns(counts, needed, table=table)
        data = counts[counts[count_col] > 0]
        if (data[days_col] < 0).any():
            raise AnalysisError(f"{table}.{days_col}: negative days to the next order; rebuild the panels")
        self.n_zero_days_ = int(data.loc[data[days_col] == 0, count_col].sum())
        self.groups = tuple(groups)
        curves, rows, fitted = [], [], {}
        for name in self.groups:
            part = data[data[group_col] == name]
            agg = part.groupby([days_col, event_col], as_index=False)[count_col].sum()
            n_gaps = float(agg[count_col].sum())
            n_events = float(agg.loc[agg[event_col].astype(bool), count_col].sum())
            row = {"group": name, "gaps": int(n_gaps), "events": int(n_events), "median_days": np.nan,
                   "median_ci_low": np.nan, "median_ci_high": np.nan, "rmst_days": np.nan}
            if n_events >= self.min_events and self.curves:
                kmf = KaplanMeierFitter(alpha=alpha)
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")  # lifelines warns about weights; ours are counts
                    kmf.fit(agg[days_col].to_numpy(float), agg[event_col].astype(bool).to_numpy(),
                            weights=agg[count_col].to_numpy(float), label=name)
                fitted[name] = (kmf, agg)
                row.update(self._group_row(kmf))
                curves.append(self._curve(kmf, name))
            elif n_events >= self.min_events:
                days, events, exits = self._by_day(agg, days_col, event_col, count_col)
                _, survival, _ = km_from_counts(days, events, exits)
                fitted[name] = (None, agg)
                row.update({"median_days": median_from_curve(days, survival),
                            "rmst_days": restricted_mean(days, survival, self.horizon_days)})
            rows.append(row)
        self.groups_ = pd.DataFrame(rows)
        self.curves_ = pd.concat(curves, ignore_index=True) if curves else pd.DataFrame(
            columns=["group", "days", "survival", "ci_low", "ci_high", "at_risk"])
        first, second = self.groups
        if first not in fitted or second not in fitted:
            short = [g for g in self.groups if g not in fitted]
            found = {r["group"]: r["events"] for r in rows}
            raise AnalysisError(
                f"{table}: too few observed next orders to compare '{first}' with '{second}': "
                + ", ".join(f"'{g}' has {found[g]}" for g in short)
                + f"; at least {self.min_events} per group are needed"
            )
        (_, agg_a), (_, agg_b) = fitted[first], fitted[second]
        if self.curves:
            test = logrank_test(
                agg_a[days_col].to_numpy(float), agg_b[days_col].to_numpy(float),
                agg_a[event_col].astype(bool).to_numpy(), agg_b[event_col].astype(bool).to_numpy(),
                weights_A=agg_a[count_col].to_numpy(float), weights_B=agg_b[count_col].to_numpy(float),
            )
            statistic, p_value = float(test.test_statistic), float(test.p_value)
        else:
            statistic, p_value = logrank_from_counts(*self._by_day(agg_a, days_col, event_col, count_col),
                                                     *self._by_day(agg_b, days_col, event_col, count_col))
        self.logrank_ = {"test_statistic": statistic, "p_value": p_value, "degrees_of_freedom": 1}
        difference = self._rmst_difference(data, group_col, days_col, event_col, count_col)
        self.params_ = pd.Series({"rmst_difference": difference})
        self.bootstrap_draws_ = self._bootstrap(data, group_col, days_col, event_col, count_col, block_col)
        self.n_customers_blocks_ = int(data[block_col].nunique()) if block_col else None
        return self

    # -- pieces ---------------------------------------------------------------------------------
    @staticmethod
    def _by_day(agg, days_col, event_col, count_col):
        """Distinct days, events and exits per day of one group's counts."""
        counts = agg.assign(_event=agg[count_col] * agg[event_col].astype(bool)).groupby(days_col)[
            ["_event", count_col]].sum().sort_index()
        return counts.index.to_numpy(float), counts["_event"].to_numpy(float), counts[count_col].to_numpy(float)

    def _group_row(self, kmf: KaplanMeierFitter) -> dict:
        from lifelines.utils import median_survival_times

        median = float(kmf.median_survival_time_)
        ci = median_survival_times(kmf.confidence_interval_)
        timeline = kmf.survival_function_.index.to_numpy(float)
        survival = kmf.survival_function_.iloc[:, 0].to_numpy(float)
        return {
            "median_days": median,
            "median_ci_low": float(ci.iloc[0, 0]),
            "median_ci_high": float(ci.iloc[0, 1]),
            "rmst_days": restricted_mean(timeline, survival, self.horizon_days),
        }

    def _curve(self, kmf: KaplanMeierFitter, name: str) -> pd.DataFrame:
        table = kmf.event_table
        frame = pd.DataFrame({
            "group": name,
            "days": kmf.survival_function_.index.to_numpy(float),
            "survival": kmf.survival_function_.iloc[:, 0].to_numpy(float),
            "ci_low": kmf.confidence_interval_.iloc[:, 0].to_numpy(float),
            "ci_high": kmf.confidence_interval_.iloc[:, 1].to_numpy(float),
            "at_risk": table["at_risk"].reindex(kmf.survival_function_.index).to_numpy(float),
        })
        frame = frame[frame["days"] > 0]
        # No small cells: stop the curve where fewer than small_cell gaps remain at risk.
        return frame[frame["at_risk"] >= self.small_cell].reset_index(drop=True)

    def _arrays(self, data, group_col, days_col, event_col, count_col, block_col):
        """Per group: events and exits by (block, day), days capped just past the horizon."""
        cap = float(self.horizon_days) + 1.0
        out = {}
        blocks = np.unique(data[block_col]) if block_col else np.arange(len(data))
        for name in self.groups:
            part = data[data[group_col] == name]
            day = np.minimum(part[days_col].to_numpy(float), cap)
            grid = np.unique(np.concatenate([day, [cap]]))
            day_index = np.searchsorted(grid, day)
            block_index = np.searchsorted(blocks, part[block_col].to_numpy()) if block_col else np.flatnonzero(
                (data[group_col] == name).to_numpy())
            count = part[count_col].to_numpy(float)
            # Exits at the cap are still at risk up to the horizon; they never count as events there.
            event = part[event_col].astype(bool).to_numpy() & (day < cap)
            shape = (len(blocks), len(grid))
            events = np.zeros(shape)
            exits = np.zeros(shape)
            np.add.at(events, (block_index, day_index), count * event)
            np.add.at(exits, (block_index, day_index), count)
            out[name] = (grid, events, exits)
        return blocks, out

    def _rmst_from(self, grid, events, exits) -> float:
        days, survival, _ = km_from_counts(grid, events, exits)
        return restricted_mean(days, survival, self.horizon_days)

    def _rmst_difference(self, data, group_col, days_col, event_col, count_col) -> float:
        first, second = self.groups
        rmst = self.groups_.set_index("group")["rmst_days"]
        return float(rmst[first] - rmst[second])

    def _bootstrap(self, data, group_col, days_col, event_col, count_col, block_col) -> np.ndarray:
        if not self.bootstrap_rounds:
            return np.empty(0)
        if not block_col:
            warnings.warn(
                "TimeToNextOrder: no customer block column; the bootstrap treats every gap as independent "
                "and its interval is too narrow when customers contribute several gaps",
                StatisticalWarning, stacklevel=3,
            )
        blocks, arrays = self._arrays(data, group_col, days_col, event_col, count_col, block_col)
        rng = np.random.default_rng(self.seed)
        draws = np.empty(self.bootstrap_rounds)
        n_blocks = len(blocks)
        for r in range(self.bootstrap_rounds):
            weight = np.bincount(rng.integers(0, n_blocks, n_blocks), minlength=n_blocks).astype(float)
            values = []
            for name in self.groups:
                grid, events, exits = arrays[name]
                values.append(self._rmst_from(grid, weight @ events, weight @ exits))
            draws[r] = values[0] - values[1]
        return draws

    # -- results --------------------------------------------------------------------------------
    def conf_int(self, alpha: float = 0.05) -> pd.DataFrame:
        """Percentile bootstrap interval of the RMST difference (NaN without bootstrap rounds)."""
        self._check_fitted()
        alpha = check_alpha(alpha)
        if len(self.bootstrap_draws_) == 0:
            low, high = np.nan, np.nan
        else:
            low, high = (float(v[0]) for v in percentile_interval(self.bootstrap_draws_[:, None], alpha))
        return pd.DataFrame({"ci_low": [low], "ci_high": [high]}, index=["rmst_difference"])

    def _summary_frame(self) -> pd.DataFrame:
        ci = self.conf_int(self.alpha)
        first, second = self.groups
        frame = self.groups_.copy()
        frame["horizon_days"] = self.horizon_days
        diff = pd.DataFrame([{
            "group": f"{first} - {second}", "rmst_days": self.params_["rmst_difference"],
            "rmst_ci_low": ci.loc["rmst_difference", "ci_low"], "rmst_ci_high": ci.loc["rmst_difference", "ci_high"],
            "horizon_days": self.horizon_days,
        }])
        return pd.concat([frame, diff], ignore_index=True)

    def _header(self) -> dict[str, object]:
        return {
            "log-rank chi-square (1 df)": round(self.logrank_["test_statistic"], 3),
            "log-rank p": f"{self.logrank_['p_value']:.3g}",
            "horizon (days)": self.horizon_days,
            "interval": f"{1 - self.alpha:.0%} customer-block bootstrap, {self.bootstrap_rounds} rounds",
        }
