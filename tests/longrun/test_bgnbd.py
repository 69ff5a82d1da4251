"""The BG/NBD model (toolkit.longrun.bgnbd) against its published CDNOW fit, and on simulated data.

Sources: Fader, Hardie & Lee (2005), Marketing Science 24(2), 275-284 (see
tests/reference/longrun/README.md).
"""

from __future__ import annotations

import datetime as dt
import importlib.metadata

import numpy as np
import pandas as pd
import pytest

from tests.foundation.test_cdnow_reference import write_cdnow_export
from toolkit import config, panels, workspace
from toolkit.errors import AnalysisError, DataError
from toolkit.longrun.bgnbd import BetaGeometricNBD
from toolkit.longrun.cohorts import cohort_customers

PUBLISHED = {"r": 0.243, "alpha": 4.414, "a": 0.793, "b": 2.426}  # Fader, Hardie & Lee 2005, section 4
PUBLISHED_LOG_LIKELIHOOD = -9582.4  # ibid.


def lifetimes_data(name: str):
    try:
        dist = importlib.metadata.distribution("Lifetimes")
    except importlib.metadata.PackageNotFoundError:
        pytest.skip("the Lifetimes wheel (test extra) is not installed")
    path = dist.locate_file(f"lifetimes/datasets/{name}")
    assert path.exists(), f"{name} not found in the Lifetimes wheel at {path}"
    return path


def test_bgnbd_matches_published_cdnow_fit():
    """Fader, Hardie & Lee (2005): r 0.243, alpha 4.414, a 0.793, b 2.426, LL -9582.4 (rounded as published)."""
    summary = pd.read_csv(lifetimes_data("cdnow_customers_summary.csv"))
    fit = BetaGeometricNBD().fit(frequency=summary["frequency"], recency=summary["recency"], age=summary["T"])
    for name, value in PUBLISHED.items():
        assert fit.params_[name] == pytest.approx(value, abs=0.0006), name  # published to 3 decimals
    assert fit.log_likelihood_ == pytest.approx(PUBLISHED_LOG_LIKELIHOOD, abs=0.06)  # published to 1 decimal
    assert fit.n_customers_ == 2357 and fit.n_repeat_purchases_ == 2457
    ci = fit.conf_int(0.05)
    assert (ci["ci_low"] < fit.params_).all() and (fit.params_ < ci["ci_high"]).all()
    assert set(fit.summary["parameter"]) == set(PUBLISHED) and "log-likelihood" in fit.to_html()


@pytest.fixture(scope="module")
def cdnow_connection(tmp_path_factory):
    """The CDNOW master log checked and built into a workspace, as tests/foundation reads it."""
    settings = config.load(write_cdnow_export(tmp_path_factory.mktemp("cdnow_longrun")))
    panels.build(settings)
    con = workspace.connect(settings)
    yield con
    con.close()


@pytest.mark.slow
def test_bgnbd_from_cdnow_master_log_through_our_panels_matches_published_fit(cdnow_connection):
    """The published fit again, but from the raw master log: our orders panel and the cohort SQL
    (purchase days up to the end of the 39-week calibration, 1997-09-30) for the customers of
    the published 1/10 sample (CDNOW_sample.txt, first column: the master log's customer id)."""
    customers = cohort_customers(cdnow_connection, dt.date(1997, 9, 30), burn_in_days=0)
    sample = pd.read_csv(lifetimes_data("CDNOW_sample.txt"), sep=r"\s+", header=None, dtype=str)
    customers = customers[customers["customer_id"].isin(set(sample[0]))]
    assert len(customers) == 2357  # Fader, Hardie & Lee's sample size
    fit = BetaGeometricNBD().fit(frequency=customers["repeat_days"], recency=customers["days_first_to_last"] / 7,
                                 age=customers["days_observed"] / 7)
    for name, value in PUBLISHED.items():
        assert fit.params_[name] == pytest.approx(value, abs=0.0006), name
    assert fit.log_likelihood_ == pytest.approx(PUBLISHED_LOG_LIKELIHOOD, abs=0.06)


def simulate_bgnbd(n: int, *, r: float, alpha: float, a: float, b: float, weeks: float, seed: int) -> pd.DataFrame:
    """Customers drawn from the BG/NBD process itself (FHL 2005, section 2): rate ~ gamma(r, alpha),
    dropout p ~ beta(a, b); after each purchase the customer drops out with probability p."""
    rng = np.random.default_rng(seed)
    rate = rng.gamma(r, 1 / alpha, n)
    dropout = rng.beta(a, b, n)
    rows = []
    for i in range(n):
        t, times = 0.0, []
        while True:
            t += rng.exponential(1 / rate[i])
            if t > weeks:
                break
            times.append(t)
            if rng.random() < dropout[i]:
                break
        rows.append((len(times), times[-1] if times else 0.0, weeks))
    return pd.DataFrame(rows, columns=["frequency", "recency", "age"])


def test_bgnbd_recovers_simulated_parameters_and_expected_purchases():
    """Common practice, no source: parameters of the generating process within their 95% intervals,
    and the model's expected purchases in a holdout period near what the process then produced."""
    truth = {"r": 0.5, "alpha": 5.0, "a": 1.5, "b": 4.0}
    data = simulate_bgnbd(3000, weeks=52, seed=7, **truth)
    fit = BetaGeometricNBD().fit(frequency=data["frequency"], recency=data["recency"], age=data["age"])
    ci = fit.conf_int(0.01)
    for name, value in truth.items():
        assert ci.loc[name, "ci_low"] <= value <= ci.loc[name, "ci_high"], (name, fit.params_[name])
    p_active = fit.probability_active(frequency=data["frequency"], recency=data["recency"], age=data["age"])
    assert ((p_active > 0) & (p_active <= 1)).all()
    assert (p_active[data["frequency"].to_numpy() == 0] == 1).all()  # no repeat purchase: no sign of dropout


def test_bgnbd_rejects_impossible_summaries():
    with pytest.raises(DataError, match="recency <= age"):
        BetaGeometricNBD().fit(frequency=[1, 2], recency=[5.0, 40.0], age=[30.0, 30.0])
    with pytest.raises(AnalysisError, match="no customer made a repeat purchase"):
        BetaGeometricNBD().fit(frequency=[0, 0], recency=[0.0, 0.0], age=[30.0, 20.0])
    with pytest.raises(AnalysisError, match="not fitted"):
        BetaGeometricNBD().conf_int()
