"""IPW and doubly-robust weighting: the NSW experiment vs the CPS comparison group (Dehejia & Wahba 1999)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from causaldata import cps_mixtape, nsw_mixtape

from toolkit.errors import AnalysisError
from toolkit.effects.weighting import NOT_RANDOMISED, WeightedComparison

REFERENCE = json.loads((Path(__file__).parents[1] / "reference" / "effects" / "published_values.json").read_text())
# The Dehejia-Wahba propensity specification (from memory): age, age^2, age^3, education, education^2,
# married, no degree, black, hispanic, 1974 and 1975 earnings, zero-earnings flags, education x re74.
FEATURES = ["age", "age2", "age3", "educ", "educ2", "marr", "nodegree", "black", "hisp", "re74", "re75",
            "u74", "u75", "educ_re74"]


def _prepare(frame: pd.DataFrame) -> pd.DataFrame:
    frame = frame.astype({"age": float, "educ": float, "re74": float, "re75": float, "re78": float}).reset_index(drop=True)
    return frame.assign(age2=frame["age"] ** 2, age3=frame["age"] ** 3, educ2=frame["educ"] ** 2,
                        u74=(frame["re74"] == 0).astype(float), u75=(frame["re75"] == 0).astype(float),
                        educ_re74=frame["educ"] * frame["re74"], treated=frame["treat"].astype(bool))


@pytest.fixture(scope="module")
def nsw_cps() -> pd.DataFrame:
    nsw = nsw_mixtape.load_pandas().data
    return _prepare(pd.concat([nsw[nsw["treat"] == 1], cps_mixtape.load_pandas().data]))


@pytest.fixture(scope="module")
def att(nsw_cps) -> WeightedComparison:
    return WeightedComparison(estimand="att", trim=0.01).fit(nsw_cps, outcome_col="re78", treatment_col="treated",
                                                             feature_cols=FEATURES)


def test_unadjusted_cps_comparison_reproduces_dehejia_wahba_table3(nsw_cps):
    """Dehejia & Wahba (1999), Table 3, CPS-1 row: unadjusted difference -8,498 (from memory)."""
    t = nsw_cps.loc[nsw_cps["treated"], "re78"].mean()
    c = nsw_cps.loc[~nsw_cps["treated"], "re78"].mean()
    assert t - c == pytest.approx(REFERENCE["nsw_vs_cps"]["unadjusted_difference_re78"], abs=1.0)


def test_weighting_recovers_the_experimental_benchmark(att):
    """Weighted on the Dehejia-Wahba features, the CPS comparison gives back the experiment's 1,794
    (Dehejia & Wahba 1999 report propensity-score estimates of about 1,600-1,800; from memory)."""
    benchmark = REFERENCE["nsw_vs_cps"]["experimental_benchmark_re78"]
    summary = att.summary
    for method in ("ipw", "doubly_robust"):
        row = summary.loc[method]
        assert row["lift_ci_low"] < benchmark < row["lift_ci_high"], method
        assert abs(row["lift"] - benchmark) < 700, method
        assert row["is_randomised"] == False  # noqa: E712
        assert row["note"] == NOT_RANDOMISED
    conf = att.conf_int(alpha=0.1)
    assert (conf["lift_ci_high"] - conf["lift_ci_low"] < summary["lift_ci_high"] - summary["lift_ci_low"]).all()


def test_overlap_diagnostics_show_how_few_cps_men_resemble_the_trainees(att):
    overlap = att.overlap_.set_index("arm")
    assert overlap.loc["comparison", "propensity_median"] < 0.01   # most CPS men look nothing like the trainees
    assert overlap.loc["treated", "propensity_median"] > 0.2
    assert overlap.loc["comparison", "share_trimmed"] > 0.8         # trimmed below 0.01
    assert overlap.loc["treated", "rows_trimmed"] >= 1               # a few trainees have no CPS look-alike
    assert overlap.loc["comparison", "effective_sample_size"] < 200  # 1,298 kept rows weigh like ~100
    balance = att.balance_.set_index("feature")
    assert (balance["smd_before"].abs() > 0.5).sum() >= 10
    assert (balance["smd_after"].abs() < 0.15).all()
    assert "NOT RANDOMISED" in att.to_html()


def test_on_the_randomised_nsw_sample_weighting_agrees_with_the_difference_in_means():
    """With randomised arms the propensity is nearly flat, so IPW and AIPW stay within half a standard
    error of the plain difference (1,794; common practice, no source). Main effects only: on 445 rows
    the 14-term specification fits chance imbalances and moves the ATE to about 1,450."""
    nsw = _prepare(nsw_mixtape.load_pandas().data)
    main_effects = ["age", "educ", "black", "hisp", "marr", "nodegree", "re74", "re75"]
    for estimand in ("ate", "att"):
        fit = WeightedComparison(estimand=estimand, trim=0.0).fit(nsw, outcome_col="re78", treatment_col="treated",
                                                                  feature_cols=main_effects)
        for method in ("ipw", "doubly_robust"):
            row = fit.summary.loc[method]
            assert abs(row["lift"] - 1794.34) < 0.5 * row["lift_se"], (estimand, method)
        assert fit.overlap_["propensity_min"].min() > 0.1 and fit.overlap_["propensity_max"].max() < 0.8
        assert fit.overlap_["share_trimmed"].sum() == 0


def test_doubly_robust_removes_known_confounding_in_a_simulation():
    """Seeded simulation (common practice, no source): targeting depends on past spend, the true effect is 2.0."""
    rng = np.random.default_rng(3)
    n = 20000
    spend = rng.gamma(2.0, 1.0, n)
    visits = rng.poisson(2.0, n).astype(float)
    treated = rng.random(n) < 1 / (1 + np.exp(-(-1.5 + 0.8 * spend)))
    y = 3.0 * spend + 0.5 * visits + 2.0 * treated + rng.normal(0, 1, n)
    frame = pd.DataFrame({"spend": spend, "visits": visits, "treated": treated, "y": y})
    naive = y[treated].mean() - y[~treated].mean()
    assert naive > 4.0
    for estimand in ("att", "ate"):
        fit = WeightedComparison(estimand=estimand).fit(frame, outcome_col="y", treatment_col="treated",
                                                        feature_cols=["spend", "visits"])
        dr = fit.summary.loc["doubly_robust"]
        assert dr["lift_ci_low"] < 2.0 < dr["lift_ci_high"], estimand
        assert fit.summary.loc["ipw", "lift"] == pytest.approx(2.0, abs=0.4)


def test_weighting_rejects_bad_input(nsw_cps):
    with pytest.raises(AnalysisError, match="both treated and comparison"):
        WeightedComparison().fit(nsw_cps[nsw_cps["treated"]], outcome_col="re78", treatment_col="treated",
                                 feature_cols=FEATURES)
    with pytest.raises(AnalysisError, match="missing values"):
        broken = nsw_cps.copy()
        broken.loc[0, "age"] = np.nan
        WeightedComparison().fit(broken, outcome_col="re78", treatment_col="treated", feature_cols=FEATURES)
    with pytest.raises(ValueError, match="estimand"):
        WeightedComparison(estimand="atc").fit(nsw_cps, outcome_col="re78", treatment_col="treated", feature_cols=FEATURES)
    with pytest.raises(AnalysisError, match="not fitted"):
        WeightedComparison().summary
