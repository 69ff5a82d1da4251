"""Purchase timing: acceleration, the post-promotion dip, anticipation, and the gap after a deal.

Public names:

- :func:`analyse_timing` (returns a :class:`TimingReadout` whose ``tables`` are the results) and
  :func:`write_timing` (one Parquet file per table) (``api``)
- estimators: :class:`TimeToNextOrder` (Kaplan-Meier, log-rank, RMST), :class:`TimeVaryingCox`
  (Cox with time-varying covariates, customer bootstrap), :class:`DiscreteTimeHazard` (cloglog on
  aggregated cells, customer-block bootstrap), :class:`CampaignCadence` (expected campaign starts),
  :class:`ArmRateRatio` (treatment vs holdout rate ratios by assignment, per campaign and pooled)
"""

import importlib

# Names are imported on first use, so that `liftlag check` or `build` does not pay for loading
# lifelines and statsmodels.
_HOME = {
    "TimingReadout": "api", "analyse_timing": "api", "write_timing": "api",
    "CampaignCadence": "schedule", "ArmRateRatio": "randomised",
    "DiscreteTimeHazard": "discrete", "TimeToNextOrder": "kaplan_meier", "TimeVaryingCox": "cox",
}


def __getattr__(name):
    if name in _HOME:
        return getattr(importlib.import_module(f".{_HOME[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


__all__ = ["ArmRateRatio", "CampaignCadence", "DiscreteTimeHazard", "TimeToNextOrder", "TimeVaryingCox", "TimingReadout",
           "analyse_timing", "write_timing"]
