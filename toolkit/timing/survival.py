"""The survival models of the timing analysis, in one place.

* :class:`~toolkit.timing.kaplan_meier.TimeToNextOrder` — Kaplan-Meier curves of the days to the
  next order, log-rank test, medians and restricted mean (RMST) differences.
* :class:`~toolkit.timing.cox.TimeVaryingCox` — Cox model with time-varying covariates on
  start-stop spells, customer bootstrap intervals.
* :class:`~toolkit.timing.discrete.DiscreteTimeHazard` — complementary log-log model on aggregated
  person-period cells, customer-block bootstrap intervals (the path that scales).
* :mod:`~toolkit.timing.ph_check` — proportional-hazards checks.

Each lives in its own module; this one only gathers them.
"""

from __future__ import annotations

from .cox import TimeVaryingCox
from .discrete import DiscreteTimeHazard
from .kaplan_meier import TimeToNextOrder
from .ph_check import late_interaction_check, time_fixed_check

__all__ = ["DiscreteTimeHazard", "TimeToNextOrder", "TimeVaryingCox", "late_interaction_check", "time_fixed_check"]
