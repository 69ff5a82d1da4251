"""The absorbed fixed-effects regression against statsmodels' OLS with one dummy per group.

Reference: statsmodels (a general-purpose reference library), OLS with customer (and week)
dummies and ``cov_type="cluster"`` grouped by customer. The slopes must agree (Frisch-Waugh-Lovell)
and so must the cluster-robust errors, since the absorbed levels are counted as parameters.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from toolkit.errors import AnalysisError
from toolkit.longrun.fixed_effects import FixedEffectsRegression


def _panel(seed=11, customers=40, weeks=12, unbalanced=True):
    rng = np.random.default_rng(seed)
    rows = []
    for c in range(customers):
        start = rng.integers(0, 4) if unbalanced else 0
        level = rng.normal()
        for w in range(start, weeks):
            coupon = int(rng.random() < 0.3)
            before = int(rng.integers(0, 6))
            y = level + 0.05 * w + 0.3 * coupon - 0.02 * before + 0.04 * coupon * before + rng.normal(scale=0.5)
            rows.append((c, w, y, coupon, before, coupon * before))
    return pd.DataFrame(rows, columns=["customer", "week", "y", "coupon", "before", "coupon_x_before"])


TERMS = ["coupon", "before", "coupon_x_before"]


def _dummies_fit(panel, weeks=True):
    parts = [panel[TERMS].astype(float), pd.get_dummies(panel["customer"], prefix="c", dtype=float)]
    if weeks:
        parts.append(pd.get_dummies(panel["week"], prefix="w", drop_first=True, dtype=float))
    design = pd.concat(parts, axis=1)
    return sm.OLS(panel["y"], design).fit(cov_type="cluster", cov_kwds={"groups": panel["customer"]})


@pytest.mark.parametrize("weeks", [False, True], ids=["customer effects", "customer and week effects"])
def test_fixed_effects_match_statsmodels_ols_with_dummies(weeks):
    panel = _panel()
    reference = _dummies_fit(panel, weeks=weeks)
    absorb = ["customer", "week"] if weeks else ["customer"]
    fit = FixedEffectsRegression().fit(panel, outcome="y", terms=TERMS, absorb=absorb, cluster="customer")
    np.testing.assert_allclose(fit.params_.to_numpy(), reference.params[TERMS].to_numpy(), rtol=1e-7, atol=1e-9)
    np.testing.assert_allclose(fit.bse_.to_numpy(), reference.bse[TERMS].to_numpy(), rtol=1e-6)
    ci = fit.conf_int(0.1)
    np.testing.assert_allclose(ci.to_numpy(), reference.conf_int(0.1).loc[TERMS].to_numpy(), rtol=1e-6, atol=1e-9)
    assert fit.n_clusters_ == panel["customer"].nunique()


def test_summary_reports_every_term_with_its_interval():
    fit = FixedEffectsRegression().fit(_panel(), outcome="y", terms=TERMS, absorb=["customer"], cluster="customer")
    summary = fit.summary
    assert list(summary["term"]) == TERMS
    assert (summary["ci_low"] < summary["estimate"]).all() and (summary["estimate"] < summary["ci_high"]).all()
    assert "clusters" in fit.to_html()


def test_a_term_constant_within_customers_is_refused():
    panel = _panel()
    panel["trait"] = panel["customer"] % 2
    with pytest.raises(AnalysisError, match="trait.*do not vary"):
        FixedEffectsRegression().fit(panel, outcome="y", terms=["coupon", "trait"], absorb=["customer"],
                                     cluster="customer")
