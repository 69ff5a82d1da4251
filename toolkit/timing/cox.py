"""Cox model with time-varying covariates on start-stop spells, with a customer bootstrap.

:class:`TimeVaryingCox` wraps lifelines' ``CoxTimeVaryingFitter`` (Efron ties): it checks the
spells first (too few events, covariates that never vary, spells of zero length), fits, and when
the fit does not converge it says what to check and refits with a ridge penalty, labelled as
such in every output. Intervals are customer-clustered: a customer's spells are resampled
together (``bootstrap_rounds`` rounds, seeded), each round refitted with the same Efron partial
likelihood by :mod:`toolkit.timing.efron`, which works on counts per event time and covariate
pattern and so refits in milliseconds. The model-based (inverse information) standard errors are
kept beside the bootstrap ones for comparison.

Spells of zero length (start == stop) cannot be at risk at any time. They are counted
(``n_zero_length_``) and handled, never dropped silently: with ``zero_length="half_day"`` (the
default) a zero-length spell that ends in an event is lengthened to half a unit (an event on the
same day as the spell started, placed at mid-day) and one without an event is removed, the count
of each reported; with ``zero_length="raise"`` they are an error.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from lifelines import CoxTimeVaryingFitter
from lifelines.exceptions import ConvergenceError as LifelinesConvergenceError
from lifelines.exceptions import ConvergenceWarning
from scipy import stats

from ..errors import AnalysisError, ConvergenceError, DataError, StatisticalWarning
from ._base import BootstrapIntervalsMixin, FittedMixin, check_alpha, single_threaded_blas
from .checks import check_columns, check_covariates_vary, check_enough_events, check_numeric, collinear_columns, shown
from .efron import SpellIndex, efron_terms, fit_efron

ZERO_LENGTH = ("half_day", "raise")

CONVERGENCE_CHECKLIST = (
    "1. separation: a covariate level where every spell, or no spell, ends in an event "
    "(look at events by covariate value);\n"
    "2. collinearity: two covariates that move together (e.g. a promotion flag and a window that "
    "always coincide);\n"
    "3. scaling: a count covariate with a very large range (cap or log it);\n"
    "4. a sparse level: a flag that is on in very few spells or for very few customers."
)


class TimeVaryingCox(BootstrapIntervalsMixin, FittedMixin):
    """Cox proportional-hazards model on start-stop spells, customer-clustered intervals.

    Parameters
    ----------
    alpha : float, default=0.05
    bootstrap_rounds : int, default=0
        Customer bootstrap rounds (0: model-based intervals only).
    seed : int, default=20261201
    penalizer : float, default=0.0
        Ridge penalty of the first fit (0: none).
    refit_penalizer : float, default=0.1
        Ridge penalty of the refit after a non-converging fit.
    zero_length : {"half_day", "raise"}, default="half_day"
    min_events_per_covariate : int, default=10

    Attributes
    ----------
    params_ : pandas.Series
        Log hazard ratios.
    hazard_ratios_ : pandas.Series
    standard_errors_ : pandas.Series
        Model-based (inverse observed information).
    bootstrap_params_ : DataFrame
        One row per bootstrap round.
    log_likelihood_ratio_test_ : dict
        test_statistic, degrees_of_freedom, p_value (all coefficients zero).
    n_customers_, n_spells_, n_events_ : int
    n_zero_length_ : dict
        ``lengthened`` (with an event) and ``removed`` (without) zero-length spells.
    is_penalised_ : bool
        True when the reported fit is the penalised refit.
    fit_note_ : str

    Examples
    --------
    >>> from lifelines.datasets import load_rossi
    >>> rossi = load_rossi().reset_index().assign(start=0)
    >>> cox = TimeVaryingCox().fit(rossi, id_col="index", start_col="start", stop_col="week",
    ...                            event_col="arrest", covariates=["fin", "age", "prio"])
    >>> round(float(cox.params_["prio"]), 3)
    0.097
    """

    def __init__(
        self,
        *,
        alpha: float = 0.05,
        bootstrap_rounds: int = 0,
        seed: int = 20261201,
        penalizer: float = 0.0,
        refit_penalizer: float = 0.1,
        zero_length: str = "half_day",
        min_events_per_covariate: int = 10,
    ) -> None:
        self.alpha = alpha
        self.bootstrap_rounds = bootstrap_rounds
        self.seed = seed
        self.penalizer = penalizer
        self.refit_penalizer = refit_penalizer
        self.zero_length = zero_length
        self.min_events_per_covariate = min_events_per_covariate

    def fit(
        self,
        spells: pd.DataFrame,
        *,
        id_col: str,
        start_col: str,
        stop_col: str,
        event_col: str,
        covariates: list[str],
        strata_col: str | None = None,
        table: str = "spells",
    ) -> "TimeVaryingCox":
        """Fit on one row per spell: customer id, (start, stop], event at stop, covariates.

        Parameters
        ----------
        strata_col : str, optional
            A column whose levels each get their own baseline hazard (a stratified Cox model);
            a customer's spells may fall in different strata.
        """
        if not list(covariates):
            # Nothing to estimate (e.g. an export without promotions: no exposure ever varies).
            raise AnalysisError(f"no covariate varies in the {table} (no promotion, coupon or dip day in this data), "
                                f"so there is no hazard ratio to estimate")
        with single_threaded_blas():
            return self._fit(spells, id_col, start_col, stop_col, event_col, covariates, strata_col, table)

    def _fit(self, spells, id_col, start_col, stop_col, event_col, covariates, strata_col, table):
        check_alpha(self.alpha)
        if self.zero_length not in ZERO_LENGTH:
            raise AnalysisError(f"zero_length must be one of {', '.join(ZERO_LENGTH)}, found {self.zero_length!r}")
        covariates = list(covariates)
        extra = [strata_col] if strata_col else []
        check_columns(spells, [id_col, start_col, stop_col, event_col, *covariates, *extra], table=table)
        check_numeric(spells, [start_col, stop_col, *covariates], table=table)
        data = spells[[id_col, start_col, stop_col, event_col, *covariates, *extra]].copy()
        self.strata_col = strata_col
        data[event_col] = data[event_col].astype(bool)
        data[covariates] = data[covariates].astype(float)
        backwards = data[stop_col] < data[start_col]
        if backwards.any():
            first = data[backwards].iloc[0]
            raise DataError(
                f"{table}: {int(backwards.sum())} spell(s) end before they start, e.g. {id_col}={shown(first[id_col])} "
                f"{start_col}={shown(first[start_col])} {stop_col}={shown(first[stop_col])}; rebuild the spells"
            )
        data = self._handle_zero_length(data, start_col, stop_col, event_col, table)
        n_events = int(data[event_col].sum())
        check_enough_events(n_events, len(covariates), table=table)
        check_covariates_vary(data, covariates, table=table)
        # A Cox model has no intercept but is blind to a constant shift, so a covariate that is a
        # combination of the others plus a constant cannot be told apart from them either.
        collinear = collinear_columns(np.column_stack([np.ones(len(data)), data[covariates].to_numpy(float)]),
                                      ["(constant)", *covariates])
        if collinear:
            listed = "; ".join(f"'{c}' = combination of {', '.join(repr(p) for p in partners)}" for c, partners in collinear)
            raise AnalysisError(f"{table}: collinear covariates, their hazard ratios cannot be told apart: {listed}; "
                                "drop one of each group")

        self.covariates_ = covariates
        self.n_spells_ = len(data)
        self.n_events_ = n_events
        self.n_customers_ = int(data[id_col].nunique())
        self._index = self._spell_index(data, start_col, stop_col, event_col)
        fitter, penalised, note = self._fit_lifelines(data, id_col, start_col, stop_col, event_col)
        self.lifelines_fitter_ = fitter
        self.is_penalised_ = penalised
        self.fit_note_ = note
        self.params_ = fitter.params_.rename_axis(None).astype(float)
        self.hazard_ratios_ = np.exp(self.params_)
        self.standard_errors_ = fitter.standard_errors_.rename_axis(None).astype(float)
        self.log_likelihood_ = float(fitter.log_likelihood_)
        # Likelihood-ratio test against no covariates, with the same Efron partial likelihood
        # (the null model needs no fit: it is the partial likelihood at zero).
        null_ll, _, _ = efron_terms(self._index.table(), np.zeros(len(covariates)))
        statistic = max(2.0 * (self.log_likelihood_ - null_ll), 0.0) if not penalised else np.nan
        self.log_likelihood_ratio_test_ = {
            "test_statistic": float(statistic),
            "degrees_of_freedom": len(covariates),
            "p_value": float(stats.chi2.sf(statistic, len(covariates))) if not penalised else np.nan,
        }
        self._spells = (data, id_col, start_col, stop_col, event_col)
        self.bootstrap_params_ = self._bootstrap()
        del self._spells, self._index
        return self

    def _spell_index(self, data, start_col, stop_col, event_col) -> SpellIndex:
        start = data[start_col].to_numpy(float)
        stop = data[stop_col].to_numpy(float)
        if self.strata_col:
            # Strata as disjoint stretches of one time axis: no risk set then spans two strata,
            # so the partial likelihood is exactly the stratified one.
            stratum, _ = pd.factorize(data[self.strata_col])
            offset = stratum * (stop.max() - start.min() + 1.0)
            start, stop = start + offset, stop + offset
        return SpellIndex.build(start, stop, data[event_col].to_numpy(bool), data[self.covariates_].to_numpy(float))

    # -- fitting --------------------------------------------------------------------------------
    def _handle_zero_length(self, data, start_col, stop_col, event_col, table):
        zero = data[stop_col] == data[start_col]
        with_event = zero & data[event_col]
        self.n_zero_length_ = {"lengthened": int(with_event.sum()), "removed": int((zero & ~data[event_col]).sum())}
        if zero.any() and self.zero_length == "raise":
            raise DataError(
                f"{table}: {int(zero.sum())} spell(s) of zero length ({start_col} == {stop_col}); "
                "merge same-day orders or use zero_length='half_day'"
            )
        if zero.any():
            warnings.warn(
                f"{table}: {int(zero.sum())} spell(s) of zero length: {self.n_zero_length_['lengthened']} ending "
                f"in an event lengthened to half a unit, {self.n_zero_length_['removed']} without an event removed",
                StatisticalWarning, stacklevel=3,
            )
            lengthen = with_event.to_numpy()
            data = data.copy()
            data[stop_col] = data[stop_col].astype(float)
            data.loc[lengthen, stop_col] = data.loc[lengthen, stop_col] + 0.5
            data = data[~(zero & ~data[event_col]).to_numpy()]
        return data

    def _fit_lifelines(self, data, id_col, start_col, stop_col, event_col):
        # lifelines works on standardised covariates; a start at the (fast, equal) Efron solution
        # saves it most of its Newton steps, each a pass over all spells per event time.
        scale = data[self.covariates_].std(ddof=1).to_numpy(float)
        quick = fit_efron(self._index.table())
        guess = quick.params * scale if quick.converged and np.all(np.abs(quick.params) < 15) else None

        def attempt(penalizer):
            fitter = CoxTimeVaryingFitter(alpha=self.alpha, penalizer=penalizer)
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always", ConvergenceWarning)
                fitter.fit(data, id_col=id_col, start_col=start_col, stop_col=stop_col, event_col=event_col,
                           strata=[self.strata_col] if self.strata_col else None, show_progress=False,
                           initial_point=guess if not penalizer else None)
            trouble = [str(w.message) for w in caught if issubclass(w.category, ConvergenceWarning)
                       and "norm(delta)" in str(w.message)]
            params = fitter.params_.to_numpy(float)
            if not np.all(np.isfinite(params)) or np.any(np.abs(params) > 15):
                trouble.append(f"coefficients diverge (largest |log hazard ratio| {np.nanmax(np.abs(params)):.1f})")
            return fitter, trouble

        try:
            fitter, trouble = attempt(self.penalizer)
        except (LifelinesConvergenceError, np.linalg.LinAlgError) as exc:
            fitter, trouble = None, [str(exc).splitlines()[0]]
        if not trouble:
            return fitter, bool(self.penalizer), "penalised fit (ridge %g)" % self.penalizer if self.penalizer else "converged"
        message = (
            "Cox model did not converge (" + "; ".join(trouble) + "). What to check:\n" + CONVERGENCE_CHECKLIST
            + f"\nRefitting with a ridge penalty of {self.refit_penalizer}: PENALISED estimates, shrunk toward "
            "hazard ratio 1; read them as a diagnostic, not as effects."
        )
        warnings.warn(message, StatisticalWarning, stacklevel=4)
        try:
            refit, still = attempt(max(self.refit_penalizer, self.penalizer))
        except (LifelinesConvergenceError, np.linalg.LinAlgError) as exc:
            raise ConvergenceError(message + f"\nThe penalised refit failed too: {str(exc).splitlines()[0]}") from None
        if still:
            raise ConvergenceError(message + "\nThe penalised refit did not converge either: " + "; ".join(still))
        return refit, True, f"PENALISED refit (ridge {max(self.refit_penalizer, self.penalizer)}) after non-convergence"

    def _bootstrap(self) -> pd.DataFrame:
        if not self.bootstrap_rounds:
            return pd.DataFrame(columns=self.covariates_, dtype=float)
        data, id_col, start_col, stop_col, event_col = self._spells
        customer_codes, customers = pd.factorize(data[id_col])
        index = self._index
        # lifelines penalises the normalised coefficients; the bootstrap refits use the same
        # penalty on the raw scale only when the reported fit is penalised (a diagnostic anyway).
        penalizer = float(max(self.refit_penalizer, self.penalizer)) if self.is_penalised_ else 0.0
        rng = np.random.default_rng(self.seed)
        n = len(customers)
        initial = self.params_.to_numpy(float)
        information = efron_terms(index.table(), initial, penalizer)[2]
        draws = np.full((self.bootstrap_rounds, len(initial)), np.nan)
        for r in range(self.bootstrap_rounds):
            multiplicity = np.bincount(rng.integers(0, n, n), minlength=n).astype(float)
            weights = multiplicity[customer_codes]
            # The full data's information stands in for the resample's own (same size, similar
            # data): cheaper steps, same optimum. Iterated until a step moves no log hazard ratio
            # by more than 1e-4, a hundredth or less of the bootstrap spread.
            fit = fit_efron(index.table(weights), initial=initial, penalizer=penalizer, tol=1e-4,
                            fixed_information=information)
            if fit.converged:
                draws[r] = fit.params
        failed = int(np.isnan(draws[:, 0]).sum()) if len(initial) else 0
        if failed:
            warnings.warn(f"{failed} of {self.bootstrap_rounds} bootstrap refits did not converge and were left out",
                          StatisticalWarning, stacklevel=4)
        return pd.DataFrame(draws, columns=self.covariates_)

    # -- results --------------------------------------------------------------------------------
    @property
    def interval_method_(self) -> str:
        if self._is_bootstrapped():
            return f"customer bootstrap, {len(self.bootstrap_params_)} rounds, percentile"
        return "model-based (Wald), customers treated as independent spells"

    def _summary_frame(self) -> pd.DataFrame:
        ci = self.conf_int(self.alpha)
        se = self.standard_errors_
        z = self.params_ / se
        frame = pd.DataFrame({
            "covariate": self.params_.index,
            "coef": self.params_.to_numpy(),
            "hazard_ratio": self.hazard_ratios_.to_numpy(),
            "se_model": se.to_numpy(),
            "se_bootstrap": self.bootstrap_standard_errors_.to_numpy(),
            "hr_ci_low": np.exp(ci["ci_low"].to_numpy()),
            "hr_ci_high": np.exp(ci["ci_high"].to_numpy()),
            "p_model": 2 * stats.norm.sf(np.abs(z.to_numpy())),
        })
        frame["ci_level"] = 1 - self.alpha
        frame["ci_method"] = self.interval_method_
        frame["fit"] = self.fit_note_
        return frame

    def _header(self) -> dict[str, object]:
        lr = self.log_likelihood_ratio_test_
        return {
            "customers": self.n_customers_, "spells": self.n_spells_, "events": self.n_events_,
            "ties": "Efron", "strata": self.strata_col or "none", "fit": self.fit_note_,
            "likelihood-ratio test": f"{lr['test_statistic']:.2f} on {lr['degrees_of_freedom']} df, p={lr['p_value']:.3g}",
            "interval": f"{1 - self.alpha:.0%} {self.interval_method_}",
        }
