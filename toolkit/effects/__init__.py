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

from .api import analyse_campaign, analyse_panel, list_targeted_promotions, run_campaigns, write_campaign, write_campaigns
from .balance import RandomisationCheck, covariate_balance, sample_ratio_test
from .holdout import HoldoutComparison, newcombe_interval, wilson_interval
from .power import (
    holdout_size_needed,
    minimum_detectable_effect,
    minimum_detectable_rate_lift,
    rate_sample_size_per_arm,
    sample_size_per_arm,
)
from .qini import area_under_uplift_curve, qini_coefficient, qini_curve, uplift_by_decile
from .readout import CampaignReadout
from .uplift import TLearner, TransformedOutcomeLearner, UpliftModel, XLearner
from .weighting import WeightedComparison

__all__ = [
    "analyse_campaign", "analyse_panel", "list_targeted_promotions", "run_campaigns", "write_campaign",
    "write_campaigns", "CampaignReadout", "HoldoutComparison", "RandomisationCheck", "UpliftModel", "TLearner",
    "XLearner", "TransformedOutcomeLearner", "WeightedComparison", "covariate_balance", "sample_ratio_test",
    "newcombe_interval", "wilson_interval", "qini_curve", "qini_coefficient", "area_under_uplift_curve",
    "uplift_by_decile", "sample_size_per_arm", "minimum_detectable_effect", "minimum_detectable_rate_lift",
    "rate_sample_size_per_arm", "holdout_size_needed",
]
