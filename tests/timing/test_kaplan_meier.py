"""Kaplan-Meier, log-rank, medians and RMST of the days to the next order (toolkit.timing.kaplan_meier)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from lifelines import KaplanMeierFitter
from lifelines.datasets import load_leukemia
from lifelines.statistics import logrank_test
from lifelines.utils import restricted_mean_survival_time

from toolkit.errors import AnalysisError, StatisticalWarning
from toolkit.timing.kaplan_meier import (
    TimeToNextOrder,
    km_from_counts,
    logrank_from_counts,
    restricted_mean,
)

REFERENCE = Path(__file__).resolve().parents[1] / "reference" / "timing"


@pytest.fixture(scope="module")
def leukemia_counts() -> pd.DataFrame:
    data = load_leukemia()
    # Check the coding before using it: the 6-MP (treated) group is the one with censored
    # remissions (Freireich et al. 1963: 9 relapses of 21 on 6-MP, 21 of 21 on placebo).
    by_rx = data.groupby("Rx")["status"].agg(["size", "sum"])
    assert by_rx.loc[0].tolist() == [21, 9] and by_rx.loc[1].tolist() == [21, 21]
    return pd.DataFrame({
        "group": np.where(data["Rx"] == 0, "treated", "placebo"),
        "days": data["t"], "is_event": data["status"] == 1, "gaps": 1,
    })


def fit_leukemia(counts, **kwargs) -> TimeToNextOrder:
    options = dict(horizon_days=35, bootstrap_rounds=0, min_events=5, small_cell=1) | kwargs
    return TimeToNextOrder(**options).fit(counts, groups=("treated", "placebo"))


def test_km_matches_kleinbaum_klein_remission_table(leukemia_counts):
    # Source: Kleinbaum & Klein, Survival Analysis, ch. 2, KM table of the 6-MP group
    # (tests/reference/timing/leukemia_km.csv); printed to 3 decimals.
    expected = pd.read_csv(REFERENCE / "leukemia_km.csv")
    curve = fit_leukemia(leukemia_counts).curves_.query("group == 'treated'").set_index("days")["survival"]
    np.testing.assert_allclose(curve.loc[expected["weeks"].astype(float)].to_numpy(), expected["survival"], atol=5e-4)


def test_medians_match_kleinbaum_klein(leukemia_counts):
    # Source: Kleinbaum & Klein, ch. 2: median remission 23 weeks (6-MP) and 8 weeks (placebo).
    groups = fit_leukemia(leukemia_counts).groups_.set_index("group")
    assert groups.loc["treated", "median_days"] == 23
    assert groups.loc["placebo", "median_days"] == 8


def test_logrank_matches_kleinbaum_klein(leukemia_counts):
    # Source: Kleinbaum & Klein, ch. 2: log-rank chi-square 16.79 (1 df) for 6-MP vs placebo.
    fit = fit_leukemia(leukemia_counts)
    assert fit.logrank_["test_statistic"] == pytest.approx(16.79, abs=0.005)
    assert fit.logrank_["p_value"] < 1e-4


def test_count_path_matches_lifelines_path(leukemia_counts):
    """The fast path (counts only) gives lifelines' curve, log-rank, medians and RMST (general-purpose
    reference library: lifelines)."""
    slow = fit_leukemia(leukemia_counts)
    fast = fit_leukemia(leukemia_counts, curves=False)
    assert fast.logrank_["test_statistic"] == pytest.approx(slow.logrank_["test_statistic"], rel=1e-9)
    pd.testing.assert_series_equal(fast.groups_["median_days"], slow.groups_["median_days"])
    np.testing.assert_allclose(fast.groups_["rmst_days"], slow.groups_["rmst_days"], rtol=1e-12)
    assert fast.curves_.empty


def test_logrank_from_counts_matches_lifelines_with_ties():
    """Grouped (tied) data: our count-based log-rank equals lifelines' logrank_test (reference library)."""
    rng = np.random.default_rng(3)
    a = rng.integers(1, 15, 300)
    b = rng.integers(1, 12, 250)
    ea, eb = rng.random(300) < 0.8, rng.random(250) < 0.7
    ref = logrank_test(a, b, ea, eb)

    def counts(days, events):
        frame = pd.DataFrame({"d": days, "e": events}).groupby("d")["e"].agg(["sum", "size"])
        return frame.index.to_numpy(float), frame["sum"].to_numpy(float), frame["size"].to_numpy(float)

    statistic, p_value = logrank_from_counts(*counts(a, ea), *counts(b, eb))
    assert statistic == pytest.approx(ref.test_statistic, rel=1e-9)
    assert p_value == pytest.approx(ref.p_value, rel=1e-6)


def test_restricted_mean_matches_lifelines_rmst(leukemia_counts):
    """RMST to 20 weeks of the placebo group equals lifelines' restricted_mean_survival_time."""
    placebo = leukemia_counts[leukemia_counts["group"] == "placebo"]
    kmf = KaplanMeierFitter().fit(placebo["days"], placebo["is_event"])
    days, survival, _ = km_from_counts(*TimeToNextOrder._by_day(placebo, "days", "is_event", "gaps"))
    assert restricted_mean(days, survival, 20) == pytest.approx(restricted_mean_survival_time(kmf, t=20), rel=1e-9)


def test_rmst_of_a_small_example_worked_by_hand():
    """Common practice, no source: the RMST is the area under the KM step curve.

    Five gaps: events at days 2, 4, 4 and 8, one censored at day 6; horizon 10 days.
      day 2: 5 at risk, 1 event  -> S = 4/5 = 0.8
      day 4: 4 at risk, 2 events -> S = 0.8 x 2/4 = 0.4
      day 6: 2 at risk, censored -> S stays 0.4
      day 8: 1 at risk, 1 event  -> S = 0
    Area to day 10: 2 x 1 + 2 x 0.8 + 4 x 0.4 + 2 x 0 = 2 + 1.6 + 1.6 = 5.2 days.
    To day 5 only: 2 x 1 + 2 x 0.8 + 1 x 0.4 = 4.0 days.
    """
    days = np.array([2.0, 4.0, 6.0, 8.0])
    _, survival, at_risk = km_from_counts(days, np.array([1.0, 2.0, 0.0, 1.0]), np.array([1.0, 2.0, 1.0, 1.0]))
    np.testing.assert_allclose(survival, [0.8, 0.4, 0.4, 0.0])
    np.testing.assert_allclose(at_risk, [5, 4, 2, 1])
    assert restricted_mean(days, survival, 10) == pytest.approx(5.2)
    assert restricted_mean(days, survival, 5) == pytest.approx(4.0)


def _gap_counts(seed=11, customers=400):
    """Gaps of simulated customers: deal gaps 20% longer, each customer in one of 32 blocks."""
    rng = np.random.default_rng(seed)
    rows = []
    for customer in range(customers):
        rate = rng.gamma(2.0, 1 / 60)  # customers differ: gaps cluster within a customer
        for _ in range(rng.integers(3, 12)):
            deal = rng.random() < 0.4
            gap = int(np.ceil(rng.exponential(1 / rate) * (1.2 if deal else 1.0)))
            observed = gap <= 120
            rows.append((customer % 32, "deal" if deal else "full_price", min(gap, 120), observed))
    frame = pd.DataFrame(rows, columns=["block", "group", "days", "is_event"])
    return frame.groupby(["block", "group", "days", "is_event"], as_index=False).size().rename(columns={"size": "gaps"})


def test_rmst_difference_has_a_seeded_block_bootstrap_interval():
    counts = _gap_counts()
    first = TimeToNextOrder(horizon_days=90, bootstrap_rounds=40, seed=5).fit(
        counts, groups=("deal", "full_price"), block_col="block")
    again = TimeToNextOrder(horizon_days=90, bootstrap_rounds=40, seed=5).fit(
        counts, groups=("deal", "full_price"), block_col="block")
    ci = first.conf_int(0.05).loc["rmst_difference"]
    assert ci["ci_low"] < first.params_["rmst_difference"] < ci["ci_high"]
    assert first.params_["rmst_difference"] > 0  # deal gaps were simulated longer
    np.testing.assert_array_equal(first.bootstrap_draws_, again.bootstrap_draws_)
    assert "customer-block bootstrap" in first.to_html()


def test_bootstrap_without_blocks_warns_that_gaps_are_treated_as_independent():
    counts = _gap_counts().groupby(["group", "days", "is_event"], as_index=False)["gaps"].sum()
    with pytest.warns(StatisticalWarning, match="treats every gap as independent"):
        TimeToNextOrder(bootstrap_rounds=5).fit(counts, groups=("deal", "full_price"))


def test_too_few_events_names_the_group_and_the_minimum():
    counts = pd.DataFrame({"group": ["deal"] * 3 + ["full_price"] * 3, "days": [5, 10, 20] * 2,
                           "is_event": [True] * 6, "gaps": [2, 2, 2, 20, 20, 20]})
    with pytest.raises(AnalysisError, match=r"'deal' has 6; at least 10 per group are needed"):
        TimeToNextOrder(bootstrap_rounds=0).fit(counts, groups=("deal", "full_price"))


def test_small_cells_are_cut_from_the_curves(leukemia_counts):
    fit = TimeToNextOrder(horizon_days=35, bootstrap_rounds=0, min_events=5, small_cell=10).fit(
        leukemia_counts, groups=("treated", "placebo"))
    assert fit.curves_["at_risk"].min() >= 10
