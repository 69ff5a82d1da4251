"""Population drift: can a classifier tell one quarter's customers from another's by how they bought?

For each pair of whole quarters, customer-quarter behaviour features (``sql/longrun/
longrun_drift_features.sql``, from the panel ``customer_quarter_behaviour``: orders, purchase
weeks, the span of the quarter's purchases, basket, lines and items per order, deal share,
discount share, deepest discount) are labelled by quarter, and a gradient-boosted classifier
(scikit-learn ``HistGradientBoostingClassifier``) is scored out of fold (folds keep each customer's
rows together, so a customer seen in both quarters cannot be recognised rather than told apart).

* AUC near 0.5: the two quarters' customers behave alike; AUC above 0.5: behaviour has shifted,
  and a model trained on the older quarter predicts the newer one less well. The interval is a
  customer-cluster bootstrap of the out-of-fold AUC (it holds the fitted folds fixed).
* Pairs: each quarter against the same quarter a year earlier where the data reaches back that far
  (the season cancels), and adjacent quarters (these differ by season as well as by drift; read them
  as "how different is this quarter from the last", not as learning).
* The features that carry the signal: permutation importance (the fall in AUC when one feature is
  shuffled in the held-out fold), averaged over folds.

This is the classifier two-sample test (Lopez-Paz & Oquab 2017, "Revisiting classifier two-sample
tests", ICLR), applied to quarters.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd

from ..errors import AnalysisError
from . import _sql
from .api import parse_quarter, quarter_end

FEATURES = ("orders", "purchase_weeks", "active_span_days", "basket_amount", "lines_per_order", "items_per_order",
            "deal_share", "discount_share", "max_depth")
COLUMNS = ["comparison", "quarter_from", "quarter_to", "n_from", "n_to", "auc", "ci_low", "ci_high", "ci_level",
           "is_drift", "top_features", "note", "method", "sentence"]
FEATURE_COLUMNS = ["comparison", "quarter_from", "quarter_to", "feature", "importance", "importance_sd", "rank"]
SEASON_NOTE = "adjacent quarters differ by season as well as by any drift"
YOY_NOTE = "same quarter a year apart: the season cancels"


class QuarterClassifier:
    """Out-of-fold AUC of a classifier telling two groups of customer-quarters apart.

    Parameters
    ----------
    folds : int, default=5
    permutation_repeats : int, default=5
    bootstrap_rounds : int, default=200
        Customer-cluster bootstrap rounds of the AUC interval.
    alpha : float, default=0.05
    seed : int, default=20261201

    Attributes
    ----------
    auc_ : float
        Out-of-fold AUC.
    replicates_ : ndarray
        Bootstrap AUCs.
    importances_ : DataFrame
        feature, importance (mean fall in AUC), importance_sd (across folds and repeats).
    n_from_, n_to_ : int
        Rows of each group.
    scores_ : ndarray
        Out-of-fold scores, in the order of the rows fitted.

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> X = pd.DataFrame({"orders": rng.poisson(2, 400).astype(float)})
    >>> label = np.r_[np.zeros(200), np.ones(200)]
    >>> fit = QuarterClassifier(folds=3, bootstrap_rounds=50).fit(X, label, groups=np.arange(400))
    >>> 0.35 < fit.auc_ < 0.65
    True
    """

    def __init__(self, *, folds: int = 5, permutation_repeats: int = 5, bootstrap_rounds: int = 200,
                 alpha: float = 0.05, seed: int = 20261201) -> None:
        self.folds = folds
        self.permutation_repeats = permutation_repeats
        self.bootstrap_rounds = bootstrap_rounds
        self.alpha = alpha
        self.seed = seed

    def fit(self, features: pd.DataFrame, label, *, groups) -> "QuarterClassifier":
        """``label`` 1 for the later quarter, 0 for the earlier; ``groups`` the customer of each row."""
        label = np.asarray(label, dtype=int)
        groups = np.asarray(groups)
        if self.folds < 2:
            raise AnalysisError(f"[longrun] drift_folds must be at least 2, found {self.folds}")
        counts = np.bincount(label, minlength=2)
        if counts.min() < self.folds:
            raise AnalysisError(f"drift classifier: {counts.min()} customer-quarters in the smaller quarter, fewer than "
                                f"the {self.folds} folds")
        X = features.to_numpy(dtype=float)
        self._fit_folds(X, label, groups, list(features.columns))
        return self

    def _fit_folds(self, X, label, groups, columns) -> None:
        from sklearn.ensemble import HistGradientBoostingClassifier
        from sklearn.model_selection import StratifiedGroupKFold

        counts = np.bincount(label, minlength=2)
        scores = np.zeros(len(label))
        drops = []
        rng = np.random.default_rng(self.seed)
        splitter = StratifiedGroupKFold(n_splits=self.folds, shuffle=True, random_state=self.seed % (2**32))
        for train, test in splitter.split(X, label, groups):
            model = HistGradientBoostingClassifier(max_iter=60, learning_rate=0.1, max_leaf_nodes=8,
                                                   min_samples_leaf=20, random_state=self.seed % (2**32))
            model.fit(X[train], label[train])
            held_out = X[test]
            scores[test] = model.predict_proba(held_out)[:, 1]
            if self.permutation_repeats > 0 and len(np.unique(label[test])) == 2:
                drops.append(_permutation_drops(model, held_out, label[test], scores[test], self.permutation_repeats, rng))
        self.scores_ = scores
        self.auc_ = weighted_auc(label, scores)
        # customer-cluster bootstrap: customers drawn with replacement, all their rows with them
        codes, customers = pd.factorize(groups)
        ranks = _AucRanks(label, scores)
        replicates = []
        for _ in range(self.bootstrap_rounds):
            weight = rng.multinomial(len(customers), np.full(len(customers), 1.0 / len(customers)))[codes]
            value = ranks.auc(weight)
            if np.isfinite(value):
                replicates.append(value)
        self.replicates_ = np.asarray(replicates)
        if drops:
            stacked = np.concatenate(drops, axis=1)
            self.importances_ = pd.DataFrame({"feature": columns, "importance": stacked.mean(axis=1),
                                              "importance_sd": stacked.std(axis=1)})
        else:
            self.importances_ = pd.DataFrame({"feature": columns, "importance": np.nan, "importance_sd": np.nan})
        self.importances_ = self.importances_.sort_values("importance", ascending=False, ignore_index=True)
        self.n_from_, self.n_to_ = int(counts[0]), int(counts[1])

    def conf_int(self, alpha: float | None = None) -> tuple[float, float]:
        """Percentile interval of the AUC from the customer-cluster bootstrap."""
        alpha = self.alpha if alpha is None else alpha
        if len(self.replicates_) == 0:
            return float("nan"), float("nan")
        return (float(np.quantile(self.replicates_, alpha / 2)), float(np.quantile(self.replicates_, 1 - alpha / 2)))

    @property
    def summary(self) -> pd.DataFrame:
        low, high = self.conf_int()
        return pd.DataFrame([{"auc": self.auc_, "ci_low": low, "ci_high": high, "ci_level": 1 - self.alpha,
                              "n_from": self.n_from_, "n_to": self.n_to_}])

    def to_html(self) -> str:
        return (f"<p>Quarter classifier: out-of-fold AUC over {self.folds} folds, customer-cluster bootstrap "
                f"({self.bootstrap_rounds} rounds)</p>" + self.summary.to_html(index=False)
                + self.importances_.to_html(index=False))

    def _repr_html_(self) -> str:
        return self.to_html()


class _AucRanks:
    """The AUC of fixed scores under varying row weights (the bootstrap): ties grouped once."""

    def __init__(self, label: np.ndarray, scores: np.ndarray) -> None:
        _, self.group = np.unique(scores, return_inverse=True)  # groups in increasing score
        self.n_groups = int(self.group.max()) + 1 if len(scores) else 0
        self.positive = np.asarray(label) == 1

    def auc(self, weight: np.ndarray) -> float:
        weight = np.asarray(weight, dtype=float)
        pos = np.bincount(self.group, weights=weight * self.positive, minlength=self.n_groups)
        neg = np.bincount(self.group, weights=weight * ~self.positive, minlength=self.n_groups)
        total = pos.sum() * neg.sum()
        if total == 0:
            return float("nan")
        below = np.cumsum(neg) - neg
        return float(np.sum(pos * (below + 0.5 * neg)) / total)


def weighted_auc(label, scores, weight=None) -> float:
    """Area under the ROC curve: the chance that a random row of the later quarter scores above one
    of the earlier (ties count a half), with optional row weights. Equal to scikit-learn's
    ``roc_auc_score`` (tests/longrun/test_drift.py); written out so that the bootstrap and the
    permutation importance group the ties once instead of validating inputs thousands of times."""
    label = np.asarray(label)
    return _AucRanks(label, np.asarray(scores, dtype=float)).auc(np.ones(len(label)) if weight is None else weight)


def _permutation_drops(model, X: np.ndarray, label: np.ndarray, scores: np.ndarray, repeats: int,
                       rng: np.random.Generator) -> np.ndarray:
    """Fall in held-out AUC when each feature is shuffled (features x repeats): permutation importance
    (Breiman 2001, Machine Learning 45; the same computation as scikit-learn's
    ``permutation_importance`` with scoring="roc_auc")."""
    baseline = weighted_auc(label, scores)
    out = np.zeros((X.shape[1], repeats))
    shuffled = X.copy()
    for j in range(X.shape[1]):
        for r in range(repeats):
            shuffled[:, j] = X[rng.permutation(len(X)), j]
            out[j, r] = baseline - weighted_auc(label, model.predict_proba(shuffled)[:, 1])
        shuffled[:, j] = X[:, j]
    return out


def _pairs(quarters: list[str], adjacent: bool = True) -> list[tuple[str, str, str]]:
    """(comparison, earlier, later): year over year where the data reaches back, then adjacent."""
    present = set(quarters)
    pairs = []
    for q in quarters:
        year, number = parse_quarter(q)
        earlier = f"{year - 1}Q{number}"
        if earlier in present:
            pairs.append(("year_over_year", earlier, q))
    if adjacent:
        for a, b in zip(quarters, quarters[1:]):
            pairs.append(("adjacent", a, b))
    return pairs


def _sentence(comparison: str, a: str, b: str, auc: float, low: float, high: float, level: float,
              top: list[str]) -> str:
    interval = f"AUC {auc:.2f}, {level:.0%} interval {low:.2f} to {high:.2f}"
    if low > 0.5:
        said = (f"Customers of {b} can be told apart from those of {a} by how they bought ({interval}), mostly by "
                f"{', '.join(top)}: behaviour is shifting, and models fitted on {a} predict {b} less well.")
    else:
        said = (f"Customers of {b} cannot be told apart from those of {a} by how they bought ({interval}): "
                f"no sign that behaviour has shifted.")
    if comparison == "adjacent":
        said += f" ({SEASON_NOTE}.)"
    return said


def analyse(con, settings, through_end: dt.date) -> tuple[dict[str, pd.DataFrame], list[str]]:
    """The ``population_drift`` and ``population_drift_features`` tables."""
    longrun = settings.longrun
    small_cell = settings.report.small_cell
    notes: list[str] = []
    cur = con.cursor()
    try:
        quarters_on = [row[0] for row in cur.execute(
            "SELECT DISTINCT quarter_on FROM customer_quarter_behaviour WHERE quarter_on <= ? ORDER BY 1",
            [through_end]).fetchall()]
        whole = [q for q in quarters_on if quarter_end(q.year, (q.month - 1) // 3 + 1) <= through_end]
        if len(whole) < len(quarters_on):
            notes.append("the last quarter is partial and is left out of the drift comparisons "
                         "(a partial quarter differs by construction)")
        if len(whole) < 2:
            raise AnalysisError(f"population_drift needs at least two whole quarters with purchases; the data has "
                                f"{len(whole)} on or before {through_end}")
        _sql.run(cur, "longrun_drift_features", last_quarter_on=whole[-1],
                 sample_customers=int(longrun.drift_sample_customers), seed=int(longrun.seed))
        features = cur.execute("SELECT * FROM longrun_drift_features").df()
        population = dict(cur.execute(
            "SELECT quarter, count(*) FROM customer_quarter_behaviour WHERE quarter_on <= ? GROUP BY quarter",
            [whole[-1]]).fetchall())
    finally:
        cur.close()
    quarters = [f"{q.year}Q{(q.month - 1) // 3 + 1}" for q in whole]
    pairs = _pairs(quarters, adjacent=longrun.drift_adjacent)
    if not any(c == "year_over_year" for c, _, _ in pairs):
        notes.append("no year-over-year comparison: the data does not reach back a year before any whole quarter"
                     + ("; only adjacent quarters are compared, and they differ by season too" if longrun.drift_adjacent
                        else " and [longrun] drift_adjacent is false: nothing compared"))
    level = 1 - longrun.alpha
    sampled = any(population.get(q, 0) > longrun.drift_sample_customers for q in quarters)
    method = (f"gradient-boosted classifier, out-of-fold AUC ({longrun.drift_folds} folds grouped by customer), "
              f"customer-cluster bootstrap interval ({longrun.bootstrap_rounds} rounds), permutation importance")
    if sampled:
        method += f"; seeded sample of up to {longrun.drift_sample_customers:,} customers per quarter"
    from threadpoolctl import threadpool_limits

    limiter = threadpool_limits(limits=1)  # small fits: OpenMP threads contending on a busy machine cost more than they give
    try:
        rows, importance_rows = _compare(pairs, features, longrun, small_cell, level, method)
    finally:
        limiter.restore_original_limits()
    drift = pd.DataFrame(rows, columns=COLUMNS)
    importances = (pd.concat(importance_rows, ignore_index=True)[FEATURE_COLUMNS] if importance_rows
                   else pd.DataFrame(columns=FEATURE_COLUMNS))
    return {"population_drift": drift, "population_drift_features": importances}, notes


def _compare(pairs, features, longrun, small_cell, level, method):
    rows, importance_rows = [], []
    for comparison, a, b in pairs:
        part = features[features["quarter"].isin([a, b])]
        label = (part["quarter"] == b).to_numpy(dtype=int)
        base = {"comparison": comparison, "quarter_from": a, "quarter_to": b, "n_from": int((label == 0).sum()),
                "n_to": int((label == 1).sum()), "ci_level": level, "method": method,
                "note": YOY_NOTE if comparison == "year_over_year" else SEASON_NOTE}
        if min(base["n_from"], base["n_to"]) < max(small_cell, 2 * longrun.drift_folds):
            rows.append({**base, "auc": np.nan, "ci_low": np.nan, "ci_high": np.nan, "is_drift": None,
                         "top_features": None, "sentence": None,
                         "note": base["note"] + f"; not estimated: fewer than {max(small_cell, 2 * longrun.drift_folds)} "
                                                "customers bought in one of the quarters"})
            continue
        fit = QuarterClassifier(folds=longrun.drift_folds, permutation_repeats=longrun.drift_permutation_repeats,
                                bootstrap_rounds=longrun.bootstrap_rounds, alpha=longrun.alpha,
                                seed=longrun.seed).fit(part[list(FEATURES)], label, groups=part["customer_no"])
        low, high = fit.conf_int()
        top = [f for f, v in zip(fit.importances_["feature"], fit.importances_["importance"]) if v > 0][:3]
        rows.append({**base, "auc": fit.auc_, "ci_low": low, "ci_high": high, "is_drift": bool(low > 0.5),
                     "top_features": ", ".join(top) if top else None,
                     "sentence": _sentence(comparison, a, b, fit.auc_, low, high, level, top or ["no single feature"])})
        imp = fit.importances_.assign(comparison=comparison, quarter_from=a, quarter_to=b)
        imp["rank"] = np.arange(1, len(imp) + 1)
        importance_rows.append(imp)
    return rows, importance_rows
