"""Randomisation checks: sample ratio mismatch and covariate balance.

A sample ratio mismatch (SRM) test compares the observed arm sizes with the planned split by a
chi-square goodness-of-fit test; an alarm at p < 0.001 is common practice (Fabijan et al. 2019,
"Diagnosing sample ratio mismatch in online controlled experiments", KDD). Covariate balance is
the standardised mean difference of each pre-period feature, (mean_t - mean_c) /
sqrt((var_t + var_c) / 2) (Austin 2009, "Balance diagnostics for comparing the distribution of
baseline covariates between treatment groups in propensity-score matched samples"), where
|SMD| >= 0.1 is the usual mark of imbalance.

With a few thousand customers an |SMD| of 0.1 happens by chance now and then, so a feature only
fails when its SMD passes the mark *and* its difference is significant after a Bonferroni
correction over the features checked; with large campaigns the SMD mark is what binds.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import AnalysisError

SRM_THRESHOLD = 0.001
SMD_THRESHOLD = 0.1
BALANCE_ALPHA = 0.05

CHECK_COLUMNS = ["check", "feature", "treated_value", "holdout_value", "statistic", "p_value",
                 "threshold", "passed", "detail"]


def sample_ratio_test(n_treated: int, n_holdout: int, planned_holdout_share: float | None, *,
                      threshold: float = SRM_THRESHOLD) -> dict:
    """Chi-square test of the observed arm sizes against the planned holdout share.

    Parameters
    ----------
    n_treated, n_holdout : int
        Observed arm sizes.
    planned_holdout_share : float or None
        The share planned for the holdout. ``None``: the test is not run and says so.
    threshold : float, default=0.001
        The check fails when the p-value is below it.

    Returns
    -------
    dict
        check, statistic, p_value, threshold, passed (None when not run), detail.
    """
    total = n_treated + n_holdout
    observed_share = n_holdout / total if total else math.nan
    row = {"check": "sample_ratio", "feature": "holdout_share", "treated_value": float(n_treated),
           "holdout_value": float(n_holdout), "threshold": threshold}
    if planned_holdout_share is None:
        return {**row, "statistic": math.nan, "p_value": math.nan, "passed": None,
                "detail": "not run: no planned split in the config (set campaign.holdout_share or "
                          "campaign.holdout_share_by_promotion)"}
    if not 0 < planned_holdout_share < 1:
        return {**row, "statistic": math.nan, "p_value": math.nan, "passed": None,
                "detail": f"not run: planned holdout share {planned_holdout_share:g} leaves an arm empty"}
    expected = np.array([total * (1 - planned_holdout_share), total * planned_holdout_share])
    statistic, p_value = stats.chisquare([n_treated, n_holdout], expected)
    passed = bool(p_value >= threshold)
    detail = (f"holdout share {observed_share:.2%} observed vs {planned_holdout_share:.2%} planned "
              f"(chi-square {statistic:.2f}, p = {p_value:.2g})")
    if not passed:
        detail = "SAMPLE RATIO MISMATCH: " + detail + "; the assignment or the data pipeline lost or added customers in one arm"
    return {**row, "statistic": float(statistic), "p_value": float(p_value), "passed": passed, "detail": detail}


def covariate_balance(frame: pd.DataFrame, features: list[str], *, treatment_col: str = "is_treated",
                      smd_threshold: float = SMD_THRESHOLD, alpha: float = BALANCE_ALPHA) -> pd.DataFrame:
    """Standardised mean differences of pre-period features between the arms.

    A feature with missing values (e.g. ``recency_days`` for customers without a pre-period order)
    is compared on its non-missing values, and its missing share is compared as an extra row.

    Returns
    -------
    DataFrame
        One row per feature in the layout of the randomisation checks table
        (check = "balance", statistic = SMD, p_value = Welch test, passed).
    """
    treated = frame[treatment_col].to_numpy(dtype=bool)
    pieces: list[tuple[str, np.ndarray]] = []
    for name in features:
        values = pd.to_numeric(frame[name], errors="coerce").to_numpy(dtype=float)
        missing = np.isnan(values)
        if missing.any():
            pieces.append((f"{name} (missing)", missing.astype(float)))
        pieces.append((name, values))
    rows = []
    for name, values in pieces:
        t = values[treated & ~np.isnan(values)]
        c = values[~treated & ~np.isnan(values)]
        if t.size < 2 or c.size < 2:
            rows.append({"check": "balance", "feature": name, "treated_value": math.nan, "holdout_value": math.nan,
                         "statistic": math.nan, "p_value": math.nan, "threshold": smd_threshold,
                         "passed": None, "detail": "not run: fewer than 2 values in an arm"})
            continue
        vt, vc = t.var(ddof=1), c.var(ddof=1)
        spread = math.sqrt((vt + vc) / 2)
        smd = (t.mean() - c.mean()) / spread if spread > 0 else 0.0
        se = math.sqrt(vt / t.size + vc / c.size)
        p_value = float(2 * stats.norm.sf(abs(t.mean() - c.mean()) / se)) if se > 0 else 1.0
        rows.append({"check": "balance", "feature": name, "treated_value": float(t.mean()),
                     "holdout_value": float(c.mean()), "statistic": float(smd), "p_value": p_value,
                     "threshold": smd_threshold, "passed": None, "detail": ""})
    out = pd.DataFrame(rows, columns=CHECK_COLUMNS)
    run = out["p_value"].notna()
    n_run = max(int(run.sum()), 1)
    for i in out.index[run]:
        smd, p = out.at[i, "statistic"], out.at[i, "p_value"]
        failed = abs(smd) >= smd_threshold and p < alpha / n_run
        out.at[i, "passed"] = not failed
        out.at[i, "detail"] = (
            f"IMBALANCED: SMD {smd:+.3f} (|SMD| >= {smd_threshold:g} and p = {p:.2g} < {alpha:g}/{n_run})"
            if failed else f"SMD {smd:+.3f}"
        )
    return out


class RandomisationCheck:
    """Sample ratio and covariate balance checks of one campaign's arms.

    Parameters
    ----------
    srm_threshold : float, default=0.001
        The sample ratio check fails below this p-value.
    smd_threshold : float, default=0.1
        |SMD| at or above this marks a feature as imbalanced (if also significant).
    balance_alpha : float, default=0.05
        Family-wise level of the Bonferroni-corrected balance tests.

    Attributes
    ----------
    summary_ : DataFrame
        One row per check (sample_ratio, then balance per feature).
    status_ : str
        ``"passed"``, ``"failed"`` or ``"not run"`` (no planned split and no feature could be compared).
    reasons_ : list of str
        Why it failed, in plain words (empty when it passed).
    """

    def __init__(self, *, srm_threshold: float = SRM_THRESHOLD, smd_threshold: float = SMD_THRESHOLD,
                 balance_alpha: float = BALANCE_ALPHA):
        self.srm_threshold = srm_threshold
        self.smd_threshold = smd_threshold
        self.balance_alpha = balance_alpha

    def fit(self, frame: pd.DataFrame, *, features: list[str], treatment_col: str = "is_treated",
            planned_holdout_share: float | None = None) -> "RandomisationCheck":
        """Run both checks on ``frame`` (one row per assigned customer)."""
        if treatment_col not in frame.columns:
            raise AnalysisError(f"column '{treatment_col}' is not in the frame")
        missing = [f for f in features if f not in frame.columns]
        if missing:
            raise AnalysisError(f"balance features {missing} are not in the frame")
        treated = frame[treatment_col].to_numpy(dtype=bool)
        srm = sample_ratio_test(int(treated.sum()), int((~treated).sum()), planned_holdout_share,
                                threshold=self.srm_threshold)
        balance = covariate_balance(frame, features, treatment_col=treatment_col,
                                    smd_threshold=self.smd_threshold, alpha=self.balance_alpha)
        self.summary_ = pd.concat([pd.DataFrame([srm], columns=CHECK_COLUMNS), balance], ignore_index=True)
        failed = self.summary_[self.summary_["passed"].eq(False)]
        self.reasons_ = failed["detail"].tolist() if len(failed) else []
        ran = self.summary_["passed"].notna().any()
        self.status_ = "failed" if len(failed) else ("passed" if ran else "not run")
        self.sample_ratio_ = srm
        return self

    @property
    def passed_(self) -> bool:
        return self.status_ != "failed"

    @property
    def summary(self) -> pd.DataFrame:
        return self.summary_

    def to_html(self) -> str:
        return f"<p><b>Randomisation check: {self.status_}</b></p>" + self.summary_.to_html(index=False)

    def _repr_html_(self) -> str:
        return self.to_html()
