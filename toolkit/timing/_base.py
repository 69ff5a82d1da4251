"""What every timing estimator shares: the fitted check, the HTML summary, the interval level."""

from __future__ import annotations

import contextlib
import html

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import AnalysisError, ConfigError


def single_threaded_blas():
    """Context in which BLAS/LAPACK run on one thread.

    The model fits here do many small dense factorisations (a few thousand rows, tens of
    columns); on small machines OpenBLAS's threading makes those an order of magnitude slower
    than on one thread (seen: an SVD of 17,673 x 51 took 1.2 s on two threads, 0.07 s on one).
    """
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - threadpoolctl comes with scikit-learn
        return contextlib.nullcontext()
    return threadpool_limits(limits=1, user_api="blas")


def check_alpha(alpha: float, *, where: str = "alpha") -> float:
    """Return ``alpha`` as a float when it is a significance level strictly between 0 and 1."""
    if isinstance(alpha, bool) or not isinstance(alpha, (int, float)) or not 0 < alpha < 1:
        raise ConfigError(f"{where} must be a significance level between 0 and 1 (e.g. 0.05), found {alpha!r}")
    return float(alpha)


def z_value(alpha: float) -> float:
    """Two-sided normal quantile for significance level ``alpha``."""
    return float(stats.norm.ppf(1 - alpha / 2))


def percentile_interval(draws: np.ndarray, alpha: float) -> tuple[np.ndarray, np.ndarray]:
    """Percentile bootstrap interval per column of ``draws`` (rounds x parameters), NaN-robust."""
    draws = np.asarray(draws, dtype=float)
    low = np.nanquantile(draws, alpha / 2, axis=0)
    high = np.nanquantile(draws, 1 - alpha / 2, axis=0)
    return low, high


class FittedMixin:
    """``summary``/``to_html``/``_repr_html_`` on top of a ``_summary_frame()`` and a header."""

    _fitted_attribute = "params_"

    def _check_fitted(self) -> None:
        if not hasattr(self, self._fitted_attribute):
            raise AnalysisError(f"{type(self).__name__} is not fitted yet; call fit(...) first")

    @property
    def summary(self) -> pd.DataFrame:
        """The fitted quantities as a tidy DataFrame (one row per parameter or group)."""
        self._check_fitted()
        return self._summary_frame()

    def _summary_frame(self) -> pd.DataFrame:  # pragma: no cover - every subclass defines it
        raise NotImplementedError

    def _header(self) -> dict[str, object]:
        return {}

    def to_html(self) -> str:
        """A small self-contained HTML table: what was fitted on, then the summary."""
        self._check_fitted()
        rows = "".join(
            f"<tr><th style='text-align:left'>{html.escape(str(k))}</th><td>{html.escape(str(v))}</td></tr>"
            for k, v in self._header().items()
        )
        head = f"<table class='liftlag-header'>{rows}</table>" if rows else ""
        return f"<div class='liftlag-fit'><h4>{html.escape(type(self).__name__)}</h4>{head}" + self.summary.to_html(
            float_format=lambda v: f"{v:.4g}", na_rep="", border=0
        ) + "</div>"

    def _repr_html_(self) -> str:
        try:
            return self.to_html()
        except AnalysisError:
            return f"<p>{html.escape(type(self).__name__)} (not fitted)</p>"


class BootstrapIntervalsMixin:
    """Intervals of log hazard ratios: bootstrap percentile when bootstrapped, else Wald.

    Needs ``params_``, ``standard_errors_`` and ``bootstrap_params_`` (a DataFrame of draws, maybe
    empty) on the fitted estimator.
    """

    def _is_bootstrapped(self) -> bool:
        return bool(len(self.bootstrap_params_) and self.bootstrap_params_.notna().any().any())

    def conf_int(self, alpha: float = 0.05) -> pd.DataFrame:
        """Interval of each log hazard ratio: bootstrap percentile when bootstrapped, else Wald."""
        self._check_fitted()
        alpha = check_alpha(alpha)
        if self._is_bootstrapped():
            low, high = percentile_interval(self.bootstrap_params_.to_numpy(float), alpha)
        else:
            z = z_value(alpha)
            low = self.params_.to_numpy() - z * self.standard_errors_.to_numpy()
            high = self.params_.to_numpy() + z * self.standard_errors_.to_numpy()
        return pd.DataFrame({"ci_low": low, "ci_high": high}, index=self.params_.index)

    @property
    def bootstrap_standard_errors_(self) -> pd.Series:
        return self.bootstrap_params_.std(ddof=1).reindex(self.params_.index)
