"""Discrete-time proportional hazards at scale: a complementary log-log GLM on aggregated cells.

If the hazard is proportional in continuous time, ``h(t | x) = h0(t) exp(x'b)``, and the
covariates are constant within each period, then the chance of an event in period ``j`` given
survival to it is ``1 - exp(-exp(g_j + x'b))``: a binomial GLM with the complementary log-log
link, one intercept ``g_j`` per period and the *same* ``b`` as the Cox model (Prentice &
Gloeckler 1978, Biometrics 34:57-67; Allison 1982, Sociological Methodology 13:61-98). The
likelihood only depends on the number at risk and the number of events per period x covariate
cell, so the model is fitted on those sums, built in SQL, and its cost does not grow with the
number of customers.

Weights: each cell is one binomial observation, ``events / at_risk`` with ``var_weights =
at_risk``, which gives exactly the log-likelihood, coefficients and model-based standard errors of
the fit on one Bernoulli row per customer-period (``freq_weights`` would too, but would count every
customer-period as a residual degree of freedom; the binomial scale is fixed at 1 either way).

Clustered intervals: choice and reason. A customer contributes many periods, so rows are not
independent and the model-based standard errors are too small. Cluster-robust (sandwich)
covariance needs each customer's score contribution, which aggregated cells no longer hold. Two
ways out: (a) aggregate at customer x cell level on a sample and use the sandwich there, or (b) a
customer-block bootstrap of cells. We use (b): in SQL every customer is hashed into one of a few
dozen blocks and cells are summed per block; each bootstrap round draws blocks with replacement,
sums the drawn blocks' cells and refits. Because each block is a random set of whole customers,
drawing blocks is a cluster bootstrap (clusters of customers); it uses every customer rather than
a sample, keeps the input at (blocks x cells) rows whatever the number of customers, and each
refit is a GLM on a few thousand rows. (a) would need customer x cell rows, which grow with the
customers, to be held in memory. ``tests/timing/test_discrete.py`` checks the block-bootstrap
standard errors against statsmodels' cluster-robust ones on customer-level rows.

Before fitting, the design is checked: a covariate level whose cells hold all events or no
events (separation: its hazard ratio would run off to 0 or infinity) and covariates that are
linear combinations of others (collinear) are named in the error. Periods without any event
cannot have an intercept; they are merged into the period before (reported in ``merged_periods_``).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import statsmodels.api as sm
from scipy import sparse, stats
from statsmodels.tools.sm_exceptions import ConvergenceWarning, PerfectSeparationWarning

from ..errors import AnalysisError, ConvergenceError, DataError, StatisticalWarning
from ._base import BootstrapIntervalsMixin, FittedMixin, check_alpha, single_threaded_blas
from .checks import check_columns, check_enough_events, check_numeric, collinear_columns, constant_columns, shown
from .cox import CONVERGENCE_CHECKLIST


def cloglog_family() -> sm.families.Binomial:
    return sm.families.Binomial(link=sm.families.links.CLogLog())


def cloglog_loglik(design: np.ndarray, events: np.ndarray, at_risk: np.ndarray, params: np.ndarray) -> float:
    """Binomial log-likelihood (without the binomial coefficients) under the cloglog link."""
    eta = design @ params
    rate = np.exp(np.minimum(eta, 30.0))
    with np.errstate(divide="ignore"):
        log_p = np.log(-np.expm1(-rate))
    return float(np.sum(np.where(events > 0, events * log_p, 0.0)) - np.sum((at_risk - events) * rate))


def cloglog_information(design, events, at_risk, params) -> np.ndarray:
    """Fisher information of the binomial cloglog model at ``params``."""
    design = design if sparse.issparse(design) else sparse.csr_matrix(design)
    rate = np.exp(np.minimum(design @ params, 30.0))
    p = np.clip(-np.expm1(-rate), 1e-300, 1.0)
    weight = at_risk * rate * rate * (1.0 - p) / p
    return (design.T @ design.multiply(weight[:, None])).toarray()


def fit_cloglog(design, events: np.ndarray, at_risk: np.ndarray, start: np.ndarray, *,
                max_iter: int = 30, tol: float = 1e-8, fixed_information: np.ndarray | None = None
                ) -> tuple[np.ndarray, bool]:
    """Fisher scoring for the binomial cloglog model (the bootstrap refits; equal to statsmodels' fit).

    statsmodels' IRLS solves each step by a factorisation of the whole (dense) design, which is
    the safe choice once but slow when repeated for every bootstrap round; here each step solves
    the small normal equations of a sparse design, starting from the full-data estimate. With
    ``fixed_information`` every step reuses that matrix (the full data's information for a
    resample of it): steps are then a single sparse product, and the fixed point is the same.
    """
    design = design if sparse.issparse(design) else sparse.csr_matrix(design)  # mostly indicators
    params = np.asarray(start, dtype=float).copy()
    loglik = cloglog_loglik(design, events, at_risk, params)
    slack = 1e-10 * max(abs(loglik), 1.0)  # rounding of a sum of many cells near the optimum
    for _ in range(max_iter):
        eta = design @ params
        rate = np.exp(np.minimum(eta, 30.0))
        p = np.clip(-np.expm1(-rate), 1e-300, 1.0)
        score_eta = events * rate * (1.0 - p) / p - (at_risk - events) * rate
        gradient = design.T @ score_eta
        if fixed_information is None:
            weight = at_risk * rate * rate * (1.0 - p) / p
            information = (design.T @ design.multiply(weight[:, None])).toarray()
        else:
            information = fixed_information
        try:
            step = np.linalg.solve(information, gradient)
        except np.linalg.LinAlgError:  # aliased nuisance indicators: a minimum-norm step
            step = np.linalg.lstsq(information, gradient, rcond=None)[0]
        if np.max(np.abs(step)) < tol:
            return params + step, True
        scale = 1.0
        while True:
            candidate = params + scale * step
            new = cloglog_loglik(design, events, at_risk, candidate)
            if np.isfinite(new) and new >= loglik - slack:
                break
            scale /= 2
            if scale < 1e-4:
                return params, bool(np.max(np.abs(step)) < 1e-5)
        params, loglik = candidate, new
    return params, False


class DiscreteTimeHazard(BootstrapIntervalsMixin, FittedMixin):
    """Complementary log-log hazard model on period x covariate cells.

    Parameters
    ----------
    alpha : float, default=0.05
    bootstrap_rounds : int, default=50
        Customer-block bootstrap rounds (needs ``block_col`` in ``fit``).
    seed : int, default=20261201
    refit_penalizer : float, default=0.1
        Ridge penalty (per at-risk unit, on the coefficients) of the refit after a
        non-converging fit.
    min_events_per_covariate : int, default=10

    Attributes
    ----------
    params_ : pandas.Series
        Log hazard ratios of the covariates.
    baseline_ : pandas.Series
        Complementary log-log intercept of each period.
    hazard_ratios_, standard_errors_ : pandas.Series
    bootstrap_params_ : DataFrame
    n_cells_, n_events_, at_risk_ : int
    adjustment_params_ : pandas.Series
        Coefficients of the factor indicators (``factor=level``; the first level is the reference).
    merged_periods_ : dict
        Period -> the period it was merged into (periods with no event).
    is_penalised_ : bool
    fit_note_ : str

    Examples
    --------
    >>> import pandas as pd
    >>> cells = pd.DataFrame({"period": [0, 0, 1, 1], "on_sale": [0, 1, 0, 1],
    ...                       "events": [60, 110, 50, 95], "at_risk": [1000, 1000, 900, 850]})
    >>> fit = DiscreteTimeHazard(bootstrap_rounds=0).fit(cells, period_col="period", covariates=["on_sale"])
    >>> round(float(fit.hazard_ratios_["on_sale"]), 2)
    1.97
    """

    def __init__(
        self,
        *,
        alpha: float = 0.05,
        bootstrap_rounds: int = 50,
        seed: int = 20261201,
        refit_penalizer: float = 0.1,
        min_events_per_covariate: int = 10,
    ) -> None:
        self.alpha = alpha
        self.bootstrap_rounds = bootstrap_rounds
        self.seed = seed
        self.refit_penalizer = refit_penalizer
        self.min_events_per_covariate = min_events_per_covariate

    def fit(
        self,
        cells: pd.DataFrame,
        *,
        period_col: str,
        covariates: list[str],
        events_col: str = "events",
        at_risk_col: str = "at_risk",
        block_col: str | None = None,
        factors: list[str] | None = None,
        table: str = "hazard cells",
    ) -> "DiscreteTimeHazard":
        """Fit on cells: period, covariates, events, at risk (and the customer block).

        Parameters
        ----------
        cells : DataFrame
            One row per period x covariate cell (x block).
        period_col : str
            The period of the baseline (e.g. weeks since the last order); one intercept each.
        covariates : list of str
            Numeric covariates whose hazard ratios are reported.
        factors : list of str, optional
            Categorical adjustment columns (e.g. calendar month), entered as indicators whose
            coefficients are kept out of the summary.
        block_col : str, optional
            Customer block of each cell row, for the bootstrap.
        """
        if not list(covariates):
            # Nothing to estimate (e.g. an export without promotions: no exposure ever varies).
            raise AnalysisError(f"no covariate varies in the {table} (no promotion, coupon or dip day in this data), "
                                f"so there is no hazard ratio to estimate")
        with single_threaded_blas():
            return self._fit(cells, period_col, covariates, events_col, at_risk_col, block_col, factors, table)

    def _fit(self, cells, period_col, covariates, events_col, at_risk_col, block_col, factors, table):
        check_alpha(self.alpha)
        covariates = list(covariates)
        factors = list(factors or [])
        keys = [period_col, *covariates, *factors]
        check_columns(cells, [*keys, events_col, at_risk_col] + ([block_col] if block_col else []), table=table)
        check_numeric(cells, [*covariates, events_col, at_risk_col], table=table)
        data = cells[cells[at_risk_col] > 0]
        bad = data[(data[events_col] < 0) | (data[events_col] > data[at_risk_col])]
        if len(bad):
            row = bad.iloc[0]
            raise DataError(
                f"{table}: {len(bad)} cell(s) with events outside 0..at_risk, e.g. {events_col}={shown(row[events_col])} "
                f"{at_risk_col}={shown(row[at_risk_col])}; rebuild the cells"
            )
        n_events = float(data[events_col].sum())
        check_enough_events(n_events, len(covariates), table=table)
        constant = constant_columns(data, covariates)
        if constant:
            listed = ", ".join(f"'{c}' (always {shown(v)})" for c, v in constant.items())
            raise AnalysisError(
                f"{table}: covariate(s) {listed} never vary in cells with customers at risk, so their hazard "
                "ratio cannot be estimated; drop them or check how they are built"
            )
        self._check_separation(data, covariates, events_col, at_risk_col, table)
        data, self.merged_periods_ = self._merge_empty_periods(data, period_col, events_col)

        self.period_col = period_col
        self.covariates_ = covariates
        self.factors_ = factors
        pooled = data.groupby(keys, as_index=False, observed=True)[[events_col, at_risk_col]].sum()
        design, names = self._design(pooled, period_col, covariates, factors)
        collinear = collinear_columns(design, names)
        if collinear:
            listed = "; ".join(f"'{c}' = combination of {', '.join(repr(p) for p in partners) or 'nothing (all zero)'}"
                               for c, partners in collinear)
            raise AnalysisError(
                f"{table}: collinear covariates, their hazard ratios cannot be told apart: {listed}; "
                "drop one of each group"
            )
        self.design_names_ = names
        events = pooled[events_col].to_numpy(float)
        at_risk = pooled[at_risk_col].to_numpy(float)
        result, penalised, note = self._fit_glm(design, events, at_risk, names)
        self.is_penalised_ = penalised
        self.fit_note_ = note
        coef = pd.Series(result["params"], index=names)
        self.params_ = coef[covariates].astype(float)
        self.baseline_ = coef[[n for n in names if n.startswith("period=")]]
        self.hazard_ratios_ = np.exp(self.params_)
        self.standard_errors_ = pd.Series(result["bse"], index=names)[covariates]
        self.log_likelihood_ = result["llf"]
        self.n_cells_ = len(pooled)
        self.n_events_ = int(round(n_events))
        self.at_risk_ = int(round(float(at_risk.sum())))
        self._all_params = coef.to_numpy(float)
        self.adjustment_params_ = coef[[n for n in names if n not in covariates and not n.startswith("period=")]]
        self.bootstrap_params_ = self._bootstrap(data, keys, events_col, at_risk_col, block_col, pooled, penalised,
                                                 events, at_risk)
        return self

    # -- checks ---------------------------------------------------------------------------------
    def factor_effects(self, factor: str) -> pd.Series:
        """Log relative hazard of each level of an adjustment factor (0 for the reference level)."""
        self._check_fitted()
        prefix = f"{factor}="
        effects = self.adjustment_params_[[n for n in self.adjustment_params_.index if n.startswith(prefix)]]
        return effects.rename(lambda n: n[len(prefix):])

    @staticmethod
    def _check_separation(data, covariates, events_col, at_risk_col, table) -> None:
        problems = []
        for column in covariates:
            by_level = data.groupby(column)[[events_col, at_risk_col]].sum()
            if len(by_level) > 12:
                continue  # a count covariate: not a set of levels
            for level, row in by_level.iterrows():
                if row[events_col] == 0:
                    problems.append(f"'{column}' = {level:g}: no events in {row[at_risk_col]:,.0f} at risk")
                elif row[events_col] == row[at_risk_col]:
                    problems.append(f"'{column}' = {level:g}: every one of {row[at_risk_col]:,.0f} at risk has an event")
        if problems:
            raise AnalysisError(
                f"{table}: separation, the hazard ratio would run off to 0 or infinity: " + "; ".join(problems)
                + ". Drop the covariate, widen its window, or use more data"
            )

    @staticmethod
    def _merge_empty_periods(data, period_col, events_col):
        """Map each period without events onto the period before it (the first ones onto the next)."""
        totals = data.groupby(period_col)[events_col].sum().sort_index()
        mapping, current = {}, None
        for period, events in totals.items():
            if events > 0:
                current = period
            mapping[period] = current
        first_with = next(p for p, e in totals.items() if e > 0)
        mapping = {p: (first_with if m is None else m) for p, m in mapping.items()}
        merged = {p: m for p, m in mapping.items() if p != m}
        if merged:
            data = data.copy()
            data[period_col] = data[period_col].map(mapping)
        return data, merged

    @staticmethod
    def _design(pooled, period_col, covariates, factors):
        periods = pd.Categorical(pooled[period_col])
        parts = [pd.get_dummies(periods, prefix="period", prefix_sep="=").astype(float)]
        names = [f"period={c}" for c in periods.categories]
        parts[0].columns = names
        parts.append(pooled[covariates].astype(float).reset_index(drop=True))
        names = names + covariates
        for factor in factors:
            levels = pd.Categorical(pooled[factor])
            dummies = pd.get_dummies(levels, prefix=factor, prefix_sep="=", drop_first=True).astype(float)
            parts.append(dummies)
            names += list(dummies.columns)
        design = pd.concat([p.reset_index(drop=True) for p in parts], axis=1)
        design.columns = names
        return design.to_numpy(float), names

    # -- fitting --------------------------------------------------------------------------------
    def _fit_glm(self, design, events, at_risk, names, start=None):
        def attempt():
            model = sm.GLM(events / at_risk, design, family=cloglog_family(), var_weights=at_risk)
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                fitted = model.fit(start_params=start, maxiter=100, tol=1e-10, wls_method="qr")
            trouble = [str(w.message).splitlines()[0] for w in caught
                       if issubclass(w.category, (ConvergenceWarning, PerfectSeparationWarning))]
            if not fitted.converged:
                trouble.append("iteratively reweighted least squares did not converge in 100 iterations")
            params = np.asarray(fitted.params)
            if not np.all(np.isfinite(params)) or np.any(np.abs(params) > 25):
                trouble.append("coefficients diverge")
            return model, fitted, trouble

        if start is None:
            # Start statsmodels' IRLS at the sparse Fisher-scoring solution: it then needs one or
            # two of its (dense, slower) iterations to confirm the optimum and give the errors.
            guess = np.zeros(design.shape[1])
            period_columns = [i for i, n in enumerate(names) if n.startswith("period=")]
            guess[period_columns] = np.log(max(events.sum(), 1.0) / at_risk.sum())
            solution, ok = fit_cloglog(design, events, at_risk, guess, max_iter=100)
            start = solution if ok else None
        try:
            model, fitted, trouble = attempt()
        except (np.linalg.LinAlgError, ValueError) as exc:
            model, fitted, trouble = None, None, [str(exc).splitlines()[0]]
        if not trouble:
            return {"params": np.asarray(fitted.params), "bse": np.asarray(fitted.bse), "llf": float(fitted.llf)}, False, "converged"
        message = (
            "discrete-time model did not converge (" + "; ".join(trouble) + "). What to check:\n" + CONVERGENCE_CHECKLIST
            + f"\nRefitting with a ridge penalty of {self.refit_penalizer}: PENALISED estimates, shrunk toward "
            "hazard ratio 1; read them as a diagnostic, not as effects (no standard errors)."
        )
        warnings.warn(message, StatisticalWarning, stacklevel=4)
        model = sm.GLM(events / at_risk, design, family=cloglog_family(), var_weights=at_risk)
        penalty = np.full(design.shape[1], float(self.refit_penalizer))  # statsmodels scales the log-likelihood per row
        penalty[[i for i, n in enumerate(names) if n.startswith("period=")]] = 0.0
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                refit = model.fit_regularized(alpha=penalty, L1_wt=0.0, maxiter=200)
        except Exception as exc:  # noqa: BLE001 - any failure of the refit ends the analysis
            raise ConvergenceError(message + f"\nThe penalised refit failed too: {exc}") from None
        params = np.asarray(refit.params)
        llf = float(model.loglike(params))
        return {"params": params, "bse": np.full(len(params), np.nan), "llf": llf}, True, (
            f"PENALISED refit (ridge {self.refit_penalizer}) after non-convergence")

    def _bootstrap(self, data, keys, events_col, at_risk_col, block_col, pooled, penalised,
                   pooled_events, pooled_at_risk) -> pd.DataFrame:
        if not self.bootstrap_rounds or not block_col:
            if self.bootstrap_rounds and not block_col:
                warnings.warn("DiscreteTimeHazard: no block column, so no customer-block bootstrap; intervals are "
                              "model-based and too narrow when customers contribute many periods",
                              StatisticalWarning, stacklevel=3)
            return pd.DataFrame(columns=self.covariates_, dtype=float)
        cell_index = pd.MultiIndex.from_frame(pooled[keys])
        codes = cell_index.get_indexer(pd.MultiIndex.from_frame(data[keys]))
        blocks, block_codes = np.unique(data[block_col].to_numpy(), return_inverse=True)
        n_blocks, n_cells = len(blocks), len(pooled)
        flat = block_codes * n_cells + codes
        events = np.bincount(flat, weights=data[events_col].to_numpy(float), minlength=n_blocks * n_cells)
        at_risk = np.bincount(flat, weights=data[at_risk_col].to_numpy(float), minlength=n_blocks * n_cells)
        events = events.reshape(n_blocks, n_cells)
        at_risk = at_risk.reshape(n_blocks, n_cells)
        design, names = self._design(pooled, self.period_col, self.covariates_, self.factors_)
        matrix = sparse.csr_matrix(design)
        wanted = [names.index(c) for c in self.covariates_]
        nuisance = np.array([j for j, name in enumerate(names) if name not in self.covariates_])
        full_information = cloglog_information(matrix, pooled_events, pooled_at_risk, self._all_params)
        rng = np.random.default_rng(self.seed)
        draws = np.full((self.bootstrap_rounds, len(self.covariates_)), np.nan)
        for r in range(self.bootstrap_rounds):
            weight = np.bincount(rng.integers(0, n_blocks, n_blocks), minlength=n_blocks).astype(float)
            e, n = weight @ events, weight @ at_risk
            keep = n > 0
            # A period or adjustment level with no event in this resample carries no information
            # on the covariates: its indicator would run off to minus infinity. Its cells are left
            # out, which is that limit of the fit.
            present = matrix.T @ keep.astype(float)
            with_events = matrix.T @ np.where(keep, e, 0.0)
            empty = nuisance[(present[nuisance] > 0) & (with_events[nuisance] == 0)]
            if len(empty):
                keep &= np.asarray(matrix[:, empty].sum(axis=1)).ravel() == 0
            rows = matrix[keep]
            columns = np.flatnonzero(rows.getnnz(axis=0) > 0)
            # Each resample holds as many blocks as the data, so the full data's information is a
            # close stand-in for its own; iterated until no step moves a coefficient by more than
            # 1e-4 (a hundredth or less of the bootstrap spread).
            params, converged = fit_cloglog(rows[:, columns], e[keep], n[keep], self._all_params[columns],
                                            tol=1e-4, max_iter=60,
                                            fixed_information=full_information[np.ix_(columns, columns)])
            position = {c: i for i, c in enumerate(columns)}
            if converged and all(c in position for c in wanted) and np.all(np.isfinite(params)):
                draws[r] = params[[position[c] for c in wanted]]
        failed = int(np.isnan(draws[:, 0]).sum())
        if failed:
            warnings.warn(f"{failed} of {self.bootstrap_rounds} block-bootstrap refits failed and were left out",
                          StatisticalWarning, stacklevel=4)
        return pd.DataFrame(draws, columns=self.covariates_)

    # -- results --------------------------------------------------------------------------------
    @property
    def interval_method_(self) -> str:
        if self._is_bootstrapped():
            return f"customer-block bootstrap, {len(self.bootstrap_params_)} rounds, percentile"
        return "model-based (Wald), customer-periods treated as independent"

    def _summary_frame(self) -> pd.DataFrame:
        ci = self.conf_int(self.alpha)
        se = self.standard_errors_
        frame = pd.DataFrame({
            "covariate": self.params_.index,
            "coef": self.params_.to_numpy(),
            "hazard_ratio": self.hazard_ratios_.to_numpy(),
            "se_model": se.to_numpy(),
            "se_bootstrap": self.bootstrap_standard_errors_.to_numpy(),
            "hr_ci_low": np.exp(ci["ci_low"].to_numpy()),
            "hr_ci_high": np.exp(ci["ci_high"].to_numpy()),
            "p_model": 2 * stats.norm.sf(np.abs((self.params_ / se).to_numpy())),
        })
        frame["ci_level"] = 1 - self.alpha
        frame["ci_method"] = self.interval_method_
        frame["fit"] = self.fit_note_
        return frame

    def _header(self) -> dict[str, object]:
        return {
            "cells": self.n_cells_, "events": self.n_events_, "at risk": self.at_risk_,
            "link": "complementary log-log", "periods": len(self.baseline_), "fit": self.fit_note_,
            "interval": f"{1 - self.alpha:.0%} {self.interval_method_}",
        }
