"""Sales run without a holdout (broadcast): what would the days of the sale and the weeks after it
have looked like without it?

For each broadcast promotion, :class:`BroadcastCounterfactual` fits a structural time-series
model (statsmodels ``UnobservedComponents``: a local level, a fixed weekly pattern, and control
series as regressors when given) on the daily series of the days before the sale, and forecasts
the sale's days and the ``after_days`` after it: the counterfactual. Actual minus counterfactual,
summed over the window, is the incremental effect; summed over the days after, it is the sale's own
pull-forward (negative when the sale only moved purchases earlier). This is the approach of
Brodersen, Gallusser, Koehler, Remy & Scott (2015), "Inferring causal impact using Bayesian
structural time-series models", Annals of Applied Statistics 9(1), fitted here by maximum
likelihood and the Kalman filter instead of by MCMC.

Masking: days inside another promotion's window, the ``broadcast_mask_before_days`` before it
(customers who expect a promotion wait for it) and the ``broadcast_mask_after_days`` after it
(the post-promotion dip) are missing values (NaN) in the pre-period, so that no other promotion's
lift, anticipation or dip is learned as the baseline. Days of the sale's own window or after-window that fall inside another promotion's
window are left out of the sums (and said so).

Intervals: the forecast of a sum of days is correlated across days (the level is shared), so the
variance of each cumulative sum is the sum of the full forecast covariance matrix of those days,
computed from the state-space matrices (:func:`forecast_covariance`). The model's variances are
themselves uncertain (on a short pre-period the level variance is often estimated near zero,
which would make the forecast far too sure of itself): ``broadcast_parameter_draws`` draws of
them from the asymptotic normal of their estimates each refilter the pre-period and draw the
window sums from their own forecast; the interval is the percentile interval of those draws.
Their calibration on simulated series is measured in ``bench/longrun_calibration.py``.

Placebo: the same model on a fake sale of the same length, on the latest stretch of unmasked days
before the sale (fitted on the days before it): its interval should include zero. When it does
not, the model's counterfactual is not to be trusted for this series.

Assumptions (stated beside every result): no other shock in the window and the weeks after it
(other than the listed promotions), a stable relation to the control series, and a pre-period
that represents the baseline: patterns longer than a week that the pre-period does not show (a
holiday peak a year earlier) are not modelled.
"""

from __future__ import annotations

import datetime as dt
import warnings

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import AnalysisError
from ..timing._base import FittedMixin, check_alpha, single_threaded_blas
from . import _sql

OUTCOMES = {"orders": "orders", "net_revenue": "net_amount"}
WINDOWS = ("during", "after", "total")
EFFECT_COLUMNS = ["promotion_id", "outcome", "window", "actual", "counterfactual", "estimate", "ci_low", "ci_high",
                  "days", "days_excluded", "pre_days", "pre_days_masked", "placebo_includes_zero", "ci_level",
                  "method", "note"]
SERIES_COLUMNS = ["promotion_id", "day", "outcome", "period", "actual", "counterfactual", "ci_low", "ci_high",
                  "is_masked", "is_excluded", "ci_level"]
PLACEBO_COLUMNS = ["promotion_id", "outcome", "placebo_starts_on", "placebo_ends_on", "actual", "counterfactual",
                   "estimate", "ci_low", "ci_high", "includes_zero", "ci_level", "method"]
NOTE_COLUMNS = ["promotion_id", "kind", "note"]
ASSUMPTIONS = (
    "no other shock moved sales in the sale's window or the weeks after it (other promotions there are listed "
    "separately)",
    "the pre-period represents the baseline: a local level and a fixed weekly pattern; patterns longer than a week "
    "that the pre-period does not show (a holiday peak) are not modelled",
    "the relation to the control series, when there are any, is the same during and after the sale as before it",
    "intervals are forecast intervals that also draw the model's variances from their estimates' asymptotic "
    "distribution; on simulated series they cover somewhat less often than their level says "
    "(bench/longrun_calibration.md)",
)


def _matrices(filtered):
    """Time-invariant system matrices of a Kalman filter output (statsmodels ``FilterResults``)."""
    return (np.asarray(filtered.transition[:, :, 0]), np.asarray(filtered.selection[:, :, 0]),
            np.asarray(filtered.state_cov[:, :, 0]), np.asarray(filtered.design[:, :, 0]),
            float(np.asarray(filtered.obs_cov[:, :, 0])[0, 0]))


def forecast_covariance(filtered, steps: int) -> np.ndarray:
    """Covariance matrix (steps x steps) of the next ``steps`` observations of a filtered state-space model.

    ``filtered`` is statsmodels' Kalman filter output (``results.filter_results``, or
    ``model.filter(params, return_ssm=True)``). With the predicted state covariance ``P`` of the
    first forecast step, transition ``T``, selection ``R``, state noise ``Q``, design ``Z`` and
    observation noise ``H`` (all time-invariant): ``V_1 = P``, ``V_(i+1) = T V_i T' + R Q R'``,
    and for ``j >= i`` ``Cov(y_j, y_i) = Z T^(j-i) V_i Z'`` (plus ``H`` on the diagonal). The
    diagonal equals statsmodels' own forecast variances (a test checks it).
    """
    T, R, Q, Z, H = _matrices(filtered)
    V = np.asarray(filtered.predicted_state_cov[:, :, -1])
    noise = R @ Q @ R.T
    powers = np.empty((steps, T.shape[0]))  # row k: Z T^k
    row = Z[0]
    for k in range(steps):
        powers[k] = row
        row = row @ T
    cov = np.zeros((steps, steps))
    for i in range(steps):
        column = powers[: steps - i] @ (V @ Z[0])  # Cov(y_j, y_i), j = i..steps-1
        cov[i:, i] = column
        cov[i, i:] = column
        V = T @ V @ T.T + noise
    return cov + H * np.eye(steps)


def forecast_mean(filtered, steps: int, intercepts: np.ndarray | None = None) -> np.ndarray:
    """Expected next ``steps`` observations: ``Z T^(j-1) a_1`` plus the regression part, if any."""
    T, _, _, Z, _ = _matrices(filtered)
    state = np.asarray(filtered.predicted_state[:, -1])
    out = np.empty(steps)
    for j in range(steps):
        out[j] = float(Z[0] @ state)
        state = T @ state
    return out if intercepts is None else out + intercepts


class BroadcastCounterfactual(FittedMixin):
    """Structural time-series counterfactual of one outcome over a sale and the days after it.

    Parameters
    ----------
    seasonal_period : int or None, default=7
        Period of the fixed seasonal pattern (7: the weekday); ``None`` for a local level only.
    min_pre_days : int, default=28
        Fewest unmasked days before the sale needed to fit (four weeks: each weekday four times).
    alpha : float, default=0.05
    parameter_draws : int, default=100
        Draws of the model's variances from the asymptotic normal of their estimates (absolute
        values); each draw refilters the pre-period and draws the window sums from its forecast.
        The intervals of the sums are percentile intervals of those draws, so that the
        uncertainty of the variances (large on a short pre-period, where the level variance is
        often estimated near zero) widens them. 0: forecast intervals given the fitted variances.
    seed : int, default=20261201

    Attributes
    ----------
    daily_ : DataFrame
        ``day, period (during, after), actual, counterfactual, ci_low, ci_high, is_excluded``.
    effects_ : DataFrame
        ``window (during, after, total), actual, counterfactual, estimate, ci_low, ci_high, days,
        days_excluded``.
    variances_ : pandas.Series
        Fitted variances (``sigma2.irregular``, ``sigma2.level``).
    regression_ : pandas.Series
        Coefficients of the control series (empty without controls).
    pre_days_, pre_days_masked_ : int
    results_ : statsmodels results

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> days = pd.date_range("2026-01-01", periods=120, freq="D")
    >>> y = pd.Series(50 + np.random.default_rng(1).normal(0, 5, 120), index=days)
    >>> y.iloc[100:107] += 30
    >>> fit = BroadcastCounterfactual().fit(y, starts_on=days[100], ends_on=days[106], after_days=7)
    >>> bool(fit.effects_.set_index("window").loc["during", "ci_low"] > 0)
    True
    """

    _fitted_attribute = "effects_"

    def __init__(self, *, seasonal_period: int | None = 7, min_pre_days: int = 28, alpha: float = 0.05,
                 parameter_draws: int = 100, seed: int = 20261201):
        self.seasonal_period = seasonal_period
        self.min_pre_days = min_pre_days
        self.alpha = alpha
        self.parameter_draws = parameter_draws
        self.seed = seed

    def fit(self, series: pd.Series, *, starts_on, ends_on, after_days: int, controls: pd.DataFrame | None = None,
            excluded: pd.Series | None = None) -> "BroadcastCounterfactual":
        """Fit on ``series`` (daily, indexed by day; NaN on masked pre-period days).

        Parameters
        ----------
        series : pandas.Series
            The outcome per day, from the first pre-period day to at least the sale's last day.
        starts_on, ends_on : date-like
            The sale's first and last day (inclusive).
        after_days : int
            Days after the sale forecast as its after-window (cut at the series' end).
        controls : DataFrame, optional
            Control series (same index as ``series``), used as regressors: sales the promotion
            did not touch (categories or channels not on sale, customers not reached).
        excluded : pandas.Series of bool, optional
            Days of the window or after-window to leave out of the sums (inside another
            promotion's window).
        """
        from statsmodels.tsa.statespace.structural import UnobservedComponents

        alpha = check_alpha(self.alpha)
        series = series.astype(float).copy()
        series.index = pd.DatetimeIndex(series.index)
        starts, ends = pd.Timestamp(starts_on), pd.Timestamp(ends_on)
        if ends < starts:
            raise AnalysisError(f"broadcast sale: ends_on {ends.date()} is before starts_on {starts.date()}")
        pre = series[series.index < starts]
        usable = int(pre.notna().sum())
        self.pre_days_ = usable
        self.pre_days_masked_ = int(pre.isna().sum())
        if usable < int(self.min_pre_days):
            raise AnalysisError(
                f"not estimable: {usable} unmasked days before the sale, need at least [longrun] "
                f"broadcast_min_pre_days = {self.min_pre_days}")
        # Start the fit at the first observed day (leading masked days carry no information).
        first = pre.first_valid_index()
        pre = pre[pre.index >= first]
        last = min(ends + pd.Timedelta(days=int(after_days)), series.index.max())
        horizon = series[(series.index >= starts) & (series.index <= last)]
        if horizon.empty:
            raise AnalysisError(f"not estimable: no days of the sale from {starts.date()} are in the data")
        pre_controls = future_controls = None
        if controls is not None and controls.shape[1] > 0:
            controls = controls.astype(float)
            controls.index = pd.DatetimeIndex(controls.index)
            pre_controls = controls.loc[pre.index].to_numpy()
            future_controls = controls.loc[horizon.index].to_numpy()
            if np.isnan(pre_controls).any() or np.isnan(future_controls).any():
                raise AnalysisError("broadcast controls: a control series has missing days; give every day a value")
        kwargs = {"level": "local level"}
        if self.seasonal_period:
            kwargs.update(seasonal=int(self.seasonal_period), stochastic_seasonal=False)
        scale = float(np.nanstd(pre.to_numpy())) or 1.0
        model = UnobservedComponents(pre.to_numpy() / scale, exog=None if pre_controls is None else pre_controls,
                                     **kwargs)
        with warnings.catch_warnings(), single_threaded_blas():
            warnings.simplefilter("ignore")
            results = model.fit(disp=False, maxiter=500)
        self.results_ = results
        self.scale_ = scale
        steps = len(horizon)
        beta = self._beta(results.model, np.asarray(results.params))
        intercepts = None if future_controls is None else future_controls @ beta
        mean = forecast_mean(results.filter_results, steps, intercepts) * scale
        cov = forecast_covariance(results.filter_results, steps) * scale**2
        z = stats.norm.ppf(1 - alpha / 2)
        sd = np.sqrt(np.clip(np.diag(cov), 0, None))
        is_excluded = np.zeros(steps, bool) if excluded is None else excluded.reindex(horizon.index).fillna(False).to_numpy(bool)
        period = np.where(horizon.index <= ends, "during", "after")
        self.daily_ = pd.DataFrame({"day": horizon.index.date, "period": period, "actual": horizon.to_numpy(),
                                    "counterfactual": mean, "ci_low": mean - z * sd, "ci_high": mean + z * sd,
                                    "is_excluded": is_excluded})
        takes = np.array([(~is_excluded) & (np.ones(steps, bool) if window == "total" else period == window)
                          for window in WINDOWS], dtype=float)
        actual_sums = takes @ np.nan_to_num(horizon.to_numpy())
        self.draws_ = self._draw_sums(model, results, takes, steps, future_controls, scale)
        self.actual_sums_ = actual_sums
        rows = []
        for k, window in enumerate(WINDOWS):
            take = takes[k].astype(bool)
            counterfactual = float(mean[take].sum())
            estimate = float(actual_sums[k]) - counterfactual
            if self.draws_ is None:
                half = z * np.sqrt(max(float(takes[k] @ cov @ takes[k]), 0.0))
                low, high = estimate - half, estimate + half
            else:
                low, high = np.quantile(actual_sums[k] - self.draws_[:, k], [alpha / 2, 1 - alpha / 2])
            days = int((period == window).sum()) if window != "total" else steps
            rows.append({"window": window, "actual": float(actual_sums[k]), "counterfactual": counterfactual,
                         "estimate": estimate, "ci_low": float(low) if take.any() else np.nan,
                         "ci_high": float(high) if take.any() else np.nan,
                         "days": days, "days_excluded": int((is_excluded & ((period == window) | (window == "total"))).sum())})
        self.effects_ = pd.DataFrame(rows)
        names = list(results.model.param_names)
        params = pd.Series(np.asarray(results.params), index=names)
        self.variances_ = params[[n for n in names if n.startswith("sigma2")]] * scale**2
        self.regression_ = params[[n for n in names if n.startswith("beta")]] * scale
        return self

    @staticmethod
    def _beta(model, params: np.ndarray) -> np.ndarray:
        names = list(model.param_names)
        return np.array([params[i] for i, n in enumerate(names) if n.startswith("beta")])

    def _draw_sums(self, model, results, takes, steps, future_controls, scale) -> np.ndarray | None:
        """Draws (parameter_draws x windows) of the counterfactual window sums, or None (plug-in)."""
        if not self.parameter_draws:
            return None
        params = np.asarray(results.params, dtype=float)
        try:
            param_cov = np.asarray(results.cov_params(), dtype=float)
        except Exception:  # noqa: BLE001 - statsmodels raises several kinds when the Hessian fails
            return None
        if not np.all(np.isfinite(param_cov)):
            return None
        rng = np.random.default_rng(self.seed)
        names = list(model.param_names)
        variances = [i for i, n in enumerate(names) if n.startswith("sigma2")]
        draws = rng.multivariate_normal(params, (param_cov + param_cov.T) / 2, size=int(self.parameter_draws),
                                        method="eigh")
        draws[:, variances] = np.abs(draws[:, variances])
        sums = np.empty((len(draws), takes.shape[0]))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            for d, theta in enumerate(draws):
                # The bare Kalman filter output: building statsmodels' results object per draw costs
                # more than the filter itself.
                filtered = model.filter(theta, return_ssm=True)
                beta = self._beta(model, theta)
                intercepts = None if future_controls is None else future_controls @ beta
                mean = forecast_mean(filtered, steps, intercepts) * scale
                cov = forecast_covariance(filtered, steps) * scale**2
                window_cov = takes @ cov @ takes.T
                sums[d] = rng.multivariate_normal(takes @ mean, (window_cov + window_cov.T) / 2, method="eigh")
        return sums

    def conf_int(self, alpha: float = 0.05) -> pd.DataFrame:
        """Intervals of the cumulative effects at level ``1 - alpha``."""
        self._check_fitted()
        alpha = check_alpha(alpha)
        if self.draws_ is None:
            z_new = stats.norm.ppf(1 - alpha / 2)
            z_fit = stats.norm.ppf(1 - self.alpha / 2)
            half = (self.effects_["ci_high"] - self.effects_["estimate"]) * z_new / z_fit
            return pd.DataFrame({"window": self.effects_["window"], "ci_low": self.effects_["estimate"] - half,
                                 "ci_high": self.effects_["estimate"] + half})
        estimates = self.actual_sums_[None, :] - self.draws_
        low, high = np.quantile(estimates, [alpha / 2, 1 - alpha / 2], axis=0)
        return pd.DataFrame({"window": list(WINDOWS), "ci_low": low, "ci_high": high})

    def _summary_frame(self) -> pd.DataFrame:
        return self.effects_.assign(ci_level=1 - self.alpha)

    def _header(self) -> dict[str, object]:
        return {"pre-period days used": self.pre_days_, "pre-period days masked": self.pre_days_masked_,
                "seasonal period": self.seasonal_period or "none"}


# -- the section -----------------------------------------------------------------------------------


def _promotions(con) -> pd.DataFrame:
    frame = con.cursor().execute(
        "SELECT promotion_id, CAST(starts_at AS DATE) AS starts_on, CAST(ends_at AS DATE) AS ends_on, audience "
        "FROM checked.promotions ORDER BY starts_at, promotion_id").df()
    for column in ("starts_on", "ends_on"):
        frame[column] = pd.to_datetime(frame[column])
    return frame


def _daily(con, through_end: dt.date) -> pd.DataFrame:
    cur = con.cursor()
    try:
        _sql.run(cur, "longrun_broadcast_daily", through_end=through_end)
        frame = cur.execute("SELECT * FROM longrun_broadcast_daily").df()
    finally:
        cur.close()
    frame["day_on"] = pd.to_datetime(frame["day_on"])
    return frame.set_index("day_on")


def _windows_mask(index: pd.DatetimeIndex, promotions: pd.DataFrame, after_days: int, before_days: int = 0) -> pd.Series:
    """True on days inside any of ``promotions``' windows, the ``before_days`` before and the ``after_days`` after."""
    mask = np.zeros(len(index), bool)
    for row in promotions.itertuples():
        mask |= ((index >= row.starts_on - pd.Timedelta(days=int(before_days)))
                 & (index <= row.ends_on + pd.Timedelta(days=int(after_days))))
    return pd.Series(mask, index=index)


def _placebo_start(masked: pd.Series, starts_on: pd.Timestamp, length: int, min_pre_days: int) -> pd.Timestamp | None:
    """The latest start of ``length`` unmasked days before the sale with enough unmasked days before it."""
    days = masked[masked.index < starts_on]
    clean = ~days.to_numpy()
    for end in range(len(days) - 1, length - 2, -1):
        begin = end - length + 1
        if clean[begin : end + 1].all() and clean[:begin].sum() >= min_pre_days:
            return days.index[begin]
    return None


def analyse(con, settings, through_end: dt.date) -> tuple[dict[str, pd.DataFrame], list[str]]:
    """Broadcast-sale tables: ``broadcast_effects``, ``broadcast_series``, ``broadcast_placebo``, ``broadcast_notes``."""
    longrun = settings.longrun
    alpha = longrun.alpha
    after_days = int(settings.windows.after_days)
    mask_after = int(longrun.broadcast_mask_after_days)
    mask_before = int(longrun.broadcast_mask_before_days)
    notes: list[str] = []
    promotions = _promotions(con)
    broadcasts = promotions[(promotions["audience"] == "broadcast")
                            & (promotions["starts_on"] <= pd.Timestamp(through_end))]
    empty = {"broadcast_effects": pd.DataFrame(columns=EFFECT_COLUMNS),
             "broadcast_series": pd.DataFrame(columns=SERIES_COLUMNS),
             "broadcast_placebo": pd.DataFrame(columns=PLACEBO_COLUMNS),
             "broadcast_notes": pd.DataFrame(columns=NOTE_COLUMNS)}
    if broadcasts.empty:
        notes.append(f"no broadcast promotion starts on or before {through_end}: the broadcast tables are empty")
        return empty, notes
    daily = _daily(con, through_end)
    effect_rows: list[dict] = []
    series_frames: list[pd.DataFrame] = []
    placebo_rows: list[dict] = []
    note_rows: list[dict] = []
    for sale in broadcasts.itertuples():
        others = promotions[promotions["promotion_id"] != sale.promotion_id]
        pre_from = max(daily.index.min(), sale.starts_on - pd.Timedelta(days=int(longrun.broadcast_pre_days)))
        frame = daily[daily.index >= pre_from]
        masked = _windows_mask(frame.index, others, mask_after, mask_before) & (frame.index < sale.starts_on)
        inside_other = _windows_mask(frame.index, others, 0) & (frame.index >= sale.starts_on)
        horizon_end = sale.ends_on + pd.Timedelta(days=after_days)
        overlapping = others[(others["starts_on"] <= horizon_end) & (others["ends_on"] >= sale.starts_on)]
        for text in ASSUMPTIONS:
            note_rows.append({"promotion_id": sale.promotion_id, "kind": "assumption", "note": text})
        if not overlapping.empty:
            note_rows.append({"promotion_id": sale.promotion_id, "kind": "warning", "note": (
                "other promotions run in the sale's window or the weeks after it: "
                + ", ".join(f"{r.promotion_id} ({r.starts_on.date()} to {r.ends_on.date()})" for r in overlapping.itertuples())
                + "; their days are left out of the sums, but their after-effects are not")})
        if sale.ends_on > pd.Timestamp(through_end):
            note_rows.append({"promotion_id": sale.promotion_id, "kind": "warning",
                              "note": f"the sale runs past the last day analysed ({through_end}): the window is cut there"})
        elif horizon_end > pd.Timestamp(through_end):
            note_rows.append({"promotion_id": sale.promotion_id, "kind": "warning",
                              "note": f"the after-window is cut at the last day analysed ({through_end})"})
        length = int((sale.ends_on - sale.starts_on).days) + 1
        placebo_start = _placebo_start(masked, sale.starts_on, length, int(longrun.broadcast_min_pre_days))
        for outcome, column in OUTCOMES.items():
            y = frame[column].where(~masked)
            estimator = BroadcastCounterfactual(min_pre_days=int(longrun.broadcast_min_pre_days), alpha=alpha,
                                        parameter_draws=int(longrun.broadcast_parameter_draws), seed=int(longrun.seed))
            method = ("structural time series: local level + weekly pattern (statsmodels UnobservedComponents, "
                      "maximum likelihood; Brodersen et al. 2015)")
            try:
                estimator.fit(y, starts_on=sale.starts_on, ends_on=min(sale.ends_on, pd.Timestamp(through_end)),
                              after_days=after_days, excluded=inside_other)
            except AnalysisError as exc:
                for window in WINDOWS:
                    effect_rows.append({"promotion_id": sale.promotion_id, "outcome": outcome, "window": window,
                                        "pre_days": int((~masked[frame.index < sale.starts_on]).sum()),
                                        "pre_days_masked": int(masked.sum()), "method": method, "note": str(exc)})
                continue
            # Placebo: the same model on a fake sale of the same length before the real one.
            verdict = None
            if placebo_start is not None:
                fake_end = placebo_start + pd.Timedelta(days=length - 1)
                placebo_y = y[y.index <= fake_end]
                try:
                    placebo = BroadcastCounterfactual(
                        min_pre_days=int(longrun.broadcast_min_pre_days), alpha=alpha,
                        parameter_draws=int(longrun.broadcast_parameter_draws), seed=int(longrun.seed),
                    ).fit(placebo_y, starts_on=placebo_start, ends_on=fake_end, after_days=0)
                except AnalysisError as exc:
                    placebo = None
                    note_rows.append({"promotion_id": sale.promotion_id, "kind": "warning",
                                      "note": f"placebo ({outcome}) not run: {exc}"})
            if placebo_start is not None and placebo is not None:
                row = placebo.effects_.set_index("window").loc["during"]
                verdict = bool(row["ci_low"] <= 0 <= row["ci_high"])
                placebo_rows.append({"promotion_id": sale.promotion_id, "outcome": outcome,
                                     "placebo_starts_on": placebo_start.date(), "placebo_ends_on": fake_end.date(),
                                     "actual": row["actual"], "counterfactual": row["counterfactual"],
                                     "estimate": row["estimate"], "ci_low": row["ci_low"], "ci_high": row["ci_high"],
                                     "includes_zero": verdict, "method": method})
                if not verdict:
                    note_rows.append({"promotion_id": sale.promotion_id, "kind": "warning", "note": (
                        f"placebo ({outcome}): a fake sale on {placebo_start.date()} to {fake_end.date()} shows an "
                        "effect whose interval excludes zero; the counterfactual of this series is not reliable")})
            note = "after: the sale's own pull-forward (negative when purchases were only moved earlier)"
            for effect in estimator.effects_.to_dict("records"):
                effect_rows.append({"promotion_id": sale.promotion_id, "outcome": outcome, **effect,
                                    "pre_days": estimator.pre_days_, "pre_days_masked": estimator.pre_days_masked_,
                                    "placebo_includes_zero": verdict, "method": method,
                                    "note": note if effect["window"] == "after" else ""})
            daily_rows = estimator.daily_.assign(promotion_id=sale.promotion_id, outcome=outcome, is_masked=False)
            pre_rows = pd.DataFrame({"day": frame.index[frame.index < sale.starts_on].date, "period": "pre",
                                     "actual": frame.loc[frame.index < sale.starts_on, column].to_numpy(),
                                     "is_masked": masked[frame.index < sale.starts_on].to_numpy(),
                                     "is_excluded": False, "promotion_id": sale.promotion_id, "outcome": outcome})
            series_frames.extend([pre_rows.tail(8 * 7), daily_rows])
        if placebo_start is None:
            note_rows.append({"promotion_id": sale.promotion_id, "kind": "warning", "note": (
                f"no placebo: no {length} unmasked days in a row before the sale with "
                f"{longrun.broadcast_min_pre_days} unmasked days before them")})
    effects = pd.DataFrame(effect_rows).reindex(columns=EFFECT_COLUMNS)
    effects["ci_level"] = 1 - alpha
    series = pd.concat(series_frames, ignore_index=True).reindex(columns=SERIES_COLUMNS) if series_frames \
        else empty["broadcast_series"]
    series["ci_level"] = 1 - alpha
    placebo = pd.DataFrame(placebo_rows).reindex(columns=PLACEBO_COLUMNS)
    placebo["ci_level"] = 1 - alpha
    tables = {"broadcast_effects": effects, "broadcast_series": series, "broadcast_placebo": placebo,
              "broadcast_notes": pd.DataFrame(note_rows).reindex(columns=NOTE_COLUMNS)}
    not_estimable = effects[effects["estimate"].isna()]["promotion_id"].unique()
    if len(not_estimable):
        notes.append("broadcast sales not estimable (too short a pre-period): " + ", ".join(not_estimable))
    notes.append("broadcast sales have no holdout: their effects rest on a time-series counterfactual; "
                 "read them with the assumptions in broadcast_notes")
    return tables, notes
