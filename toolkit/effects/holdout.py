"""Average effects of a randomised holdout on one outcome.

Welch (or pooled-variance) difference of means, a delta-method interval for the relative lift,
the CUPED estimate that uses a pre-period outcome as covariate (Deng, Xu, Kohavi & Walker 2013,
"Improving the sensitivity of online controlled experiments by utilizing pre-experiment data"),
and for a 0/1 outcome the Newcombe hybrid score interval for a difference of proportions
(Newcombe 1998, "Interval estimation for the difference between independent proportions",
Statistics in Medicine 17, method 10).

Everything is computed from per-arm sufficient statistics (count, mean, variance, covariance),
so one pass over a million customers costs a few milliseconds.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import AnalysisError, StatisticalWarning

METHODS = ("welch", "pooled", "cuped", "newcombe")


@dataclass(frozen=True)
class ArmStatistics:
    """Count, mean and variance (ddof=1) of one outcome in one arm."""

    count: int
    mean: float
    variance: float

    @classmethod
    def of(cls, values: np.ndarray) -> "ArmStatistics":
        n = int(values.size)
        mean = float(values.mean()) if n else math.nan
        variance = float(values.var(ddof=1)) if n > 1 else math.nan
        return cls(n, mean, variance)

    @property
    def variance_of_mean(self) -> float:
        return self.variance / self.count if self.count else math.nan


@dataclass(frozen=True)
class Comparison:
    """One estimate of the lift: means compared, the lift, its standard error and degrees of freedom.

    ``interval(alpha)`` and ``relative_interval(alpha)`` recompute the intervals at any level.
    """

    method: str
    treated: ArmStatistics
    holdout: ArmStatistics
    treated_mean: float  # the means compared (covariate-adjusted for cuped)
    holdout_mean: float
    lift: float
    standard_error: float
    degrees_of_freedom: float  # inf for a normal interval
    variance_reduction: float = math.nan  # cuped: 1 - adjusted variance / raw variance
    treated_variance_of_mean: float = math.nan
    holdout_variance_of_mean: float = math.nan
    treated_count: float = math.nan  # newcombe: number of 1s in each arm
    holdout_count: float = math.nan

    def interval(self, alpha: float = 0.05) -> tuple[float, float]:
        if self.method == "newcombe":
            return newcombe_interval(
                int(self.treated_count), self.treated.count, int(self.holdout_count), self.holdout.count, alpha=alpha
            )
        if not np.isfinite(self.standard_error) or self.standard_error <= 0:
            return math.nan, math.nan
        if np.isfinite(self.degrees_of_freedom):
            q = stats.t.ppf(1 - alpha / 2, self.degrees_of_freedom)
        else:
            q = stats.norm.ppf(1 - alpha / 2)
        return self.lift - q * self.standard_error, self.lift + q * self.standard_error

    def relative(self) -> tuple[float, float]:
        """Relative lift (treated / holdout - 1) and its delta-method standard error."""
        return relative_lift(
            self.treated_mean, self.treated_variance_of_mean, self.holdout_mean, self.holdout_variance_of_mean
        )

    def relative_interval(self, alpha: float = 0.05) -> tuple[float, float]:
        rel, se = self.relative()
        if not np.isfinite(se) or se <= 0:
            return math.nan, math.nan
        q = stats.norm.ppf(1 - alpha / 2)
        return rel - q * se, rel + q * se

    @property
    def p_value(self) -> float:
        if not np.isfinite(self.standard_error) or self.standard_error <= 0:
            return math.nan
        z = abs(self.lift) / self.standard_error
        if np.isfinite(self.degrees_of_freedom):
            return float(2 * stats.t.sf(z, self.degrees_of_freedom))
        return float(2 * stats.norm.sf(z))

    def row(self, alpha: float = 0.05) -> dict:
        low, high = self.interval(alpha)
        rel, _ = self.relative()
        rel_low, rel_high = self.relative_interval(alpha)
        return {
            "treated_mean": self.treated_mean,
            "holdout_mean": self.holdout_mean,
            "lift": self.lift,
            "lift_se": self.standard_error,
            "lift_ci_low": low,
            "lift_ci_high": high,
            "relative_lift": rel,
            "relative_lift_ci_low": rel_low,
            "relative_lift_ci_high": rel_high,
            "p_value": self.p_value,
            "n_treated": self.treated.count,
            "n_holdout": self.holdout.count,
            "method": self.method,
            "variance_reduction": self.variance_reduction,
        }


# --- primitives -------------------------------------------------------------------------------


def mean_difference(treated: np.ndarray, holdout: np.ndarray, *, variance: str = "welch") -> Comparison:
    """Difference of means with a Welch (unequal variances) or pooled-variance t standard error.

    Parameters
    ----------
    treated, holdout : array of float
        The outcome of each customer in each arm.
    variance : {"welch", "pooled"}, default="welch"
        ``"welch"``: Welch-Satterthwaite degrees of freedom; ``"pooled"``: the classical two-sample
        t with the pooled variance and n_treated + n_holdout - 2 degrees of freedom.
    """
    t_stats = ArmStatistics.of(np.asarray(treated, dtype=float))
    h_stats = ArmStatistics.of(np.asarray(holdout, dtype=float))
    return _difference_from_stats(t_stats, h_stats, variance=variance)


def _difference_from_stats(t_stats: ArmStatistics, h_stats: ArmStatistics, *, variance: str,
                           method: str | None = None, treated_mean: float | None = None,
                           holdout_mean: float | None = None, variance_reduction: float = math.nan) -> Comparison:
    nt, nc = t_stats.count, h_stats.count
    vt, vc = t_stats.variance, h_stats.variance
    mt = t_stats.mean if treated_mean is None else treated_mean
    mc = h_stats.mean if holdout_mean is None else holdout_mean
    if variance == "welch":
        a, b = vt / nt if nt else math.nan, vc / nc if nc else math.nan
        se = math.sqrt(a + b) if np.isfinite(a + b) else math.nan
        denominator = (a * a / (nt - 1) if nt > 1 else math.nan) + (b * b / (nc - 1) if nc > 1 else math.nan)
        df = (a + b) ** 2 / denominator if denominator and np.isfinite(denominator) and denominator > 0 else math.nan
        var_t, var_c = a, b
    elif variance == "pooled":
        if nt + nc > 2:
            pooled = ((nt - 1) * vt + (nc - 1) * vc) / (nt + nc - 2)
            se = math.sqrt(pooled * (1 / nt + 1 / nc))
            var_t, var_c = pooled / nt, pooled / nc
        else:
            se = var_t = var_c = math.nan
        df = float(nt + nc - 2)
    else:
        raise ValueError(f"variance must be 'welch' or 'pooled', found {variance!r}")
    return Comparison(
        method=method or variance, treated=t_stats, holdout=h_stats, treated_mean=mt, holdout_mean=mc,
        lift=mt - mc, standard_error=se, degrees_of_freedom=df, variance_reduction=variance_reduction,
        treated_variance_of_mean=var_t, holdout_variance_of_mean=var_c,
    )


def relative_lift(treated_mean: float, treated_variance_of_mean: float, holdout_mean: float,
                  holdout_variance_of_mean: float) -> tuple[float, float]:
    """Relative lift treated_mean / holdout_mean - 1 and its delta-method standard error.

    With independent arms, Var(m_t / m_c) ~ Var(m_t) / m_c^2 + m_t^2 Var(m_c) / m_c^4 (first-order
    Taylor expansion; common practice, e.g. Deng, Knoblich & Lu 2018 "Applying the delta method in
    metric analytics"). NaN when the holdout mean is zero.
    """
    if not holdout_mean or not np.isfinite(holdout_mean):
        return math.nan, math.nan
    rel = treated_mean / holdout_mean - 1.0
    var = treated_variance_of_mean / holdout_mean**2 + treated_mean**2 * holdout_variance_of_mean / holdout_mean**4
    return rel, math.sqrt(var) if np.isfinite(var) and var >= 0 else math.nan


def wilson_interval(count: int, nobs: int, *, alpha: float = 0.05) -> tuple[float, float]:
    """Wilson score interval for a proportion (Wilson 1927), without continuity correction."""
    if nobs <= 0:
        return math.nan, math.nan
    z = stats.norm.ppf(1 - alpha / 2)
    p = count / nobs
    centre = (p + z * z / (2 * nobs)) / (1 + z * z / nobs)
    half = z * math.sqrt(p * (1 - p) / nobs + z * z / (4 * nobs * nobs)) / (1 + z * z / nobs)
    return centre - half, centre + half


def newcombe_interval(treated_count: int, n_treated: int, holdout_count: int, n_holdout: int, *,
                      alpha: float = 0.05) -> tuple[float, float]:
    """Newcombe's hybrid score interval for p_treated - p_holdout (Newcombe 1998, method 10).

    Built from the two Wilson intervals (l1, u1) and (l2, u2):
    lower = d - sqrt((p1 - l1)^2 + (u2 - p2)^2), upper = d + sqrt((u1 - p1)^2 + (p2 - l2)^2).
    """
    if n_treated <= 0 or n_holdout <= 0:
        return math.nan, math.nan
    p1, p2 = treated_count / n_treated, holdout_count / n_holdout
    l1, u1 = wilson_interval(treated_count, n_treated, alpha=alpha)
    l2, u2 = wilson_interval(holdout_count, n_holdout, alpha=alpha)
    d = p1 - p2
    return d - math.sqrt((p1 - l1) ** 2 + (u2 - p2) ** 2), d + math.sqrt((u1 - p1) ** 2 + (p2 - l2) ** 2)


def newcombe_difference(treated: np.ndarray, holdout: np.ndarray) -> Comparison:
    """Difference of two proportions with Newcombe's interval (see :func:`newcombe_interval`)."""
    t = np.asarray(treated, dtype=float)
    h = np.asarray(holdout, dtype=float)
    base = mean_difference(t, h, variance="welch")
    return Comparison(
        method="newcombe", treated=base.treated, holdout=base.holdout, treated_mean=base.treated_mean,
        holdout_mean=base.holdout_mean, lift=base.lift, standard_error=base.standard_error,
        degrees_of_freedom=math.inf, treated_variance_of_mean=base.treated_variance_of_mean,
        holdout_variance_of_mean=base.holdout_variance_of_mean,
        treated_count=float(t.sum()), holdout_count=float(h.sum()),
    )


def cuped_difference(treated: np.ndarray, holdout: np.ndarray, treated_covariate: np.ndarray,
                     holdout_covariate: np.ndarray) -> Comparison:
    """CUPED: the difference of covariate-adjusted means (Deng et al. 2013).

    theta = Cov(Y, X) / Var(X) over both arms pooled; each customer's outcome becomes
    Y - theta (X - mean X). With randomisation the covariate's arm means differ only by chance, so
    the estimate stays unbiased while its variance shrinks by the share Corr(Y, X)^2. The means
    reported are the adjusted ones (their difference is the lift); ``variance_reduction`` is
    1 - Var(adjusted) / Var(raw) over both arms. The interval is Welch's on the adjusted outcome,
    treating theta as known (as in the paper).
    """
    y_t = np.asarray(treated, dtype=float)
    y_c = np.asarray(holdout, dtype=float)
    x_t = np.asarray(treated_covariate, dtype=float)
    x_c = np.asarray(holdout_covariate, dtype=float)
    y = np.concatenate([y_t, y_c])
    x = np.concatenate([x_t, x_c])
    x_mean = x.mean()
    var_x = x.var(ddof=1) if x.size > 1 else 0.0
    theta = float(((x - x_mean) * (y - y.mean())).sum() / (x.size - 1) / var_x) if var_x > 0 else 0.0
    adj_t = y_t - theta * (x_t - x_mean)
    adj_c = y_c - theta * (x_c - x_mean)
    var_y = y.var(ddof=1) if y.size > 1 else math.nan
    var_adj = np.concatenate([adj_t, adj_c]).var(ddof=1) if y.size > 1 else math.nan
    reduction = 1.0 - var_adj / var_y if var_y and np.isfinite(var_y) and var_y > 0 else math.nan
    t_stats, c_stats = ArmStatistics.of(adj_t), ArmStatistics.of(adj_c)
    return _difference_from_stats(
        t_stats, c_stats, variance="welch", method="cuped", variance_reduction=reduction,
    )


# --- estimator ---------------------------------------------------------------------------------


class HoldoutComparison:
    """Compare a treated arm with its randomised holdout on one outcome.

    Parameters
    ----------
    alpha : float, default=0.05
        Significance level of the intervals (0.05 gives 95% intervals).
    variance : {"welch", "pooled"}, default="welch"
        Standard error of the plain difference of means.

    Attributes
    ----------
    comparisons_ : dict of str to Comparison
        One estimate per method: ``welch`` (or ``pooled``), ``cuped`` when a covariate is given,
        ``newcombe`` when the outcome is 0/1.
    n_treated_, n_holdout_ : int
    outcome_col_, covariate_col_ : str

    Examples
    --------
    >>> from toolkit.effects.holdout import HoldoutComparison
    >>> fit = HoldoutComparison().fit(panel, outcome_col="during_buyer", covariate_col="pre_buyer")  # doctest: +SKIP
    >>> fit.summary  # doctest: +SKIP
    """

    def __init__(self, *, alpha: float = 0.05, variance: str = "welch"):
        self.alpha = alpha
        self.variance = variance

    def fit(self, frame: pd.DataFrame, *, outcome_col: str, treatment_col: str = "is_treated",
            covariate_col: str | None = None, binary: bool | None = None) -> "HoldoutComparison":
        """Estimate the lift of ``outcome_col`` between treated and holdout rows of ``frame``.

        Parameters
        ----------
        frame : DataFrame
            One row per customer.
        outcome_col : str
            The outcome (a 0/1 flag, a count or an amount).
        treatment_col : str, default="is_treated"
            True (or 1) for the treated arm, False (or 0) for the holdout.
        covariate_col : str, optional
            A pre-period version of the outcome for CUPED.
        binary : bool, optional
            Add the Newcombe interval; by default when the outcome only takes the values 0 and 1.
        """
        if not 0 < self.alpha < 1:
            raise ValueError(f"alpha must be between 0 and 1, found {self.alpha!r}")
        if self.variance not in ("welch", "pooled"):
            raise ValueError(f"variance must be 'welch' or 'pooled', found {self.variance!r}")
        for col in (outcome_col, treatment_col) + ((covariate_col,) if covariate_col else ()):
            if col not in frame.columns:
                raise AnalysisError(f"column '{col}' is not in the frame; columns are {', '.join(map(str, frame.columns))}")
        treated_flag = _as_flag(frame[treatment_col], treatment_col)
        y = frame[outcome_col].to_numpy(dtype=float)
        if np.isnan(y).any():
            raise AnalysisError(f"column '{outcome_col}' has {int(np.isnan(y).sum())} missing values; fill them (0 for no purchase) or drop those rows")
        y_t, y_c = y[treated_flag], y[~treated_flag]
        if y_t.size == 0 or y_c.size == 0:
            raise AnalysisError(
                f"one arm is empty ({y_t.size} treated, {y_c.size} holdout rows); a holdout comparison needs both arms"
            )
        if np.ptp(y) == 0:
            warnings.warn(
                f"outcome '{outcome_col}' is constant ({y[0]:g}) in both arms; the lift is 0 and has no interval",
                StatisticalWarning, stacklevel=2,
            )
        self.comparisons_: dict[str, Comparison] = {}
        self.comparisons_[self.variance] = mean_difference(y_t, y_c, variance=self.variance)
        if covariate_col:
            x = frame[covariate_col].to_numpy(dtype=float)
            x = np.where(np.isnan(x), 0.0, x)
            self.comparisons_["cuped"] = cuped_difference(y_t, y_c, x[treated_flag], x[~treated_flag])
        if binary is None:
            binary = bool(np.isin(y, (0.0, 1.0)).all())
        if binary:
            self.comparisons_["newcombe"] = newcombe_difference(y_t, y_c)
        self.n_treated_, self.n_holdout_ = int(y_t.size), int(y_c.size)
        self.outcome_col_, self.covariate_col_ = outcome_col, covariate_col
        return self

    def _check_fitted(self) -> None:
        if not hasattr(self, "comparisons_"):
            raise AnalysisError("this HoldoutComparison is not fitted yet; call fit(frame, outcome_col=...) first")

    @property
    def summary(self) -> pd.DataFrame:
        """One row per method: means compared, lift, interval, relative lift, counts."""
        self._check_fitted()
        rows = [c.row(self.alpha) for c in self.comparisons_.values()]
        out = pd.DataFrame(rows).set_index("method")
        out.insert(0, "outcome", self.outcome_col_)
        out["ci_level"] = 1 - self.alpha
        return out

    def conf_int(self, alpha: float = 0.05) -> pd.DataFrame:
        """Interval of the lift per method at significance level ``alpha``."""
        self._check_fitted()
        rows = {m: c.interval(alpha) for m, c in self.comparisons_.items()}
        return pd.DataFrame.from_dict(rows, orient="index", columns=["lift_ci_low", "lift_ci_high"])

    def to_html(self) -> str:
        self._check_fitted()
        head = (f"<p><b>Holdout comparison</b> of <code>{self.outcome_col_}</code>: "
                f"{self.n_treated_:,} treated, {self.n_holdout_:,} holdout; "
                f"{(1 - self.alpha):.0%} intervals.</p>")
        return head + self.summary.to_html(float_format=lambda v: f"{v:.4g}")

    def _repr_html_(self) -> str:
        return self.to_html()


def _as_flag(series: pd.Series, name: str) -> np.ndarray:
    values = series.to_numpy()
    if values.dtype == bool:
        return values
    if pd.isna(series).any():
        raise AnalysisError(f"column '{name}' has missing values; every row must be treated (True) or holdout (False)")
    uniques = set(pd.unique(series).tolist())
    if not uniques <= {0, 1, True, False}:
        raise AnalysisError(f"column '{name}' must be True/False or 1/0, found values {sorted(map(str, uniques))[:5]}")
    return values.astype(bool)
