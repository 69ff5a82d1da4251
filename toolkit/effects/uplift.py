"""Who responds to the coupon: cross-fitted uplift models and the choice between them.

Three learners of the conditional average treatment effect tau(x) = E[Y | x, coupon] - E[Y | x, none]:

- T-learner: one outcome model per arm, tau(x) = mu_treated(x) - mu_holdout(x).
- X-learner (Künzel, Sekhon, Bickel & Yu 2019, "Metalearners for estimating heterogeneous
  treatment effects using machine learning", PNAS): impute individual effects with the other
  arm's outcome model, D_treated = Y - mu_holdout(x), D_holdout = mu_treated(x) - Y, fit one
  effect model per arm and blend them, tau(x) = g tau_holdout(x) + (1 - g) tau_treated(x) with g
  the (randomised, hence constant) treated share.
- Transformed outcome (a baseline; Athey & Imbens 2015 among others): Z = Y (T - p) / (p (1 - p))
  has E[Z | x] = tau(x) under randomisation, so one regression of Z on x estimates tau.

All models are scikit-learn ``HistGradientBoosting*`` with small, fixed settings (no early
stopping), so a campaign of a few thousand customers fits in about a second and a million in a
few minutes. Every score is out-of-fold: the customers are split in K folds (stratified on arm
and outcome, seeded) and each fold is scored by models fitted on the other folds, so the Qini
coefficients used to choose a learner are honest. The learner with the highest out-of-fold Qini
coefficient is chosen.
"""

from __future__ import annotations

import math
import time
from contextlib import contextmanager

import numpy as np
import pandas as pd
from sklearn.ensemble import HistGradientBoostingClassifier, HistGradientBoostingRegressor
from sklearn.model_selection import StratifiedKFold

from ..errors import AnalysisError
from .qini import area_under_uplift_curve, qini_coefficient

LEARNERS = ("t_learner", "x_learner", "transformed_outcome")
BOOSTING = {
    "max_iter": 25,
    "learning_rate": 0.2,
    "max_leaf_nodes": 8,
    "max_bins": 64,
    "min_samples_leaf": 40,
    "l2_regularization": 1.0,
    "early_stopping": False,
}
MAX_FIT_ROWS = 250_000  # per fold: larger training folds are fitted on a seeded random sample of this size


class _Constant:
    """Stands in for a model when a training arm has a single outcome value."""

    def __init__(self, value: float):
        self.value = float(value)

    def predict(self, features) -> np.ndarray:
        return np.full(len(features), self.value)


def _fit_outcome_model(features, outcome, *, binary: bool, seed: int, boosting: dict):
    if len(outcome) == 0:
        return _Constant(0.0)
    if np.ptp(outcome) == 0:
        return _Constant(outcome[0])
    if binary:
        model = HistGradientBoostingClassifier(random_state=seed, **boosting).fit(features, outcome.astype(int))
        return _Probability(model)
    return HistGradientBoostingRegressor(random_state=seed, **boosting).fit(features, outcome)


def _fit_regressor(features, target, *, seed: int, boosting: dict):
    if len(target) == 0:
        return _Constant(0.0)
    if np.ptp(target) == 0:
        return _Constant(target[0])
    return HistGradientBoostingRegressor(random_state=seed, **boosting).fit(features, target)


class _Probability:
    def __init__(self, model):
        self.model = model

    def predict(self, features) -> np.ndarray:
        return self.model.predict_proba(features)[:, 1]


class TLearner:
    """Two outcome models, one per arm; uplift is their difference.

    Parameters
    ----------
    boosting : dict, optional
        Settings of the gradient-boosting models (default :data:`BOOSTING`).
    seed : int, default=0
    threads : int, default=1
        OpenMP threads of the model fits (0: no limit).

    Attributes
    ----------
    treated_model_, holdout_model_ : fitted models (``predict`` gives E[Y | x] in each arm)
    """

    def __init__(self, *, boosting: dict | None = None, seed: int = 0, threads: int | None = 1):
        self.boosting = boosting
        self.seed = seed
        self.threads = threads

    def fit(self, features, outcome, treated) -> "TLearner":
        x, y, t = _check_inputs(features, outcome, treated)
        params = {**BOOSTING, **(self.boosting or {})}
        self.binary_ = bool(np.isin(y, (0.0, 1.0)).all())
        with _thread_limit(self.threads, len(y)):
            self.treated_model_ = _fit_outcome_model(x[t], y[t], binary=self.binary_, seed=self.seed, boosting=params)
            self.holdout_model_ = _fit_outcome_model(x[~t], y[~t], binary=self.binary_, seed=self.seed + 1, boosting=params)
        return self

    def predict_baseline(self, features) -> np.ndarray:
        """Expected outcome without the coupon (for a 0/1 outcome: the purchase probability)."""
        x = np.asarray(features, dtype=float)
        with _thread_limit(self.threads, len(x)):
            return self.holdout_model_.predict(x)

    def predict(self, features) -> np.ndarray:
        x = np.asarray(features, dtype=float)
        with _thread_limit(self.threads, len(x)):
            return self.treated_model_.predict(x) - self.holdout_model_.predict(x)


class XLearner:
    """The X-learner of Künzel et al. (2019) with a constant propensity (randomised arms).

    Parameters
    ----------
    boosting : dict, optional
    seed : int, default=0

    Attributes
    ----------
    treated_share_ : float
        g in the blend tau(x) = g tau_holdout(x) + (1 - g) tau_treated(x).
    outcome_models_ : TLearner
        The first-stage outcome models.
    treated_effect_model_, holdout_effect_model_ : fitted regressors of the imputed effects.
    """

    def __init__(self, *, boosting: dict | None = None, seed: int = 0, threads: int | None = 1):
        self.boosting = boosting
        self.seed = seed
        self.threads = threads

    def fit(self, features, outcome, treated, *, outcome_models: TLearner | None = None) -> "XLearner":
        """Fit; ``outcome_models`` re-uses a T-learner already fitted on the same rows."""
        x, y, t = _check_inputs(features, outcome, treated)
        params = {**BOOSTING, **(self.boosting or {})}
        first = outcome_models or TLearner(boosting=self.boosting, seed=self.seed, threads=self.threads).fit(x, y, t)
        with _thread_limit(self.threads, len(y)):
            imputed_treated = y[t] - first.holdout_model_.predict(x[t])
            imputed_holdout = first.treated_model_.predict(x[~t]) - y[~t]
            self.treated_effect_model_ = _fit_regressor(x[t], imputed_treated, seed=self.seed + 2, boosting=params)
            self.holdout_effect_model_ = _fit_regressor(x[~t], imputed_holdout, seed=self.seed + 3, boosting=params)
        self.treated_share_ = float(t.mean())
        self.outcome_models_ = first
        return self

    def predict(self, features) -> np.ndarray:
        x = np.asarray(features, dtype=float)
        g = self.treated_share_
        with _thread_limit(self.threads, len(x)):
            return g * self.holdout_effect_model_.predict(x) + (1 - g) * self.treated_effect_model_.predict(x)


class TransformedOutcomeLearner:
    """One regression of the transformed outcome Z = Y (T - p) / (p (1 - p)) on the features.

    Attributes
    ----------
    treated_share_ : float
        p, the treated share of the rows fitted.
    model_ : fitted regressor
    """

    def __init__(self, *, boosting: dict | None = None, seed: int = 0, threads: int | None = 1):
        self.boosting = boosting
        self.seed = seed
        self.threads = threads

    def fit(self, features, outcome, treated) -> "TransformedOutcomeLearner":
        x, y, t = _check_inputs(features, outcome, treated)
        p = float(t.mean())
        if not 0 < p < 1:
            raise AnalysisError("the transformed outcome needs both arms in the rows fitted")
        z = y * (t.astype(float) - p) / (p * (1 - p))
        with _thread_limit(self.threads, len(y)):
            self.model_ = _fit_regressor(x, z, seed=self.seed + 4, boosting={**BOOSTING, **(self.boosting or {})})
        self.treated_share_ = p
        return self

    def predict(self, features) -> np.ndarray:
        x = np.asarray(features, dtype=float)
        with _thread_limit(self.threads, len(x)):
            return self.model_.predict(x)


def _check_inputs(features, outcome, treated):
    x = np.asarray(features, dtype=float)
    y = np.asarray(outcome, dtype=float)
    t = np.asarray(treated, dtype=bool)
    if x.ndim != 2 or len(x) != len(y) or len(y) != len(t):
        raise AnalysisError(f"features ({x.shape}), outcome ({y.shape}) and treated ({t.shape}) must have the same rows")
    if np.isnan(y).any():
        raise AnalysisError("the outcome has missing values; fill them (0 for no purchase)")
    return x, y, t


_CONTROLLER = None
_LIMIT_DEPTH = 0


@contextmanager
def _thread_limit(threads: int | None, rows: int):
    """OpenMP thread limit for the fits (one thread unless asked otherwise; ``threads=0``: no limit).

    The library scan of threadpoolctl is done once per process, and nested limits (a learner
    fitted inside :class:`UpliftModel`) keep the outer one.
    """
    global _CONTROLLER, _LIMIT_DEPTH
    if threads == 0 or _LIMIT_DEPTH:
        yield
        return
    if _CONTROLLER is None:
        from threadpoolctl import ThreadpoolController

        _CONTROLLER = ThreadpoolController()
    _LIMIT_DEPTH += 1
    try:
        with _CONTROLLER.limit(limits=threads or 1, user_api="openmp"):
            yield
    finally:
        _LIMIT_DEPTH -= 1


class UpliftModel:
    """Cross-fitted T-learner, X-learner and transformed-outcome baseline; the best by Qini is chosen.

    Parameters
    ----------
    learners : sequence of str, default=("t_learner", "x_learner", "transformed_outcome")
    folds : int, default=5
        K of the K-fold cross-fitting.
    seed : int, default=20261201
        Seeds the fold split and the models.
    boosting : dict, optional
        Overrides of the gradient-boosting settings (:data:`BOOSTING`).
    threads : int, default=1
        OpenMP threads for the model fits. One by default: these small models gain little from
        more, and on a busy machine OpenMP threads waiting for a core slow them down many times.
    max_fit_rows : int, default=250_000
        A training fold larger than this is fitted on a seeded random sample of this many rows
        (the small trees gain nothing from more); every customer is still scored out-of-fold.

    Attributes
    ----------
    scores_ : DataFrame
        Out-of-fold predicted uplift per learner (one column each), row-aligned with the input.
    baseline_probability_ : ndarray
        Out-of-fold expected outcome without the coupon (the T-learner's holdout model).
    model_choice_ : DataFrame
        learner, qini_coefficient, auuc, is_chosen (out-of-fold).
    chosen_ : str
    uplift_ : ndarray
        Out-of-fold scores of the chosen learner.
    fold_models_ : list of dict
        Per fold, learner name -> fitted learner (``predict`` averages them for new customers).
    feature_names_ : list of str
    sampled_ : bool
        Whether the training folds were sampled down to ``max_fit_rows``.
    n_treated_, n_holdout_, fit_seconds_ : int, int, float
    """

    def __init__(self, *, learners: tuple[str, ...] | list[str] = LEARNERS, folds: int = 5,
                 seed: int = 20261201, boosting: dict | None = None, threads: int | None = 1,
                 max_fit_rows: int = MAX_FIT_ROWS):
        self.learners = learners
        self.folds = folds
        self.seed = seed
        self.boosting = boosting
        self.threads = threads
        self.max_fit_rows = max_fit_rows

    def fit(self, features: pd.DataFrame, *, outcome, treated) -> "UpliftModel":
        """Cross-fit every learner on ``features`` and choose one by out-of-fold Qini coefficient."""
        unknown = [name for name in self.learners if name not in LEARNERS]
        if unknown or not self.learners:
            raise AnalysisError(f"unknown uplift learners {unknown}; choose from {', '.join(LEARNERS)}")
        if int(self.folds) < 2:
            raise AnalysisError(f"folds must be at least 2, found {self.folds}")
        names = list(features.columns) if isinstance(features, pd.DataFrame) else [f"x{i}" for i in range(np.shape(features)[1])]
        x, y, t = _check_inputs(features, outcome, treated)
        n_t, n_c = int(t.sum()), int((~t).sum())
        if min(n_t, n_c) < self.folds:
            raise AnalysisError(f"uplift models need at least {self.folds} customers in each arm (one per fold); "
                                f"found {n_t} treated and {n_c} holdout")
        if np.ptp(y) == 0:
            raise AnalysisError(f"the outcome is constant ({y[0]:g}) for every customer; there is no uplift to model")
        started = time.perf_counter()
        binary = bool(np.isin(y, (0.0, 1.0)).all())
        strata = t.astype(int) * 2 + (y > 0).astype(int) if binary else t.astype(int)
        counts = np.bincount(strata)
        if counts[counts > 0].min() < self.folds:
            strata = t.astype(int)
        splitter = StratifiedKFold(n_splits=int(self.folds), shuffle=True, random_state=self.seed)
        scores = {name: np.full(len(y), np.nan) for name in self.learners}
        baseline = np.full(len(y), np.nan)
        self.fold_models_ = []
        self.sampled_ = False
        sampler = np.random.default_rng(self.seed)
        with _thread_limit(self.threads, min(len(y), self.max_fit_rows)):
            for fold, (train, test) in enumerate(splitter.split(x, strata)):
                seed = self.seed + 10 * fold
                if len(train) > self.max_fit_rows:
                    train = np.sort(sampler.choice(train, self.max_fit_rows, replace=False))
                    self.sampled_ = True
                fitted = {}
                t_model = TLearner(boosting=self.boosting, seed=seed, threads=self.threads).fit(x[train], y[train], t[train])
                baseline[test] = t_model.predict_baseline(x[test])
                if "t_learner" in self.learners:
                    fitted["t_learner"] = t_model
                if "x_learner" in self.learners:
                    fitted["x_learner"] = XLearner(boosting=self.boosting, seed=seed, threads=self.threads).fit(
                        x[train], y[train], t[train], outcome_models=t_model)
                if "transformed_outcome" in self.learners:
                    fitted["transformed_outcome"] = TransformedOutcomeLearner(boosting=self.boosting, seed=seed, threads=self.threads).fit(
                        x[train], y[train], t[train])
                for name, model in fitted.items():
                    scores[name][test] = model.predict(x[test])
                fitted["_baseline"] = t_model
                self.fold_models_.append(fitted)
        rows = []
        for name in self.learners:
            rows.append({"learner": name, "qini_coefficient": qini_coefficient(scores[name], t, y),
                         "auuc": area_under_uplift_curve(scores[name], t, y)})
        choice = pd.DataFrame(rows)
        best = int(choice["qini_coefficient"].fillna(-math.inf).to_numpy().argmax())
        choice["is_chosen"] = np.arange(len(choice)) == best
        self.model_choice_ = choice
        self.chosen_ = str(choice.loc[best, "learner"])
        self.scores_ = pd.DataFrame(scores)
        self.uplift_ = scores[self.chosen_]
        self.baseline_probability_ = baseline
        self.binary_ = binary
        self.feature_names_ = names
        self.n_treated_, self.n_holdout_ = n_t, n_c
        self.fit_seconds_ = time.perf_counter() - started
        return self

    def _check_fitted(self) -> None:
        if not hasattr(self, "chosen_"):
            raise AnalysisError("this UpliftModel is not fitted yet; call fit(features, outcome=..., treated=...) first")

    def predict(self, features, *, learner: str | None = None) -> np.ndarray:
        """Predicted uplift for new customers: the mean of the fold models of ``learner`` (default: the chosen one)."""
        self._check_fitted()
        name = learner or self.chosen_
        x = np.asarray(features, dtype=float)
        return np.mean([models[name].predict(x) for models in self.fold_models_], axis=0)

    def predict_baseline(self, features) -> np.ndarray:
        """Expected outcome without the coupon for new customers (mean of the fold models)."""
        self._check_fitted()
        x = np.asarray(features, dtype=float)
        return np.mean([models["_baseline"].predict_baseline(x) for models in self.fold_models_], axis=0)

    @property
    def summary(self) -> pd.DataFrame:
        """Out-of-fold Qini coefficient and AUUC per learner, with the chosen one flagged."""
        self._check_fitted()
        return self.model_choice_

    def to_html(self) -> str:
        self._check_fitted()
        return (f"<p><b>Uplift models</b> ({self.folds}-fold cross-fitted on {self.n_treated_:,} treated and "
                f"{self.n_holdout_:,} holdout customers, {len(self.feature_names_)} features): "
                f"chosen <b>{self.chosen_}</b>.</p>" + self.model_choice_.to_html(index=False))

    def _repr_html_(self) -> str:
        return self.to_html()
