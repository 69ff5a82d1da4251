"""Discrete-time cloglog hazard on aggregated cells (toolkit.timing.discrete)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from toolkit.errors import AnalysisError, StatisticalWarning
from toolkit.timing.cox import TimeVaryingCox
from toolkit.timing.discrete import DiscreteTimeHazard, cloglog_family, fit_cloglog


def grouped_survival(*, subjects=6000, weeks=12, hazard_ratio=2.0, flag_ratio=0.6, seed=1, frailty_shape=None):
    """Continuous-time proportional hazards, covariates constant within each week.

    Subject i has a fixed trait x_i (HR ``hazard_ratio``) and a flag that is drawn afresh every
    week (HR ``flag_ratio``); the baseline hazard rises over the weeks. Returns the person-week
    rows (subject, week, x, flag, event) and the exact spells (for the Cox model).
    """
    rng = np.random.default_rng(seed)
    x = (rng.random(subjects) < 0.5).astype(int)
    frailty = np.ones(subjects) if frailty_shape is None else rng.gamma(frailty_shape, 1 / frailty_shape, subjects)
    baseline = 0.04 * (1 + 0.1 * np.arange(weeks))  # per day, constant within a week
    rows, spells = [], []
    alive = np.ones(subjects, bool)
    for week in range(weeks):
        flag = (rng.random(subjects) < 0.3).astype(int)
        rate = baseline[week] * frailty * hazard_ratio ** x * flag_ratio ** flag
        time = rng.exponential(1 / rate)  # days into the week
        event = alive & (time < 7)
        who = np.flatnonzero(alive)
        rows.append(pd.DataFrame({"subject": who, "week": week, "x": x[who], "flag": flag[who], "event": event[who]}))
        spells.append(pd.DataFrame({"subject": who, "start": 7.0 * week, "stop": 7.0 * week + np.where(event[who],
                                    time[who], 7.0), "event": event[who], "x": x[who], "flag": flag[who]}))
        alive &= ~event
    return pd.concat(rows, ignore_index=True), pd.concat(spells, ignore_index=True)


def to_cells(rows: pd.DataFrame, keys=("week", "x", "flag")) -> pd.DataFrame:
    return rows.groupby(list(keys), as_index=False).agg(events=("event", "sum"), at_risk=("event", "size"))


@pytest.fixture(scope="module")
def grouped():
    return grouped_survival()


def test_cloglog_recovers_the_continuous_hazard_ratio_from_grouped_data(grouped):
    """Prentice & Gloeckler (1978); Allison (1982): with covariates constant within periods, the
    grouped-time cloglog model estimates the continuous-time hazard ratio."""
    rows, _ = grouped
    fit = DiscreteTimeHazard(bootstrap_rounds=0).fit(to_cells(rows), period_col="week", covariates=["x", "flag"])
    se = fit.standard_errors_
    assert abs(fit.params_["x"] - np.log(2.0)) < 3 * se["x"]
    assert abs(fit.params_["flag"] - np.log(0.6)) < 3 * se["flag"]


def test_cloglog_agrees_with_cox_on_the_exact_times(grouped):
    """Same data, exact event times for the Cox model, week of the event for the cloglog model:
    log hazard ratios agree within 0.05 (tolerance: a fraction of one standard error here)."""
    rows, spells = grouped
    discrete = DiscreteTimeHazard(bootstrap_rounds=0).fit(to_cells(rows), period_col="week", covariates=["x", "flag"])
    cox = TimeVaryingCox().fit(spells, id_col="subject", start_col="start", stop_col="stop", event_col="event",
                               covariates=["x", "flag"])
    np.testing.assert_allclose(discrete.params_.to_numpy(), cox.params_[["x", "flag"]].to_numpy(), atol=0.05)


def test_cells_give_the_fit_of_one_row_per_person_period(grouped):
    """Binomial cells with var_weights = at_risk reproduce statsmodels' fit on the Bernoulli rows."""
    rows, _ = grouped
    rows = rows[rows["subject"] < 1500]
    fit = DiscreteTimeHazard(bootstrap_rounds=0).fit(to_cells(rows), period_col="week", covariates=["x", "flag"])
    design = pd.get_dummies(rows["week"], prefix="period", prefix_sep="=").astype(float)
    design[["x", "flag"]] = rows[["x", "flag"]].astype(float)
    ref = sm.GLM(rows["event"].astype(float), design, family=cloglog_family()).fit()
    np.testing.assert_allclose(fit.params_.to_numpy(), ref.params[["x", "flag"]].to_numpy(), rtol=1e-6)
    np.testing.assert_allclose(fit.standard_errors_.to_numpy(), ref.bse[["x", "flag"]].to_numpy(), rtol=1e-5)


def test_fast_fisher_scoring_matches_statsmodels(grouped):
    rows, _ = grouped
    cells = to_cells(rows)
    design = pd.get_dummies(cells["week"]).astype(float)
    design[["x", "flag"]] = cells[["x", "flag"]]
    events, at_risk = cells["events"].to_numpy(float), cells["at_risk"].to_numpy(float)
    ref = sm.GLM(events / at_risk, design, family=cloglog_family(), var_weights=at_risk).fit()
    params, converged = fit_cloglog(design.to_numpy(), events, at_risk, np.full(design.shape[1], -3.0), max_iter=100)
    assert converged
    np.testing.assert_allclose(params, ref.params, rtol=1e-6)


def clustered_rows(customers=1500, seed=2):
    """Customers with a strong shared frailty and a customer-level trait, many periods each."""
    rng = np.random.default_rng(seed)
    frailty = rng.gamma(0.7, 1 / 0.7, customers)
    trait = (rng.random(customers) < 0.5).astype(int)
    customer = np.repeat(np.arange(customers), 20)
    week = np.tile(np.arange(20), customers)
    p = -np.expm1(-0.08 * frailty[customer] * np.exp(0.4 * trait[customer]))
    event = rng.random(len(customer)) < p
    return pd.DataFrame({"customer": customer, "week": week, "trait": trait[customer], "event": event,
                         "block": customer % 64})


def test_block_bootstrap_tracks_cluster_robust_errors():
    """The customer-block bootstrap of cells gives about the cluster-robust standard error of a fit on
    customer-level rows (statsmodels GLM, cov_type='cluster' by customer: the reference library),
    and more than the model-based error, which treats periods of one customer as independent."""
    rows = clustered_rows()
    cells = rows.groupby(["block", "week", "trait"], as_index=False).agg(events=("event", "sum"),
                                                                         at_risk=("event", "size"))
    fit = DiscreteTimeHazard(bootstrap_rounds=200, seed=9).fit(cells, period_col="week", covariates=["trait"],
                                                               block_col="block")
    per_customer = rows.groupby(["customer", "week", "trait"], as_index=False).agg(events=("event", "sum"),
                                                                                    at_risk=("event", "size"))
    design = pd.get_dummies(per_customer["week"]).astype(float)
    design["trait"] = per_customer["trait"].astype(float)
    outcome = np.column_stack([per_customer["events"], per_customer["at_risk"] - per_customer["events"]])
    robust = sm.GLM(outcome, design, family=cloglog_family()).fit(cov_type="cluster",
                                                                 cov_kwds={"groups": per_customer["customer"]})
    ratio = fit.bootstrap_standard_errors_["trait"] / robust.bse["trait"]
    assert 0.75 < ratio < 1.3
    assert fit.bootstrap_standard_errors_["trait"] > 1.5 * fit.standard_errors_["trait"]
    assert fit.params_["trait"] == pytest.approx(robust.params["trait"], rel=1e-6)
    low, high = np.exp(fit.conf_int(0.05).loc["trait"])
    assert low < fit.hazard_ratios_["trait"] < high


def test_separation_is_detected_and_named():
    cells = pd.DataFrame({"week": [0, 0, 1, 1], "flag": [0, 1, 0, 1], "events": [40, 0, 30, 0],
                          "at_risk": [900, 50, 800, 40]})
    with pytest.raises(AnalysisError, match=r"separation.*'flag' = 1: no events in 90 at risk"):
        DiscreteTimeHazard(bootstrap_rounds=0).fit(cells, period_col="week", covariates=["flag"])


def test_collinear_covariates_are_named(grouped):
    rows, _ = grouped
    cells = to_cells(rows).assign(not_x=lambda c: 1 - c["x"])
    with pytest.raises(AnalysisError, match=r"collinear covariates.*'not_x' = combination of .*'x'"):
        DiscreteTimeHazard(bootstrap_rounds=0).fit(cells, period_col="week", covariates=["x", "not_x"])


def test_a_covariate_that_never_varies_is_named(grouped):
    rows, _ = grouped
    with pytest.raises(AnalysisError, match=r"'always_on' \(always 1\) never vary"):
        DiscreteTimeHazard(bootstrap_rounds=0).fit(to_cells(rows).assign(always_on=1), period_col="week",
                                                   covariates=["x", "always_on"])


def test_too_few_events_says_how_many_and_what_is_needed():
    cells = pd.DataFrame({"week": [0, 1, 0, 1], "x": [0, 0, 1, 1], "x2": [0, 1, 1, 0], "events": [3, 2, 4, 1],
                          "at_risk": [50] * 4})
    with pytest.raises(AnalysisError, match=r"too few events to fit: found 10, need at least 20 \(10 per"):
        DiscreteTimeHazard(bootstrap_rounds=0).fit(cells, period_col="week", covariates=["x", "x2"])


def test_non_converging_fit_lists_what_to_check_and_refits_penalised():
    """A count covariate that separates (everyone at risk at a high count has an event): no finite
    maximum. Too many levels for the level-by-level separation check, so the fit itself fails."""
    count = np.arange(30)
    cells = pd.DataFrame({"week": np.repeat([0, 1], 30), "count": np.tile(count, 2), "at_risk": 200,
                          "flag": np.tile(count % 2, 2)})
    cells["events"] = np.where(cells["count"] >= 15, 200, np.where(cells["count"] >= 10, 1, 0))
    with pytest.warns(StatisticalWarning, match=r"(?s)did not converge.*1\. separation.*3\. scaling.*PENALISED"):
        fit = DiscreteTimeHazard(bootstrap_rounds=0).fit(cells, period_col="week", covariates=["count", "flag"])
    assert fit.is_penalised_
    assert fit.summary["fit"].str.startswith("PENALISED refit").all()
    assert fit.standard_errors_.isna().all()


def test_periods_without_events_are_merged_into_the_period_before(grouped):
    rows, _ = grouped
    cells = to_cells(rows)
    cells.loc[cells["week"] == 11, "events"] = 0
    fit = DiscreteTimeHazard(bootstrap_rounds=0).fit(cells, period_col="week", covariates=["x", "flag"])
    assert fit.merged_periods_ == {11: 10}
    assert "period=11" not in fit.baseline_.index
