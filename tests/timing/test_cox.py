"""The Cox wrapper with time-varying covariates (toolkit.timing.cox)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxPHFitter, CoxTimeVaryingFitter
from lifelines.datasets import load_rossi
from statsmodels.duration.hazard_regression import PHReg

from toolkit.errors import AnalysisError, DataError, StatisticalWarning
from toolkit.timing.cox import TimeVaryingCox

REFERENCE = Path(__file__).resolve().parents[1] / "reference" / "timing"
COVARIATES = ["fin", "age", "race", "wexp", "mar", "paro", "prio"]


@pytest.fixture(scope="module")
def rossi() -> pd.DataFrame:
    return load_rossi().reset_index().rename(columns={"index": "person"}).assign(start=0)


@pytest.fixture(scope="module")
def rossi_fit(rossi) -> TimeVaryingCox:
    return TimeVaryingCox().fit(rossi, id_col="person", start_col="start", stop_col="week", event_col="arrest",
                                covariates=COVARIATES)


def test_cox_matches_published_recidivism_fit(rossi_fit):
    # Source: Fox (2002), Cox Proportional-Hazards Regression for Survival Data, appendix to
    # An R and S-PLUS Companion to Applied Regression (tests/reference/timing/rossi_cox.csv):
    # coefficients as printed; tolerance half a unit of the last printed digit.
    expected = pd.read_csv(REFERENCE / "rossi_cox.csv").set_index("covariate")
    for covariate, row in expected.iterrows():
        assert rossi_fit.params_[covariate] == pytest.approx(row["coef"], abs=0.5 * 10 ** -row["decimals"]), covariate


def test_likelihood_ratio_test_matches_published_value(rossi_fit):
    # Source: Fox (2002): likelihood-ratio test 33.27 on 7 df.
    lr = rossi_fit.log_likelihood_ratio_test_
    assert lr["test_statistic"] == pytest.approx(33.27, abs=0.005)
    assert lr["degrees_of_freedom"] == 7


def test_cox_agrees_with_statsmodels_phreg(rossi, rossi_fit):
    """statsmodels' PHReg (Efron ties) is a second, independent implementation (reference library)."""
    ref = PHReg(rossi["week"], rossi[COVARIATES], status=rossi["arrest"], ties="efron").fit()
    np.testing.assert_allclose(rossi_fit.params_[COVARIATES].to_numpy(), ref.params, rtol=1e-5)
    np.testing.assert_allclose(rossi_fit.standard_errors_[COVARIATES].to_numpy(), ref.bse, rtol=1e-4)


def test_splitting_spells_leaves_the_fit_unchanged(rossi, rossi_fit):
    """Common practice, no source: cutting a spell where nothing changes does not change the model."""
    early = rossi.assign(week=np.minimum(rossi["week"], 20), arrest=np.where(rossi["week"] <= 20, rossi["arrest"], 0))
    late = rossi[rossi["week"] > 20].assign(start=20)
    split = pd.concat([early, late], ignore_index=True)
    fit = TimeVaryingCox().fit(split, id_col="person", start_col="start", stop_col="week", event_col="arrest",
                               covariates=COVARIATES)
    np.testing.assert_allclose(fit.params_.to_numpy(), rossi_fit.params_.to_numpy(), rtol=1e-7)


def test_time_varying_fit_agrees_with_statsmodels_counting_process():
    """Start-stop rows as delayed entries: statsmodels PHReg(entry=start) gives the same partial likelihood."""
    rng = np.random.default_rng(8)
    rows = []
    for person in range(500):
        t = 0
        while t < 40:
            length = int(rng.integers(1, 10))
            flag = int(rng.random() < 0.4)
            event = rng.random() < 1 - np.exp(-0.04 * np.exp(-0.6 * flag) * length)
            rows.append((person, t, t + length, event, flag))
            t += length
            if event:
                break
    spells = pd.DataFrame(rows, columns=["person", "start", "stop", "event", "flag"])
    fit = TimeVaryingCox().fit(spells, id_col="person", start_col="start", stop_col="stop", event_col="event",
                               covariates=["flag"])
    # statsmodels counts a row at risk from its entry time inclusive; start-stop spells are at
    # risk on (start, stop], so the entry is moved just past the start.
    ref = PHReg(spells["stop"], spells[["flag"]], status=spells["event"], entry=spells["start"] + 1e-6,
                ties="efron").fit()
    assert fit.params_["flag"] == pytest.approx(ref.params[0], rel=1e-5)


def test_stratified_fit_matches_lifelines_strata_and_bootstraps(rossi):
    """Strata (own baseline per level) as in lifelines; the bootstrap refits use the same strata."""
    ref = CoxTimeVaryingFitter().fit(rossi[["person", "start", "week", "arrest", "fin", "age", "prio", "wexp"]],
                                     id_col="person", start_col="start", stop_col="week", event_col="arrest",
                                     strata=["wexp"])
    fit = TimeVaryingCox(bootstrap_rounds=20, seed=3).fit(
        rossi, id_col="person", start_col="start", stop_col="week", event_col="arrest",
        covariates=["fin", "age", "prio"], strata_col="wexp")
    np.testing.assert_allclose(fit.params_.to_numpy(), ref.params_.to_numpy(), rtol=1e-7)
    # the bootstrap is centred near the estimate (its mean within 2 bootstrap standard errors)
    centre = fit.bootstrap_params_.mean()
    assert (np.abs(centre - fit.params_) < 2 * fit.bootstrap_standard_errors_).all()


def clustered_spells(seed: int = 1, customers: int = 500) -> pd.DataFrame:
    """Customers with a shared frailty and a customer-level flag: spells within a customer are correlated."""
    rng = np.random.default_rng(seed)
    rows = []
    for customer in range(customers):
        frailty = rng.gamma(1.0, 1.0)
        flag = int(rng.random() < 0.5)
        for _ in range(int(rng.integers(2, 8))):
            time = rng.exponential(1 / (0.05 * frailty * np.exp(0.5 * flag)))
            rows.append((customer, 0.0, min(time, 60.0), time <= 60.0, flag))
    return pd.DataFrame(rows, columns=["customer", "start", "stop", "event", "flag"])


def test_customer_bootstrap_tracks_the_cluster_robust_error():
    """The customer bootstrap SE is close to lifelines' cluster-robust (sandwich) SE and above the
    model SE when a customer's spells are correlated (reference library: lifelines CoxPHFitter
    with cluster_col)."""
    spells = clustered_spells()
    fit = TimeVaryingCox(bootstrap_rounds=200, seed=4).fit(
        spells, id_col="customer", start_col="start", stop_col="stop", event_col="event", covariates=["flag"])
    robust = CoxPHFitter().fit(spells[["customer", "stop", "event", "flag"]], duration_col="stop", event_col="event",
                               cluster_col="customer", robust=True)
    ratio = fit.bootstrap_standard_errors_["flag"] / robust.standard_errors_["flag"]
    assert 0.75 < ratio < 1.3
    assert fit.bootstrap_standard_errors_["flag"] > 1.2 * fit.standard_errors_["flag"]
    assert "customer bootstrap" in fit.summary["ci_method"].iloc[0]


def test_too_few_events_says_how_many_and_what_is_needed(rossi):
    few = rossi.assign(arrest=np.where(rossi.index < 12, rossi["arrest"], 0))
    found = int(few["arrest"].sum())
    with pytest.raises(AnalysisError, match=rf"too few events to fit: found {found}, need at least 30 .*3 coefficient"):
        TimeVaryingCox().fit(few, id_col="person", start_col="start", stop_col="week", event_col="arrest",
                             covariates=["fin", "age", "prio"])


def test_a_covariate_that_never_varies_is_named(rossi):
    with pytest.raises(AnalysisError, match=r"covariate\(s\) 'always_on' \(always 1\) never vary"):
        TimeVaryingCox().fit(rossi.assign(always_on=1), id_col="person", start_col="start", stop_col="week",
                             event_col="arrest", covariates=["fin", "always_on"])


def test_collinear_covariates_are_named(rossi):
    with pytest.raises(AnalysisError, match=r"collinear covariates.*'no_fin' = combination of '\(constant\)', 'fin'"):
        TimeVaryingCox().fit(rossi.assign(no_fin=1 - rossi["fin"]), id_col="person", start_col="start",
                             stop_col="week", event_col="arrest", covariates=["fin", "age", "no_fin"])


def test_non_converging_fit_lists_what_to_check_and_refits_penalised():
    """A flag on only in spells that end in an event (separation): no finite maximum."""
    rng = np.random.default_rng(1)
    n = 300
    stop = rng.integers(5, 30, n).astype(float)
    flag = (rng.random(n) < 0.3).astype(int)
    event = np.where(flag == 1, True, rng.random(n) < 0.4)
    stop = np.where(flag == 1, np.minimum(stop, 4), stop)
    spells = pd.DataFrame({"customer": range(n), "start": 0.0, "stop": stop, "event": event, "flag": flag,
                           "noise": rng.normal(size=n)})
    with pytest.warns(StatisticalWarning, match=r"(?s)did not converge.*1\. separation.*2\. collinearity.*PENALISED"):
        fit = TimeVaryingCox(bootstrap_rounds=0).fit(spells, id_col="customer", start_col="start", stop_col="stop",
                                                     event_col="event", covariates=["flag", "noise"])
    assert fit.is_penalised_
    assert fit.summary["fit"].str.startswith("PENALISED refit").all()
    assert np.isfinite(fit.params_["flag"]) and fit.params_["flag"] < 15


def test_zero_length_spells_are_counted_and_handled(rossi):
    extra = pd.DataFrame({"person": [9001, 9002, 9003], "start": [0, 0, 5], "week": [0, 0, 5], "arrest": [1, 0, 0],
                          "fin": [0, 1, 0], "age": [30, 25, 40], "prio": [1, 2, 3]})
    data = pd.concat([rossi[extra.columns], extra], ignore_index=True)
    with pytest.warns(StatisticalWarning, match=r"3 spell\(s\) of zero length: 1 ending in an event lengthened to half"):
        fit = TimeVaryingCox().fit(data, id_col="person", start_col="start", stop_col="week", event_col="arrest",
                                   covariates=["fin", "age", "prio"])
    assert fit.n_zero_length_ == {"lengthened": 1, "removed": 2}
    assert fit.n_spells_ == len(rossi) + 1
    assert fit.n_events_ == int(rossi["arrest"].sum()) + 1
    with pytest.raises(DataError, match=r"3 spell\(s\) of zero length"):
        TimeVaryingCox(zero_length="raise").fit(data, id_col="person", start_col="start", stop_col="week",
                                                event_col="arrest", covariates=["fin", "age", "prio"])


def test_spells_that_end_before_they_start_are_refused(rossi):
    bad = rossi.assign(start=np.where(rossi.index == 0, 99, 0))
    with pytest.raises(DataError, match=r"1 spell\(s\) end before they start, e.g. person=0"):
        TimeVaryingCox().fit(bad, id_col="person", start_col="start", stop_col="week", event_col="arrest",
                             covariates=["fin"])


def test_summary_conf_int_and_html(rossi_fit):
    ci = rossi_fit.conf_int(0.10)
    assert (ci["ci_low"] < rossi_fit.params_).all() and (rossi_fit.params_ < ci["ci_high"]).all()
    assert list(rossi_fit.summary["covariate"]) == COVARIATES
    html = rossi_fit.to_html()
    assert "Efron" in html and "432" in html
