"""Checks of the proportional-hazards assumption, as a tidy table.

Two checks, each labelled in the ``method`` column:

* ``schoenfeld_rank_time_fixed``: lifelines' ``proportional_hazard_test`` (scaled Schoenfeld
  residuals against the rank of time, Grambsch & Therneau 1994) on a *time-fixed* version of the
  Cox model: one row per gap, covariates read on the first day of the gap. lifelines gives no
  Schoenfeld residuals for its time-varying fitter, so this version is what the test can be run on;
  it checks the shape of each covariate's effect over days since the purchase, not the
  time-varying model itself.
* ``cloglog_late_interaction``: on the discrete-time model itself, a likelihood-ratio test (1 df)
  of adding ``covariate x [period >= late_period]``: if the hazard ratio late in the gap differs
  from the one early in it, the hazards are not proportional.

A small p-value flags a hazard ratio that changes with time since the last purchase: the reported
ratio is then an average over the gap, weighted by where the events fall.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from lifelines import CoxPHFitter
from lifelines.statistics import proportional_hazard_test
from scipy import stats

from .discrete import DiscreteTimeHazard, cloglog_loglik, fit_cloglog

COLUMNS = ["covariate", "method", "test_statistic", "degrees_of_freedom", "p_value", "n_events", "note"]


WINDOWED = {
    "in_dip": "on only in the first dip_days of a gap by construction, so not proportional in this time-fixed "
              "form; read the cloglog_late_interaction row",
    "in_dip_during_promotion": "on only early in a gap by construction; read the cloglog_late_interaction row",
}


def time_fixed_check(gaps: pd.DataFrame, covariates: list[str], *, duration_col: str, event_col: str,
                     max_gaps: int = 5000, seed: int = 20261201) -> pd.DataFrame:
    """Schoenfeld-residual test (rank of time) on a Cox model with covariates fixed per gap.

    At most ``max_gaps`` gaps are used (a seeded random subset): the residuals cost grows with
    gaps x event times, and a few thousand gaps already detect a hazard ratio that drifts.
    """
    sampled = len(gaps) > max_gaps
    if sampled:
        gaps = gaps.sample(n=max_gaps, random_state=seed)
    usable = [c for c in covariates if gaps[c].nunique() > 1]
    rows = []
    if usable and gaps[event_col].sum() >= 10 * len(usable):
        data = gaps[[duration_col, event_col, *usable]].astype(float)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            cph = CoxPHFitter().fit(data, duration_col=duration_col, event_col=event_col)
            result = proportional_hazard_test(cph, data, time_transform="rank")
        summary = result.summary
        for covariate in usable:
            rows.append({
                "covariate": covariate, "method": "schoenfeld_rank_time_fixed",
                "test_statistic": float(summary.loc[covariate, "test_statistic"]), "degrees_of_freedom": 1,
                "p_value": float(summary.loc[covariate, "p"]), "n_events": int(data[event_col].sum()),
                "note": "time-fixed Cox (covariates on the gap's first day), scaled Schoenfeld residuals vs rank of time"
                        + (f"; random {max_gaps} gaps" if sampled else "")
                        + (f"; {WINDOWED[covariate]}" if covariate in WINDOWED else ""),
            })
    for covariate in covariates:
        if covariate not in usable:
            rows.append({"covariate": covariate, "method": "schoenfeld_rank_time_fixed", "test_statistic": np.nan,
                         "degrees_of_freedom": 1, "p_value": np.nan, "n_events": int(gaps[event_col].sum()),
                         "note": "not testable: constant on the gaps' first days or too few events"})
    return pd.DataFrame(rows, columns=COLUMNS)


def late_interaction_check(model: DiscreteTimeHazard, cells: pd.DataFrame, *, late_period: int,
                           events_col: str = "events", at_risk_col: str = "at_risk",
                           late_label: str | None = None) -> pd.DataFrame:
    """Likelihood-ratio test of ``covariate x [period >= late_period]`` for each covariate of a fitted model."""
    keys = [model.period_col, *model.covariates_, *model.factors_]
    pooled = cells.groupby(keys, as_index=False, observed=True)[[events_col, at_risk_col]].sum()
    pooled = pooled[pooled[at_risk_col] > 0]
    if model.merged_periods_:
        pooled[model.period_col] = pooled[model.period_col].replace(model.merged_periods_)
        pooled = pooled.groupby(keys, as_index=False, observed=True)[[events_col, at_risk_col]].sum()
    design, names = model._design(pooled, model.period_col, model.covariates_, model.factors_)
    events = pooled[events_col].to_numpy(float)
    at_risk = pooled[at_risk_col].to_numpy(float)
    late = (pooled[model.period_col].to_numpy() >= late_period).astype(float)
    label = late_label or f"period >= {late_period}"

    def loglik(matrix, start):
        params, converged = fit_cloglog(matrix, events, at_risk, start, max_iter=60)
        return cloglog_loglik(matrix, events, at_risk, params), converged

    base_start = model._all_params
    base, _ = loglik(design, base_start)
    rows = []
    for covariate in model.covariates_:
        extra = design[:, names.index(covariate)] * late
        if np.ptp(extra) == 0 or np.allclose(extra, design[:, names.index(covariate)]):
            rows.append({"covariate": covariate, "method": "cloglog_late_interaction", "test_statistic": np.nan,
                         "degrees_of_freedom": 1, "p_value": np.nan, "n_events": model.n_events_,
                         "note": f"not testable: covariate never on both before and from {label}"})
            continue
        full, converged = loglik(np.column_stack([design, extra]), np.append(base_start, 0.0))
        statistic = max(2 * (full - base), 0.0)
        rows.append({
            "covariate": covariate, "method": "cloglog_late_interaction", "test_statistic": statistic,
            "degrees_of_freedom": 1, "p_value": float(stats.chi2.sf(statistic, 1)), "n_events": model.n_events_,
            "note": f"LR test of covariate x [{label}] in the discrete-time model"
                    + ("" if converged else " (interaction fit did not converge)"),
        })
    return pd.DataFrame(rows, columns=COLUMNS)
