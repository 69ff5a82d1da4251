"""Linear regression with absorbed fixed effects and cluster-robust standard errors.

The fixed effects (customer, and optionally week) are removed by alternating projections: each
variable is demeaned within one grouping, then the next, until nothing changes (the method of
alternating projections; for one grouping a single pass is exact). The slopes are then those of
ordinary least squares on the demeaned data, which equal the slopes of a regression with one
dummy per group (Frisch-Waugh-Lovell), without building thousands of dummy columns.

Standard errors are cluster-robust (statsmodels ``cov_type="cluster"``), with the small-sample
factor of a regression with the dummies: the absorbed levels are counted in the parameters,
(G / (G - 1)) x ((N - 1) / (N - K)) with K = slopes + absorbed levels. This matches statsmodels'
cluster-robust OLS with dummies exactly (tests/longrun/test_fixed_effects.py); it is slightly
conservative when the effects are nested in the clusters (customer effects, customer clusters).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..errors import AnalysisError


def _demean(matrix: np.ndarray, codes: list[np.ndarray], counts: list[np.ndarray], tol: float,
            max_iter: int) -> tuple[np.ndarray, int]:
    """Remove the group means of every column for each grouping in turn, until converged."""
    out = matrix.astype(float, copy=True)
    for iteration in range(1, max_iter + 1):
        largest = 0.0
        for code, count in zip(codes, counts):
            for j in range(out.shape[1]):
                means = np.bincount(code, weights=out[:, j], minlength=len(count)) / count
                shift = means[code]
                out[:, j] -= shift
                largest = max(largest, float(np.max(np.abs(means))) if len(means) else 0.0)
        if len(codes) == 1 or largest < tol:
            return out, iteration
    raise AnalysisError(
        f"fixed effects: demeaning did not converge in {max_iter} rounds (largest group mean left {largest:.3g}); "
        "check for a grouping with very few rows per group, or raise max_iter")


class FixedEffectsRegression:
    """OLS with absorbed fixed effects and cluster-robust errors.

    Parameters
    ----------
    alpha : float, default=0.05
        Significance level of :meth:`conf_int` (0.05 gives 95% intervals).
    tol : float, default=1e-10
        Convergence of the alternating demeaning (largest group mean left).
    max_iter : int, default=500

    Attributes
    ----------
    params_ : Series
        Slopes by term.
    bse_ : Series
        Cluster-robust standard errors.
    cov_params_ : DataFrame
    n_obs_, n_clusters_, n_absorbed_ : int
        Rows, clusters and absorbed levels (counted as parameters in the small-sample factor).
    groups_ : dict of str -> int
        Levels of each absorbed grouping.
    iterations_ : int
        Rounds of the demeaning.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> frame = pd.DataFrame({"customer": np.repeat(np.arange(50), 8), "x": rng.normal(size=400)})
    >>> frame["y"] = 2.0 * frame["x"] + frame["customer"] * 0.1 + rng.normal(size=400)
    >>> fit = FixedEffectsRegression().fit(frame, outcome="y", terms=["x"], absorb=["customer"], cluster="customer")
    >>> round(float(fit.params_["x"]), 1)
    2.0
    """

    def __init__(self, *, alpha: float = 0.05, tol: float = 1e-10, max_iter: int = 500) -> None:
        self.alpha = alpha
        self.tol = tol
        self.max_iter = max_iter

    def fit(self, frame: pd.DataFrame, *, outcome: str, terms: list[str], absorb: list[str], cluster: str,
            table: str = "the panel") -> "FixedEffectsRegression":
        """Fit ``outcome ~ terms`` with one fixed effect per level of each column in ``absorb``.

        Parameters
        ----------
        frame : DataFrame
        outcome : str
        terms : list of str
            Regressors (numeric columns).
        absorb : list of str
            Grouping columns whose effects are absorbed (e.g. ``["customer_no", "week_on"]``).
        cluster : str
            Column of the clusters of the standard errors.
        table : str, default="the panel"
            Named in error messages.
        """
        import statsmodels.api as sm

        missing = [c for c in (outcome, *terms, *absorb, cluster) if c not in frame.columns]
        if missing:
            raise AnalysisError(f"{table}: columns {', '.join(missing)} are missing")
        if not absorb:
            raise AnalysisError("fixed effects: name at least one grouping to absorb")
        if len(frame) == 0:
            raise AnalysisError(f"{table}: no rows to fit")
        codes, counts = [], []
        self.groups_ = {}
        for column in absorb:
            code, levels = pd.factorize(frame[column], sort=True)
            codes.append(code)
            counts.append(np.bincount(code, minlength=len(levels)).astype(float))
            self.groups_[column] = len(levels)
        data = frame[[outcome, *terms]].to_numpy(dtype=float)
        if not np.isfinite(data).all():
            raise AnalysisError(f"{table}: missing or infinite values in {outcome} or {', '.join(terms)}")
        demeaned, self.iterations_ = _demean(data, codes, counts, self.tol, self.max_iter)
        y, x = demeaned[:, 0], demeaned[:, 1:]
        flat = [t for t, spread in zip(terms, x.std(axis=0)) if spread < 1e-12]
        if flat:
            raise AnalysisError(
                f"{table}: term(s) {', '.join(flat)} do not vary within the absorbed groups; they cannot be estimated "
                "with these fixed effects (collinear with them)")
        if np.linalg.matrix_rank(x) < x.shape[1]:
            raise AnalysisError(
                f"{table}: the terms {', '.join(terms)} are collinear once the fixed effects are absorbed; "
                "drop one of them or fit on more data")
        clusters = pd.factorize(frame[cluster])[0]
        result = sm.OLS(y, x).fit(cov_type="cluster", cov_kwds={"groups": clusters})
        n, k = x.shape
        # one set of levels per grouping, less one per extra grouping (they share the overall mean)
        self.n_absorbed_ = int(sum(self.groups_.values()) - (len(absorb) - 1))
        if n - k - self.n_absorbed_ <= 0:
            raise AnalysisError(f"{table}: {n} rows cannot fit {k} terms and {self.n_absorbed_} fixed effects")
        scale = (n - k) / (n - k - self.n_absorbed_)
        self.cov_params_ = pd.DataFrame(np.asarray(result.cov_params()) * scale, index=terms, columns=terms)
        self.params_ = pd.Series(np.asarray(result.params), index=terms, name="estimate")
        self.bse_ = pd.Series(np.sqrt(np.diag(self.cov_params_.to_numpy())), index=terms, name="std_error")
        self.n_obs_ = int(n)
        self.n_clusters_ = int(clusters.max() + 1)
        self.terms_ = list(terms)
        return self

    def conf_int(self, alpha: float | None = None) -> pd.DataFrame:
        """Normal-approximation intervals from the cluster-robust errors (``ci_low``, ``ci_high``)."""
        from scipy.stats import norm

        alpha = self.alpha if alpha is None else alpha
        z = norm.ppf(1 - alpha / 2)
        return pd.DataFrame({"ci_low": self.params_ - z * self.bse_, "ci_high": self.params_ + z * self.bse_})

    @property
    def summary(self) -> pd.DataFrame:
        from scipy.stats import norm

        ci = self.conf_int()
        z = self.params_ / self.bse_
        return pd.DataFrame({
            "term": self.terms_, "estimate": self.params_.to_numpy(), "std_error": self.bse_.to_numpy(),
            "ci_low": ci["ci_low"].to_numpy(), "ci_high": ci["ci_high"].to_numpy(),
            "p_value": 2 * norm.sf(np.abs(z.to_numpy())), "ci_level": 1 - self.alpha,
        })

    def to_html(self) -> str:
        groups = ", ".join(f"{k} ({v:,} levels)" for k, v in self.groups_.items())
        return (f"<p>Fixed-effects regression: {self.n_obs_:,} rows, {self.n_clusters_:,} clusters; absorbed: {groups}; "
                f"cluster-robust {1 - self.alpha:.0%} intervals</p>" + self.summary.to_html(index=False))

    def _repr_html_(self) -> str:
        return self.to_html()
