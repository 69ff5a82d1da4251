"""The drift classifier's pieces against scikit-learn (a general-purpose reference library)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import roc_auc_score

from toolkit.errors import AnalysisError
from toolkit.longrun.drift import QuarterClassifier, _pairs, weighted_auc


def test_weighted_auc_matches_scikit_learn_with_ties_and_weights():
    rng = np.random.default_rng(5)
    label = rng.integers(0, 2, 500)
    scores = np.round(rng.random(500) + 0.3 * label, 1)  # rounded: many ties
    weight = rng.integers(0, 4, 500)
    assert weighted_auc(label, scores) == pytest.approx(roc_auc_score(label, scores), abs=1e-12)
    assert weighted_auc(label, scores, weight) == pytest.approx(roc_auc_score(label, scores, sample_weight=weight),
                                                                abs=1e-12)


def test_classifier_tells_shifted_groups_apart_and_names_the_feature():
    """A shift planted in one feature is found, and that feature carries the importance (common practice, no source)."""
    rng = np.random.default_rng(2)
    n = 600
    label = np.r_[np.zeros(n), np.ones(n)].astype(int)
    X = pd.DataFrame({"orders": rng.poisson(2, 2 * n).astype(float),
                      "deal_share": np.clip(rng.normal(0.2 + 0.15 * label, 0.1), 0, 1)})
    fit = QuarterClassifier(folds=3, bootstrap_rounds=100, permutation_repeats=2, seed=1).fit(
        X, label, groups=np.arange(2 * n))
    low, high = fit.conf_int()
    assert low > 0.7 and fit.auc_ < high
    assert fit.importances_.iloc[0]["feature"] == "deal_share"


def test_classifier_interval_includes_half_without_a_shift():
    rng = np.random.default_rng(3)
    X = pd.DataFrame({"orders": rng.poisson(2, 800).astype(float), "basket": rng.gamma(2, 20, 800)})
    label = np.r_[np.zeros(400), np.ones(400)].astype(int)
    fit = QuarterClassifier(folds=3, bootstrap_rounds=100, permutation_repeats=0, seed=1).fit(
        X, label, groups=np.arange(800))
    low, high = fit.conf_int()
    assert low <= 0.5 <= high


def test_too_few_rows_for_the_folds_is_refused():
    with pytest.raises(AnalysisError, match="fewer than the 5 folds"):
        QuarterClassifier().fit(pd.DataFrame({"orders": [1.0, 2.0, 3.0]}), [0, 0, 1], groups=[1, 2, 3])


def test_pairs_are_year_over_year_where_the_data_reaches_back_then_adjacent():
    quarters = ["2025Q3", "2025Q4", "2026Q1", "2026Q2", "2026Q3"]
    pairs = _pairs(quarters)
    assert pairs[0] == ("year_over_year", "2025Q3", "2026Q3")
    assert [p for p in pairs if p[0] == "adjacent"][0] == ("adjacent", "2025Q3", "2025Q4")
    assert len(pairs) == 1 + 4
    assert _pairs(quarters, adjacent=False) == [("year_over_year", "2025Q3", "2026Q3")]
