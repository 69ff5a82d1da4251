"""The broadcast counterfactual (toolkit.longrun.counterfactual): the state-space model against the
published Nile fit, its forecast covariance against statsmodels, a placebo on simulated series,
and bad input (too short a pre-period, no broadcast promotion)."""

from __future__ import annotations

import dataclasses
import datetime as dt

import numpy as np
import pandas as pd
import pytest

from tests.conftest import write_export
from toolkit import config, panels, workspace
from toolkit.config import LongrunSettings
from toolkit.errors import AnalysisError
from toolkit.longrun import counterfactual
from toolkit.longrun.counterfactual import BroadcastCounterfactual, forecast_covariance, forecast_mean


def nile_series() -> pd.Series:
    from statsmodels.datasets import nile

    flow = nile.load_pandas().data["volume"].to_numpy(dtype=float)
    # The 100 yearly flows as 100 consecutive days, then one "sale" day to forecast.
    days = pd.date_range("2026-01-01", periods=len(flow) + 1, freq="D")
    return pd.Series(np.append(flow, np.nan), index=days)


def test_local_level_matches_durbin_koopman_nile_variances():
    """Durbin & Koopman (2001), section 2.10: maximum-likelihood variances of the local-level model
    of the Nile flow, observation 15099 and level 1469.1 (within 2%)."""
    series = nile_series()
    fit = BroadcastCounterfactual(seasonal_period=None, parameter_draws=0).fit(series, starts_on=series.index[-1],
                                                           ends_on=series.index[-1], after_days=0)
    assert fit.variances_["sigma2.irregular"] == pytest.approx(15099, rel=0.02)
    assert fit.variances_["sigma2.level"] == pytest.approx(1469.1, rel=0.02)
    assert fit.pre_days_ == 100 and fit.regression_.empty


def test_forecast_covariance_matches_statsmodels_and_the_local_level_formula():
    """Means and the diagonal: statsmodels' own forecasts. Off the diagonal, for a local level (common
    practice, no source; follows from the model's definition): Cov(y_i, y_j) = P_1 + (min(i, j) - 1)
    x level variance, where P_1 is the first step's predicted level variance."""
    from statsmodels.tsa.statespace.structural import UnobservedComponents

    series = nile_series().iloc[:-1].to_numpy()
    results = UnobservedComponents(series, level="local level").fit(disp=False)
    steps = 6
    cov = forecast_covariance(results.filter_results, steps)
    forecast = results.get_forecast(steps)
    np.testing.assert_allclose(np.diag(cov), np.asarray(forecast.var_pred_mean), rtol=1e-8)
    np.testing.assert_allclose(forecast_mean(results.filter_results, steps), np.asarray(forecast.predicted_mean),
                               rtol=1e-10)
    p1 = float(results.predicted_state_cov[0, 0, -1])
    level = float(results.params[list(results.model.param_names).index("sigma2.level")])
    i, j = np.meshgrid(np.arange(1, steps + 1), np.arange(1, steps + 1))
    off = ~np.eye(steps, dtype=bool)
    np.testing.assert_allclose(cov[off], (p1 + (np.minimum(i, j) - 1) * level)[off], rtol=1e-8)


def simulated_days(*, days: int = 200, lift: float = 0.0, seed: int = 3) -> tuple[pd.Series, pd.Timestamp]:
    """A daily series: a slow random-walk level near 50, a weekday pattern, noise; a 7-day sale
    starting on day ``days - 21`` that adds ``lift`` orders a day (common practice, no source)."""
    rng = np.random.default_rng(seed)
    index = pd.date_range("2026-01-05", periods=days, freq="D")  # a Monday
    level = 50 + np.cumsum(rng.normal(0, 0.3, days))
    weekday = np.array([1.0, 0.95, 0.95, 0.9, 1.0, 1.1, 1.1])[np.arange(days) % 7]
    values = level * weekday + rng.normal(0, 4, days)
    start = days - 21
    values[start:start + 7] += lift
    return pd.Series(values, index=index), index[start]


@pytest.mark.parametrize("seed", [3, 4, 5])
def test_placebo_series_without_a_sale_gives_an_interval_that_includes_zero(seed):
    """No sale at all: the model on a date with no sale must not find one in the sale's days
    (common practice, no source). The seeds are the first three tried; the false-alarm rate over
    many seeds, for every window, is measured in bench/longrun_calibration.py."""
    series, start = simulated_days(seed=seed)
    fit = BroadcastCounterfactual().fit(series, starts_on=start, ends_on=start + pd.Timedelta(days=6), after_days=14)
    during = fit.effects_.set_index("window").loc["during"]
    assert during["ci_low"] <= 0 <= during["ci_high"], during.to_dict()


def test_planted_sale_is_found_and_its_after_window_is_null():
    """+30 orders a day for 7 days (210 in all): the during interval covers 210 and excludes zero,
    the after window (no pull-forward planted) covers zero (common practice, no source)."""
    series, start = simulated_days(lift=30.0)
    fit = BroadcastCounterfactual().fit(series, starts_on=start, ends_on=start + pd.Timedelta(days=6), after_days=14)
    effects = fit.effects_.set_index("window")
    assert effects.loc["during", "ci_low"] <= 210 <= effects.loc["during", "ci_high"]
    assert effects.loc["during", "ci_low"] > 0
    assert effects.loc["after", "ci_low"] <= 0 <= effects.loc["after", "ci_high"]
    wider = fit.conf_int(0.01).set_index("window")
    assert wider.loc["during", "ci_low"] < effects.loc["during", "ci_low"]
    assert len(fit.daily_) == 21 and set(fit.daily_["period"]) == {"during", "after"}


def test_control_series_enter_as_regressors():
    """A control series that carries the level (sales the promotion did not touch) gets a
    coefficient near its true 1.0 (common practice, no source)."""
    series, start = simulated_days(lift=30.0, seed=9)
    rng = np.random.default_rng(10)
    control = pd.DataFrame({"category_not_on_sale": rng.normal(20, 5, len(series))}, index=series.index)
    with_control = series + control["category_not_on_sale"]
    fit = BroadcastCounterfactual().fit(with_control, starts_on=start, ends_on=start + pd.Timedelta(days=6),
                                        after_days=7, controls=control)
    assert fit.regression_.iloc[0] == pytest.approx(1.0, abs=0.2)
    during = fit.effects_.set_index("window").loc["during"]
    assert during["ci_low"] <= 210 <= during["ci_high"]


def test_too_short_a_pre_period_is_not_estimable_and_states_the_minimum():
    series, start = simulated_days(days=60)
    series = series[series.index >= start - pd.Timedelta(days=20)]
    with pytest.raises(AnalysisError, match=r"not estimable: 20 unmasked days before the sale, need at least "
                                            r"\[longrun\] broadcast_min_pre_days = 28"):
        BroadcastCounterfactual(min_pre_days=28).fit(series, starts_on=start, ends_on=start, after_days=0)


def _tiny(tmp_path, **export):
    settings = config.load(write_export(tmp_path / "export", **export))
    settings = dataclasses.replace(settings, longrun=LongrunSettings(broadcast_min_pre_days=60))
    panels.build(settings)
    return settings


def test_tiny_export_broadcast_with_too_short_a_pre_period_gives_not_estimable_rows(tmp_path):
    """The hand-written export's broadcast PB starts 2026-03-16; the data starts 2026-01-12 and
    PA's days (2026-03-02 to 03-08, with the 7 days before and 14 after masked: 02-23 to 03-22)
    leave 42 unmasked days before it, fewer than the 60 asked for: every row says not
    estimable, with the minimum, and no number."""
    settings = _tiny(tmp_path)
    con = workspace.connect(settings)
    tables, notes = counterfactual.analyse(con, settings, dt.date(2026, 6, 30))
    effects = tables["broadcast_effects"]
    assert set(effects["promotion_id"]) == {"PB"} and len(effects) == 6
    assert effects["estimate"].isna().all()
    assert effects["note"].str.contains("42 unmasked days before the sale, need at least "
                                        r"\[longrun\] broadcast_min_pre_days = 60").all()
    assert any("not estimable" in n and "PB" in n for n in notes)


def test_no_broadcast_promotion_gives_empty_tables_with_a_note(tmp_path):
    from tests.conftest import TINY_PROMOTIONS, TINY_TRANSACTIONS

    # The broadcast PB left out of the promotions, and its lines no longer naming it (a line
    # naming a promotion the export lacks would be rejected).
    lines = [row[:8] + ([""] if row[8] == "PB" else row[8:]) for row in TINY_TRANSACTIONS]
    settings = _tiny(tmp_path, promotions=[row for row in TINY_PROMOTIONS if row[5] != "broadcast"], transactions=lines)
    con = workspace.connect(settings)
    tables, notes = counterfactual.analyse(con, settings, dt.date(2026, 6, 30))
    assert all(frame.empty for frame in tables.values())
    assert list(tables["broadcast_effects"].columns) == counterfactual.EFFECT_COLUMNS
    assert any("no broadcast promotion" in n for n in notes)
