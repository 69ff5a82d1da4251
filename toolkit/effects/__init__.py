"""Campaign effects: what a targeted campaign with a randomised holdout really did.

Public names:

- :func:`analyse_campaign`, :func:`write_campaign`, :func:`write_campaigns`,
  :func:`list_targeted_promotions`, :func:`run_campaigns` (``api``)
- :class:`CampaignReadout` (``readout``)
- estimators: :class:`HoldoutComparison` (Welch / pooled, CUPED, Newcombe), :class:`RandomisationCheck`
  (sample ratio and balance), :class:`UpliftModel` (cross-fitted T-, X- and transformed-outcome
  learners chosen by Qini), :class:`WeightedComparison` (IPW and doubly robust, when there is no holdout)
- evaluation: :func:`qini_curve`, :func:`qini_coefficient`, :func:`area_under_uplift_curve`, :func:`uplift_by_decile`
- power: :func:`sample_size_per_arm`, :func:`minimum_detectable_effect`, :func:`minimum_detectable_rate_lift`,
  :func:`holdout_size_needed`
"""

import importlib

# Names are imported on first use, so that `liftlag check` or `build` does not pay for loading
# scipy and scikit-learn.
_HOME = {
    "analyse_campaign": "api", "analyse_panel": "api", "list_targeted_promotions": "api",
    "run_campaigns": "api", "write_campaign": "api", "write_campaigns": "api",
    "RandomisationCheck": "balance", "covariate_balance": "balance", "sample_ratio_test": "balance",
    "HoldoutComparison": "holdout", "newcombe_interval": "holdout", "wilson_interval": "holdout",
    "holdout_size_needed": "power", "minimum_detectable_effect": "power",
    "minimum_detectable_rate_lift": "power", "rate_sample_size_per_arm": "power", "sample_size_per_arm": "power",
    "area_under_uplift_curve": "qini", "qini_coefficient": "qini", "qini_curve": "qini", "uplift_by_decile": "qini",
    "CampaignReadout": "readout",
    "TLearner": "uplift", "TransformedOutcomeLearner": "uplift", "UpliftModel": "uplift", "XLearner": "uplift",
    "WeightedComparison": "weighting",
}


def __getattr__(name):
    if name in _HOME:
        return getattr(importlib.import_module(f".{_HOME[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


__all__ = [
    "analyse_campaign", "analyse_panel", "list_targeted_promotions", "run_campaigns", "write_campaign",
    "write_campaigns", "CampaignReadout", "HoldoutComparison", "RandomisationCheck", "UpliftModel", "TLearner",
    "XLearner", "TransformedOutcomeLearner", "WeightedComparison", "covariate_balance", "sample_ratio_test",
    "newcombe_interval", "wilson_interval", "qini_curve", "qini_coefficient", "area_under_uplift_curve",
    "uplift_by_decile", "sample_size_per_arm", "minimum_detectable_effect", "minimum_detectable_rate_lift",
    "rate_sample_size_per_arm", "holdout_size_needed",
]
