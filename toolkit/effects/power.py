"""Power of a holdout: sample sizes, minimum detectable effects, the holdout a target effect needs.

Thin, named wrappers around statsmodels' power classes (``TTestIndPower`` for means in standard
deviation units, ``NormalIndPower`` with Cohen's h for rates), so that the numbers a readout shows
come from one general-purpose reference implementation.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize
from statsmodels.stats.power import NormalIndPower, TTestIndPower
from statsmodels.stats.proportion import proportion_effectsize


def sample_size_per_arm(effect_size: float, *, alpha: float = 0.05, power: float = 0.8,
                        ratio: float = 1.0) -> float:
    """Customers needed in the first arm to detect a standardised effect (Cohen's d) by a two-sided t test.

    The second arm has ``ratio`` times as many. Returned unrounded (round up to plan).
    """
    return float(TTestIndPower().solve_power(effect_size=abs(effect_size), alpha=alpha, power=power,
                                             ratio=ratio, alternative="two-sided"))


def rate_sample_size_per_arm(*, holdout_rate: float, target_lift: float, alpha: float = 0.05,
                             power: float = 0.8) -> float:
    """Customers per arm (equal split) to detect a rise of a buying rate by ``target_lift`` (Cohen's h)."""
    if not np.isfinite(target_lift) or target_lift == 0 or not 0 <= holdout_rate < 1:
        return math.nan
    p1 = min(max(holdout_rate + target_lift, 1e-9), 1 - 1e-9)
    h = abs(float(proportion_effectsize(p1, holdout_rate)))
    if h == 0:
        return math.nan
    return float(NormalIndPower().solve_power(effect_size=h, alpha=alpha, power=power, alternative="two-sided"))


def minimum_detectable_effect(*, n_treated: int, n_holdout: int, outcome_sd: float, alpha: float = 0.05,
                              power: float = 0.8) -> float:
    """Smallest absolute lift in a mean the arms detect with the given power (two-sided t test)."""
    if n_treated < 2 or n_holdout < 2 or not np.isfinite(outcome_sd) or outcome_sd <= 0:
        return math.nan
    d = TTestIndPower().solve_power(effect_size=None, nobs1=n_holdout, ratio=n_treated / n_holdout,
                                    alpha=alpha, power=power, alternative="two-sided")
    return float(d) * outcome_sd


def minimum_detectable_rate_lift(*, n_treated: int, n_holdout: int, holdout_rate: float,
                                 alpha: float = 0.05, power: float = 0.8) -> float:
    """Smallest rise of a buying rate above ``holdout_rate`` the arms detect (Cohen's h, normal test)."""
    if n_treated < 2 or n_holdout < 2 or not 0 <= holdout_rate < 1:
        return math.nan
    h = NormalIndPower().solve_power(effect_size=None, nobs1=n_holdout, ratio=n_treated / n_holdout,
                                     alpha=alpha, power=power, alternative="two-sided")
    # h = 2 asin(sqrt(p1)) - 2 asin(sqrt(p0))  ->  p1 = sin(asin(sqrt(p0)) + h / 2)^2
    angle = math.asin(math.sqrt(holdout_rate)) + float(h) / 2
    if angle >= math.pi / 2:
        return 1.0 - holdout_rate
    return math.sin(angle) ** 2 - holdout_rate


def holdout_size_needed(*, target_lift: float, n_treated: int, holdout_rate: float | None = None,
                        outcome_sd: float | None = None, alpha: float = 0.05, power: float = 0.8) -> float:
    """Holdout customers needed beside ``n_treated`` treated ones to detect ``target_lift``.

    Give ``holdout_rate`` for a buying rate (the lift is in rate points; Cohen's h) or
    ``outcome_sd`` for a mean (the lift is in the outcome's units). Returns ``inf`` when even an
    unlimited holdout would not reach the power with this many treated customers, NaN when the
    target is not a positive number.
    """
    if not np.isfinite(target_lift) or target_lift == 0 or n_treated < 2:
        return math.nan
    if holdout_rate is not None:
        p1 = min(max(holdout_rate + target_lift, 1e-9), 1 - 1e-9)
        effect = abs(float(proportion_effectsize(p1, holdout_rate)))
        engine = NormalIndPower()
    elif outcome_sd is not None and np.isfinite(outcome_sd) and outcome_sd > 0:
        effect = abs(target_lift) / outcome_sd
        engine = TTestIndPower()
    else:
        return math.nan
    if effect == 0:
        return math.nan

    def gap(n_holdout: float) -> float:
        return engine.power(effect_size=effect, nobs1=n_holdout, ratio=n_treated / n_holdout, alpha=alpha,
                            alternative="two-sided") - power

    high = 1e9
    if gap(high) < 0:
        return math.inf
    low = 2.0
    if gap(low) >= 0:
        return low
    return float(optimize.brentq(gap, low, high, xtol=0.5))
