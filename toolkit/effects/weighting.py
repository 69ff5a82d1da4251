"""Effects without a randomised holdout: inverse-probability and doubly-robust weighting.

When a campaign has no holdout, treated customers can only be compared with customers who were
*not* assigned (a comparison frame the analyst supplies). Such a comparison is not randomised: it
is only causal if, given the features, assignment is as good as random (no unmeasured
confounding) and every treated customer has comparable untreated ones (overlap). Every output of
this module says so.

- Propensity e(x) = P(treated | x): logistic regression on standardised features.
- IPW (Hájek, normalised weights; Hirano, Imbens & Ridder 2003). For the effect on the treated
  (``estimand="att"``, the natural one for a targeted campaign) the comparison customers get
  weight e / (1 - e); for the average effect (``"ate"``) treated get 1 / e and comparison 1 / (1 - e).
- Doubly robust (augmented IPW; Robins, Rotnitzky & Zhao 1994; for the ATT the normalised form of
  Sant'Anna & Zhao 2020): an outcome model m(x) plus weighted residuals; consistent if either the
  propensity or the outcome model is right.
- Standard errors from the estimators' influence functions, treating the fitted propensity and
  outcome models as known (common practice, no source; slightly conservative for IPW).
- Customers whose propensity falls outside [trim, 1 - trim] are dropped before estimation
  (Crump, Hotz, Imbens & Mitnik 2009 argue for trimming); how many is reported per arm.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import stats
from sklearn.ensemble import HistGradientBoostingRegressor
from sklearn.linear_model import LinearRegression, LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from ..errors import AnalysisError

NOT_RANDOMISED = ("not randomised: treated customers are compared with customers who were not assigned, "
                  "weighted by their propensity; causal only if the features capture everything that drove "
                  "the targeting (no unmeasured confounding) and the arms overlap")


class WeightedComparison:
    """IPW and doubly-robust estimates of a lift when the arms were not randomised.

    Parameters
    ----------
    estimand : {"att", "ate"}, default="att"
        Effect on the treated customers, or average effect over everyone in the frame.
    trim : float, default=0.01
        Drop rows whose propensity is below ``trim`` or above ``1 - trim``.
    alpha : float, default=0.05
    outcome_model : {"linear", "boosting"}, default="linear"
        The doubly-robust estimator's outcome regression.
    propensity_c : float, default=1e6
        Inverse L2 penalty of the logistic propensity model (large = almost unpenalised).

    Attributes
    ----------
    propensity_ : ndarray
        Fitted propensity of every row (before trimming).
    kept_ : ndarray of bool
        Rows kept after trimming.
    estimates_ : dict of str to dict
        ``ipw`` and ``doubly_robust``: treated_mean, holdout_mean (the weighted comparison mean,
        i.e. the estimated outcome without the coupon), lift, lift_se, relative_lift, relative_lift_se.
    overlap_ : DataFrame
        Per arm: rows, propensity min / 1% / median / 99% / max, rows trimmed and their share,
        effective sample size of the weights.
    balance_ : DataFrame
        Per feature: standardised mean difference before and after weighting.
    """

    def __init__(self, *, estimand: str = "att", trim: float = 0.01, alpha: float = 0.05,
                 outcome_model: str = "linear", propensity_c: float = 1e6):
        self.estimand = estimand
        self.trim = trim
        self.alpha = alpha
        self.outcome_model = outcome_model
        self.propensity_c = propensity_c

    def fit(self, frame: pd.DataFrame, *, outcome_col: str, treatment_col: str, feature_cols: list[str]) -> "WeightedComparison":
        """Fit the propensity and outcome models and estimate the lift of ``outcome_col``."""
        if self.estimand not in ("att", "ate"):
            raise ValueError(f"estimand must be 'att' or 'ate', found {self.estimand!r}")
        if not 0 <= self.trim < 0.5:
            raise ValueError(f"trim must be in [0, 0.5), found {self.trim!r}")
        if self.outcome_model not in ("linear", "boosting"):
            raise ValueError(f"outcome_model must be 'linear' or 'boosting', found {self.outcome_model!r}")
        missing = [c for c in [outcome_col, treatment_col, *feature_cols] if c not in frame.columns]
        if missing:
            raise AnalysisError(f"columns {missing} are not in the frame")
        x = frame[feature_cols].apply(pd.to_numeric, errors="coerce").to_numpy(dtype=float)
        if np.isnan(x).any():
            bad = [c for c, n in zip(feature_cols, np.isnan(x).sum(axis=0)) if n]
            raise AnalysisError(f"features {bad} have missing values; impute them (and add a missing flag) before weighting")
        y = frame[outcome_col].to_numpy(dtype=float)
        t = frame[treatment_col].to_numpy().astype(bool)
        if t.all() or not t.any():
            raise AnalysisError(f"'{treatment_col}' must have both treated and comparison rows; found {int(t.sum())} treated of {t.size}")
        propensity_model = make_pipeline(
            StandardScaler(), LogisticRegression(C=self.propensity_c, max_iter=5000)
        ).fit(x, t)
        e = propensity_model.predict_proba(x)[:, 1]
        kept = (e >= self.trim) & (e <= 1 - self.trim)
        if not (kept & t).any() or not (kept & ~t).any():
            raise AnalysisError("after trimming no treated or no comparison customers are left: the arms do not overlap "
                                "on these features; a weighted comparison is not possible")
        self.propensity_, self.kept_ = e, kept
        self.propensity_model_ = propensity_model
        xk, yk, tk, ek = x[kept], y[kept], t[kept], e[kept]
        m0, m1 = self._outcome_predictions(xk, yk, tk)
        if self.estimand == "att":
            estimates = _att(yk, tk, ek, m0)
        else:
            estimates = _ate(yk, tk, ek, m0, m1)
        self.estimates_ = estimates
        self.weights_ = _weights(tk, ek, self.estimand)
        self.overlap_ = _overlap(t, e, kept, self.trim, self.weights_, tk)
        self.balance_ = _weighted_balance(xk, tk, self.weights_, feature_cols, x, t)
        self.n_treated_, self.n_comparison_ = int(tk.sum()), int((~tk).sum())
        self.outcome_col_, self.feature_cols_ = outcome_col, list(feature_cols)
        return self

    def _outcome_predictions(self, x, y, t):
        def model():
            if self.outcome_model == "linear":
                return LinearRegression()
            return HistGradientBoostingRegressor(max_iter=100, max_leaf_nodes=15, early_stopping=False, random_state=0)

        m0 = model().fit(x[~t], y[~t]).predict(x)
        m1 = model().fit(x[t], y[t]).predict(x) if self.estimand == "ate" else None
        return m0, m1

    def _check_fitted(self) -> None:
        if not hasattr(self, "estimates_"):
            raise AnalysisError("this WeightedComparison is not fitted yet; call fit(frame, outcome_col=..., ...) first")

    def conf_int(self, alpha: float = 0.05) -> pd.DataFrame:
        """Normal interval of the lift per method at significance level ``alpha``."""
        self._check_fitted()
        q = stats.norm.ppf(1 - alpha / 2)
        return pd.DataFrame({m: {"lift_ci_low": v["lift"] - q * v["lift_se"], "lift_ci_high": v["lift"] + q * v["lift_se"]}
                             for m, v in self.estimates_.items()}).T

    @property
    def summary(self) -> pd.DataFrame:
        """One row per method, in the layout of the campaign_effects table, with is_randomised False."""
        self._check_fitted()
        q = stats.norm.ppf(1 - self.alpha / 2)
        rows = []
        for method, v in self.estimates_.items():
            rows.append({
                "method": method, "treated_mean": v["treated_mean"], "holdout_mean": v["holdout_mean"],
                "lift": v["lift"], "lift_se": v["lift_se"],
                "lift_ci_low": v["lift"] - q * v["lift_se"], "lift_ci_high": v["lift"] + q * v["lift_se"],
                "relative_lift": v["relative_lift"],
                "relative_lift_ci_low": v["relative_lift"] - q * v["relative_lift_se"],
                "relative_lift_ci_high": v["relative_lift"] + q * v["relative_lift_se"],
                "p_value": float(2 * stats.norm.sf(abs(v["lift"]) / v["lift_se"])) if v["lift_se"] > 0 else math.nan,
                "n_treated": self.n_treated_, "n_holdout": self.n_comparison_,
                "variance_reduction": math.nan, "is_randomised": False, "estimand": self.estimand,
                "ci_level": 1 - self.alpha, "note": NOT_RANDOMISED,
            })
        return pd.DataFrame(rows).set_index("method")

    def to_html(self) -> str:
        self._check_fitted()
        return (f"<p><b>Weighted comparison ({self.estimand.upper()}) — NOT RANDOMISED.</b> {NOT_RANDOMISED}.</p>"
                + self.summary.drop(columns=["note"]).to_html(float_format=lambda v: f"{v:.4g}")
                + "<p>Overlap</p>" + self.overlap_.to_html(float_format=lambda v: f"{v:.4g}"))

    def _repr_html_(self) -> str:
        return self.to_html()


def _weights(t, e, estimand):
    if estimand == "att":
        return np.where(t, 1.0, e / (1 - e))
    return np.where(t, 1 / e, 1 / (1 - e))


def _pack(m1, m0, phi1, phi0, n):
    lift = m1 - m0
    phi = phi1 - phi0
    se = math.sqrt(np.mean(phi**2) / n)
    if m0:
        phi_rel = phi1 / m0 - m1 * phi0 / m0**2
        rel, rel_se = m1 / m0 - 1, math.sqrt(np.mean(phi_rel**2) / n)
    else:
        rel = rel_se = math.nan
    return {"treated_mean": float(m1), "holdout_mean": float(m0), "lift": float(lift), "lift_se": se,
            "relative_lift": float(rel), "relative_lift_se": float(rel_se)}


def _att(y, t, e, m0_pred):
    n = y.size
    p = t.mean()
    w = e / (1 - e)
    c = ~t
    m1 = y[t].mean()
    phi1 = np.where(t, (y - m1) / p, 0.0)
    # IPW (Hájek): weighted comparison mean
    m0_ipw = np.sum(w[c] * y[c]) / np.sum(w[c])
    phi0_ipw = np.where(c, w * (y - m0_ipw) / p, 0.0)
    # doubly robust: treated mean of m0(x) plus weighted comparison residuals
    resid = y - m0_pred
    resid_bar = np.sum(w[c] * resid[c]) / np.sum(w[c])
    m0_dr = m0_pred[t].mean() + resid_bar
    phi0_dr = np.where(t, (m0_pred - m0_pred[t].mean()) / p, 0.0) + np.where(c, w * (resid - resid_bar) / p, 0.0)
    return {"ipw": _pack(m1, m0_ipw, phi1, phi0_ipw, n), "doubly_robust": _pack(m1, m0_dr, phi1, phi0_dr, n)}


def _ate(y, t, e, m0_pred, m1_pred):
    n = y.size
    c = ~t
    w1, w0 = 1 / e, 1 / (1 - e)
    m1_ipw = np.sum(w1[t] * y[t]) / np.sum(w1[t])
    m0_ipw = np.sum(w0[c] * y[c]) / np.sum(w0[c])
    phi1_ipw = np.where(t, w1 * (y - m1_ipw), 0.0)
    phi0_ipw = np.where(c, w0 * (y - m0_ipw), 0.0)
    a1 = m1_pred + np.where(t, w1 * (y - m1_pred), 0.0)
    a0 = m0_pred + np.where(c, w0 * (y - m0_pred), 0.0)
    return {"ipw": _pack(m1_ipw, m0_ipw, phi1_ipw, phi0_ipw, n),
            "doubly_robust": _pack(a1.mean(), a0.mean(), a1 - a1.mean(), a0 - a0.mean(), n)}


def _ess(w):
    return float(w.sum() ** 2 / np.sum(w**2)) if w.size and np.sum(w**2) > 0 else math.nan


def _overlap(t_all, e_all, kept, trim, weights_kept, t_kept):
    rows = []
    for arm, mask, kmask in (("treated", t_all, t_kept), ("comparison", ~t_all, ~t_kept)):
        e = e_all[mask]
        q = np.quantile(e, [0, 0.01, 0.5, 0.99, 1]) if e.size else [math.nan] * 5
        trimmed = int((~kept[mask]).sum())
        rows.append({"arm": arm, "rows": int(mask.sum()), "propensity_min": q[0], "propensity_p01": q[1],
                     "propensity_median": q[2], "propensity_p99": q[3], "propensity_max": q[4],
                     "trim_below": trim, "trim_above": 1 - trim, "rows_trimmed": trimmed,
                     "share_trimmed": trimmed / max(int(mask.sum()), 1),
                     "effective_sample_size": _ess(weights_kept[kmask])})
    return pd.DataFrame(rows)


def _smd(a, b, wa=None, wb=None):
    ma, mb = np.average(a, weights=wa), np.average(b, weights=wb)
    va, vb = a.var(ddof=1) if a.size > 1 else 0.0, b.var(ddof=1) if b.size > 1 else 0.0
    spread = math.sqrt((va + vb) / 2)
    return (ma - mb) / spread if spread > 0 else 0.0


def _weighted_balance(xk, tk, w, names, x_all, t_all):
    rows = []
    for j, name in enumerate(names):
        before = _smd(x_all[t_all, j], x_all[~t_all, j])
        # the spread stays the unweighted one of the kept rows, so before and after are on one scale
        after = _smd(xk[tk, j], xk[~tk, j], w[tk], w[~tk])
        rows.append({"feature": name, "smd_before": before, "smd_after": after})
    return pd.DataFrame(rows)
