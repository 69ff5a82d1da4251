"""Long-run expectation effects: is the customer base learning to buy only on a deal?

Public names (imported on first use, so that `liftlag check` or `build` does not load
scikit-learn and statsmodels):

- :func:`analyse_longrun` (returns a :class:`LongrunReadout` whose ``tables`` are the results),
  :func:`write_longrun` (one Parquet file per table, with the manifest) (``api``)
- estimators: :class:`DependenceByQuarter` (deal shares per quarter, customer-block bootstrap),
  :class:`FixedEffectsRegression` (linear panel regression with absorbed customer and week
  effects, customer-clustered errors), :class:`QuarterClassifier` (population drift: can a
  classifier tell two quarters' customers apart?)
"""

import importlib

_HOME = {
    "LongrunReadout": "api", "analyse_longrun": "api", "write_longrun": "api", "SECTIONS": "api",
    "DependenceByQuarter": "dependence", "FixedEffectsRegression": "fixed_effects", "QuarterClassifier": "drift",
}


def __getattr__(name):
    if name in _HOME:
        return getattr(importlib.import_module(f".{_HOME[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


__all__ = sorted(_HOME)
