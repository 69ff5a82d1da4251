"""The fast Efron partial likelihood (toolkit.timing.efron) against lifelines and statsmodels."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lifelines import CoxTimeVaryingFitter
from lifelines.datasets import load_rossi
from statsmodels.duration.hazard_regression import PHReg

from toolkit.timing.efron import SpellIndex, efron_terms, fit_efron

COVARIATES = ["fin", "age", "race", "wexp", "mar", "paro", "prio"]


def time_varying_spells(seed: int = 2, customers: int = 400) -> pd.DataFrame:
    """Start-stop spells with a flag that switches on and off and a count that grows (tied days)."""
    rng = np.random.default_rng(seed)
    rows = []
    for customer in range(customers):
        t, coupons = 0, 0
        while t < 60:
            length = int(rng.integers(1, 15))
            flag = int(rng.random() < 0.3)
            hazard = 0.03 * np.exp(0.7 * flag - 0.1 * coupons)
            event = rng.random() < 1 - np.exp(-hazard * length)
            rows.append((customer, t, t + length, event, flag, coupons))
            coupons += int(rng.random() < 0.3)
            t += length
            if event:
                break
    return pd.DataFrame(rows, columns=["customer", "start", "stop", "event", "flag", "coupons"])


@pytest.mark.parametrize("mode", ["patterns", "spells"])
def test_fast_efron_matches_lifelines_time_varying_fitter(mode):
    """Same Efron partial likelihood as lifelines' CoxTimeVaryingFitter (general-purpose reference library)."""
    spells = time_varying_spells()
    ref = CoxTimeVaryingFitter().fit(spells, id_col="customer", start_col="start", stop_col="stop", event_col="event")
    index = SpellIndex.build(spells["start"], spells["stop"], spells["event"], spells[["flag", "coupons"]], mode=mode)
    fit = fit_efron(index.table())
    assert fit.converged
    np.testing.assert_allclose(fit.params, ref.params_.to_numpy(), rtol=1e-7)
    assert fit.log_likelihood == pytest.approx(ref.log_likelihood_, rel=1e-10)
    np.testing.assert_allclose(np.sqrt(np.diag(np.linalg.inv(fit.information))), ref.standard_errors_, rtol=1e-6)


def test_fast_efron_matches_statsmodels_phreg_on_rossi():
    """Fox (2002) recidivism model, Efron ties: statsmodels PHReg gives the same fit (reference library)."""
    rossi = load_rossi()
    index = SpellIndex.build(np.zeros(len(rossi)), rossi["week"], rossi["arrest"] == 1, rossi[COVARIATES])
    fit = fit_efron(index.table())
    ref = PHReg(rossi["week"], rossi[COVARIATES], status=rossi["arrest"], ties="efron").fit()
    np.testing.assert_allclose(fit.params, ref.params, rtol=1e-6)
    assert fit.log_likelihood == pytest.approx(ref.llf, rel=1e-10)


@pytest.mark.parametrize("mode", ["patterns", "spells"])
def test_replication_weights_equal_duplicated_spells(mode):
    """A weight of k counts a spell k times, ties included (what a bootstrap resample means)."""
    spells = time_varying_spells(seed=4, customers=150)
    weights = np.random.default_rng(0).integers(0, 4, len(spells))
    duplicated = spells.loc[spells.index.repeat(weights)]
    dup_index = SpellIndex.build(duplicated["start"], duplicated["stop"], duplicated["event"],
                                 duplicated[["flag", "coupons"]], mode=mode)
    index = SpellIndex.build(spells["start"], spells["stop"], spells["event"], spells[["flag", "coupons"]], mode=mode)
    weighted = fit_efron(index.table(weights.astype(float)))
    direct = fit_efron(dup_index.table())
    np.testing.assert_allclose(weighted.params, direct.params, rtol=1e-9)
    assert weighted.log_likelihood == pytest.approx(direct.log_likelihood, rel=1e-12)


def test_fixed_information_reaches_the_same_optimum():
    """Quasi-Newton steps with the full data's information end where full Newton steps end."""
    spells = time_varying_spells(seed=5)
    index = SpellIndex.build(spells["start"], spells["stop"], spells["event"], spells[["flag", "coupons"]])
    full = fit_efron(index.table())
    weights = np.random.default_rng(1).poisson(1.0, len(spells)).astype(float)
    exact = fit_efron(index.table(weights))
    quick = fit_efron(index.table(weights), initial=full.params, fixed_information=full.information, tol=1e-10)
    np.testing.assert_allclose(quick.params, exact.params, atol=1e-8)
    _, score, _ = efron_terms(index.table(weights), quick.params)
    assert np.abs(score).max() < 1e-6
