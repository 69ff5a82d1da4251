"""Uplift learners on synthetic campaigns whose true uplift is known per customer."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from toolkit.errors import AnalysisError
from toolkit.effects.features import campaign_features
from toolkit.effects.qini import qini_coefficient
from toolkit.effects.uplift import TLearner, TransformedOutcomeLearner, UpliftModel, XLearner


@pytest.fixture(scope="module")
def fitted(panel_factory):
    panel = panel_factory(customers=2000, seed=21)
    features, _ = campaign_features(panel)
    model = UpliftModel(folds=3, seed=5).fit(features, outcome=panel["during_buyer"], treated=panel["is_treated"])
    return panel, features, model


def test_out_of_fold_scores_track_the_known_uplift(fitted):
    """Every learner ranks customers by uplift far better than chance (synthetic truth; common practice, no source)."""
    panel, _, model = fitted
    truth = panel["true_uplift"].to_numpy()
    for learner in model.scores_.columns:
        assert np.corrcoef(model.scores_[learner], truth)[0, 1] > 0.3, learner
    assert model.scores_.notna().all().all()
    top = truth[np.argsort(-model.uplift_)[:300]].mean()
    bottom = truth[np.argsort(model.uplift_)[:300]].mean()
    assert top > bottom + 0.1


def test_the_learner_with_the_highest_out_of_fold_qini_is_chosen(fitted):
    panel, _, model = fitted
    choice = model.model_choice_.set_index("learner")
    assert choice["is_chosen"].sum() == 1
    assert choice["qini_coefficient"].idxmax() == model.chosen_
    recomputed = qini_coefficient(model.scores_[model.chosen_], panel["is_treated"], panel["during_buyer"])
    assert choice.loc[model.chosen_, "qini_coefficient"] == pytest.approx(recomputed)
    assert (choice["qini_coefficient"] > 0).all()


def test_baseline_probability_tracks_the_purchase_chance_without_coupon(fitted):
    panel, _, model = fitted
    assert np.corrcoef(model.baseline_probability_, panel["true_baseline"])[0, 1] > 0.4
    assert ((model.baseline_probability_ >= 0) & (model.baseline_probability_ <= 1)).all()


def test_predict_on_new_customers_and_reproducible_with_a_seed(fitted):
    panel, features, model = fitted
    scores = model.predict(features.iloc[:50])
    assert scores.shape == (50,) and np.isfinite(scores).all()
    assert model.predict_baseline(features.iloc[:5]).shape == (5,)
    again = UpliftModel(folds=3, seed=5).fit(features, outcome=panel["during_buyer"], treated=panel["is_treated"])
    np.testing.assert_allclose(again.uplift_, model.uplift_)
    assert "chosen" in model._repr_html_()


def test_single_learners_fit_and_predict(fitted):
    panel, features, _ = fitted
    x, y, t = features.to_numpy(), panel["during_buyer"].to_numpy(), panel["is_treated"].to_numpy()
    t_model = TLearner(seed=1).fit(x, y, t)
    x_model = XLearner(seed=1).fit(x, y, t, outcome_models=t_model)
    to_model = TransformedOutcomeLearner(seed=1).fit(x, y, t)
    truth = panel["true_uplift"].to_numpy()
    for model in (t_model, x_model, to_model):
        assert np.corrcoef(model.predict(x), truth)[0, 1] > 0.3
    assert x_model.treated_share_ == pytest.approx(t.mean())


def test_bad_inputs_raise_clear_errors(fitted):
    panel, features, _ = fitted
    y, t = panel["during_buyer"], panel["is_treated"]
    with pytest.raises(AnalysisError, match="constant"):
        UpliftModel().fit(features, outcome=np.zeros(len(y)), treated=t)
    few = np.zeros(len(y), dtype=bool)
    few[:3] = True
    with pytest.raises(AnalysisError, match="at least 5 customers in each arm"):
        UpliftModel(folds=5).fit(features, outcome=y, treated=few)
    with pytest.raises(AnalysisError, match="unknown uplift learners"):
        UpliftModel(learners=("s_learner",)).fit(features, outcome=y, treated=t)
    with pytest.raises(AnalysisError, match="not fitted"):
        UpliftModel().predict(features)
    with pytest.raises(AnalysisError, match="same rows"):
        UpliftModel().fit(features.iloc[:10], outcome=y, treated=t)
    missing = pd.Series(y, dtype=float).copy()
    missing.iloc[0] = np.nan
    with pytest.raises(AnalysisError, match="missing"):
        UpliftModel().fit(features, outcome=missing, treated=t)
