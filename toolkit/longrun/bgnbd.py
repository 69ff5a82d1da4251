"""The BG/NBD model of repeat buying (Fader, Hardie & Lee 2005, Marketing Science 24(2), 275-284).

Each customer, while active, buys at a Poisson rate ``lambda`` (gamma across customers, shape
``r``, rate ``alpha``); after each purchase they drop out with probability ``p`` (beta across
customers, ``a``, ``b``). A customer is summarised by the repeat purchases ``x`` after the first,
the time ``t_x`` from the first to the last of them, and the time ``T`` from the first purchase to
the end of the observation period (all in the same unit: weeks here).

Log-likelihood of one customer (FHL 2005, equation 6), on the log scale for stability::

    log L = log G(r+x) - log G(r) + r log alpha
          + log B(a, b+x) - log B(a, b)
          + log( (alpha+T)^-(r+x) + [x>0] a/(b+x-1) (alpha+t_x)^-(r+x) )

with the last term computed as a log-sum-exp. Customers with equal ``(x, t_x, T)`` are counted
once with a weight, so the fit costs the same for a thousand customers or a million that share few
distinct summaries. The four parameters are fitted on the log scale with scipy's L-BFGS-B; their
standard errors come from the inverse of the numerical Hessian of the log-likelihood at the
optimum (on the log scale, so intervals are exponentiated and stay positive).

Conditional expectations (FHL 2005, equation 10, and the probability of being alive, eq. A6 of
their technical note "Computing P(alive) using the BG/NBD model"):

    E[Y(t) | x, t_x, T] = (a+b+x-1)/(a-1) * [1 - ((alpha+T)/(alpha+T+t))^(r+x)
                           * 2F1(r+x, b+x; a+b+x-1; t/(alpha+T+t))] / D
    P(active | x, t_x, T) = 1 / D,   D = 1 + [x>0] a/(b+x-1) * ((alpha+T)/(alpha+t_x))^(r+x)
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import optimize, special, stats

from ..errors import AnalysisError, ConvergenceError, DataError
from ..timing._base import FittedMixin, check_alpha

PARAMETERS = ("r", "alpha", "a", "b")


def _log_likelihood_terms(log_params: np.ndarray, x: np.ndarray, t_x: np.ndarray, T: np.ndarray) -> np.ndarray:
    r, alpha, a, b = np.exp(log_params)
    common = (
        special.gammaln(r + x) - special.gammaln(r) + r * np.log(alpha)
        + special.betaln(a, b + x) - special.betaln(a, b)
    )
    term_end = -(r + x) * np.log(alpha + T)
    repeat = x > 0
    # [x>0] a/(b+x-1) (alpha+t_x)^-(r+x); for x = 0 the term is absent (log of 0).
    with np.errstate(divide="ignore", invalid="ignore"):
        term_last = np.where(
            repeat,
            np.log(a) - np.log(np.where(repeat, b + x - 1, 1.0)) - (r + x) * np.log(alpha + t_x),
            -np.inf,
        )
    return common + np.logaddexp(term_end, term_last)


class BetaGeometricNBD(FittedMixin):
    """BG/NBD repeat-buying model fitted by maximum likelihood.

    Parameters
    ----------
    alpha : float, default=0.05
        Significance level of the intervals in ``summary`` (``conf_int`` takes its own).
    initial : tuple of 4 floats, default=(1.0, 1.0, 1.0, 1.0)
        Starting values of ``r, alpha, a, b``.
    prior_scale : float, optional
        Standard deviation of an independent normal prior, centred on 0, on each log-parameter
        (a posterior mode instead of plain maximum likelihood). When a cohort shows almost no
        dropout the dropout parameters ``a``, ``b`` drift to the edge of the parameter space and
        their information vanishes; a wide prior (3 means a factor of e^3 is one standard
        deviation) keeps them finite and their draws usable. ``None`` (default): plain maximum
        likelihood, as published.

    Attributes
    ----------
    params_ : pandas.Series
        ``r``, ``alpha``, ``a``, ``b``.
    log_likelihood_ : float
    covariance_ : ndarray
        Covariance of the log-parameters (inverse of the observed information).
    n_customers_, n_repeat_purchases_ : int
    time_unit_ : str

    Examples
    --------
    >>> import numpy as np
    >>> model = BetaGeometricNBD().fit(frequency=np.array([2, 0, 5]), recency=np.array([30., 0., 35.]),
    ...                                 age=np.array([38., 38., 38.]))
    >>> sorted(model.params_.index)
    ['a', 'alpha', 'b', 'r']
    """

    def __init__(self, *, alpha: float = 0.05, initial: tuple[float, float, float, float] = (1.0, 1.0, 1.0, 1.0),
                 prior_scale: float | None = None):
        self.alpha = alpha
        self.initial = initial
        self.prior_scale = prior_scale

    def fit(self, *, frequency, recency, age, weights=None, time_unit: str = "weeks") -> "BetaGeometricNBD":
        """Fit on per-customer summaries.

        Parameters
        ----------
        frequency : array-like of int
            Repeat purchases after the first (``x``).
        recency : array-like of float
            Time from the first purchase to the last repeat purchase (``t_x``; 0 when ``x`` is 0).
        age : array-like of float
            Time from the first purchase to the end of the observation period (``T``).
        weights : array-like of int, optional
            Number of customers with each summary (default 1 each).
        time_unit : str, default="weeks"
            Unit of ``recency`` and ``age`` (stored, used in the summary header).
        """
        check_alpha(self.alpha)
        x = np.asarray(frequency, dtype=float)
        t_x = np.asarray(recency, dtype=float)
        T = np.asarray(age, dtype=float)
        w = np.ones_like(x) if weights is None else np.asarray(weights, dtype=float)
        if not (len(x) == len(t_x) == len(T) == len(w)):
            raise DataError("BG/NBD: frequency, recency, age and weights must have the same length, found "
                            f"{len(x)}, {len(t_x)}, {len(T)}, {len(w)}")
        if len(x) == 0 or w.sum() <= 0:
            raise DataError("BG/NBD: no customers to fit on; check the cohort and the --through quarter")
        bad = ~np.isfinite(x) | ~np.isfinite(t_x) | ~np.isfinite(T) | (x < 0) | (t_x < 0) | (T < t_x) | (T <= 0)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise DataError(
                f"BG/NBD: a customer summary is impossible (frequency={x[i]}, recency={t_x[i]}, age={T[i]}); "
                "need 0 <= recency <= age and age > 0: check that the summaries end at the observation end"
            )
        if (x > 0).sum() == 0:
            raise AnalysisError("BG/NBD: no customer made a repeat purchase, so the purchase rate cannot be "
                                "estimated; use a longer observation period")
        # Equal summaries are fitted once, with their count as weight.
        keys = pd.DataFrame({"x": x, "t_x": t_x, "T": T, "w": w}).groupby(["x", "t_x", "T"], as_index=False)["w"].sum()
        xs, txs, Ts, ws = (keys[c].to_numpy(dtype=float) for c in ("x", "t_x", "T", "w"))
        scale = float(ws.sum())

        precision = 0.0 if self.prior_scale is None else 1.0 / float(self.prior_scale) ** 2

        def negative_log_posterior(theta):
            return -(ws * _log_likelihood_terms(theta, xs, txs, Ts)).sum() + 0.5 * precision * float(theta @ theta)

        def objective(theta):
            return negative_log_posterior(theta) / scale

        start = np.log(np.asarray(self.initial, dtype=float))
        result = optimize.minimize(objective, start, method="L-BFGS-B",
                                   bounds=[(-12.0, 12.0)] * 4, options={"maxiter": 2000, "ftol": 1e-13, "gtol": 1e-9})
        if not result.success or not np.isfinite(result.fun):
            # A second try from the optimiser's end point with a derivative-free method.
            result = optimize.minimize(objective, result.x, method="Nelder-Mead",
                                       options={"maxiter": 8000, "xatol": 1e-9, "fatol": 1e-12})
            if not result.success:
                raise ConvergenceError(
                    f"BG/NBD did not converge ({result.message}); check that the cohort has enough customers "
                    "with repeat purchases and that the time unit keeps ages in a moderate range (weeks)"
                )
        theta = result.x
        self.log_params_ = theta
        self.params_ = pd.Series(np.exp(theta), index=list(PARAMETERS), name="estimate")
        self.log_likelihood_ = float((ws * _log_likelihood_terms(theta, xs, txs, Ts)).sum())
        hessian = _numerical_hessian(negative_log_posterior, theta)
        self.hessian_ = hessian
        try:
            self.covariance_ = np.linalg.inv(hessian)
        except np.linalg.LinAlgError:
            self.covariance_ = np.full((4, 4), np.nan)
        self.n_customers_ = int(round(scale))
        self.n_repeat_purchases_ = int(round(float((ws * xs).sum())))
        self.time_unit_ = time_unit
        return self

    # -- results ---------------------------------------------------------------------------------

    def conf_int(self, alpha: float = 0.05) -> pd.DataFrame:
        """Wald intervals on the log scale, exponentiated: columns ``ci_low``, ``ci_high``."""
        self._check_fitted()
        check_alpha(alpha)
        se = np.sqrt(np.clip(np.diag(self.covariance_), 0, None))
        z = stats.norm.ppf(1 - alpha / 2)
        return pd.DataFrame({"ci_low": np.exp(self.log_params_ - z * se), "ci_high": np.exp(self.log_params_ + z * se)},
                            index=list(PARAMETERS))

    def _summary_frame(self) -> pd.DataFrame:
        ci = self.conf_int(self.alpha)
        frame = pd.DataFrame({"parameter": list(PARAMETERS), "estimate": self.params_.to_numpy(),
                              "ci_low": ci["ci_low"].to_numpy(), "ci_high": ci["ci_high"].to_numpy()})
        frame["ci_level"] = 1 - self.alpha
        return frame

    def _header(self) -> dict[str, object]:
        return {"customers": self.n_customers_, "repeat purchases": self.n_repeat_purchases_,
                "log-likelihood": round(self.log_likelihood_, 2), "time unit": self.time_unit_}

    # -- predictions -----------------------------------------------------------------------------

    def expected_purchases(self, period, *, frequency, recency, age, params=None) -> np.ndarray:
        """Expected purchases in the next ``period`` time units for customers with these summaries."""
        r, alpha, a, b = self._params(params)
        x = np.asarray(frequency, dtype=float)
        t_x = np.asarray(recency, dtype=float)
        T = np.asarray(age, dtype=float)
        t = float(period)
        ratio = (alpha + T) / (alpha + T + t)
        hyper = special.hyp2f1(r + x, b + x, a + b + x - 1, t / (alpha + T + t))
        numerator = (a + b + x - 1) / (a - 1) * (1 - ratio ** (r + x) * hyper)
        return numerator / self._alive_denominator(x, t_x, T, r, alpha, a, b)

    def probability_active(self, *, frequency, recency, age, params=None) -> np.ndarray:
        """P(still active at the end of the observation period | x, t_x, T)."""
        r, alpha, a, b = self._params(params)
        x = np.asarray(frequency, dtype=float)
        return 1.0 / self._alive_denominator(x, np.asarray(recency, float), np.asarray(age, float), r, alpha, a, b)

    def scores(self, *, frequency, recency, age) -> np.ndarray:
        """Each summary's gradient of its log-likelihood in the log-parameters (n x 4), at the fit.

        Central differences of the per-customer terms; the one-step bootstrap in
        :class:`toolkit.longrun.cohorts.CohortValue` sums them per resampled block.
        """
        self._check_fitted()
        x, t_x, T = (np.asarray(v, dtype=float) for v in (frequency, recency, age))
        out = np.empty((len(x), 4))
        step = 1e-5
        for j in range(4):
            shift = np.zeros(4)
            shift[j] = step
            out[:, j] = (_log_likelihood_terms(self.log_params_ + shift, x, t_x, T)
                         - _log_likelihood_terms(self.log_params_ - shift, x, t_x, T)) / (2 * step)
        return out

    def _params(self, params):
        if params is not None:
            return tuple(float(v) for v in params)
        self._check_fitted()
        return tuple(float(v) for v in self.params_.to_numpy())

    @staticmethod
    def _alive_denominator(x, t_x, T, r, alpha, a, b):
        repeat = x > 0
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            log_odds = np.log(a) - np.log(np.where(repeat, b + x - 1, 1.0)) + (r + x) * (np.log(alpha + T) - np.log(alpha + t_x))
        return 1.0 + np.where(repeat, np.exp(np.minimum(log_odds, 700)), 0.0)


def _numerical_hessian(function, theta: np.ndarray) -> np.ndarray:
    """Central-difference Hessian (statsmodels' ``approx_hess3``, which is well tested)."""
    from statsmodels.tools.numdiff import approx_hess3

    return approx_hess3(theta, function)
