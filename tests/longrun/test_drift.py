"""The drift classifier's pieces against scikit-learn (a general-purpose reference library)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import roc_auc_score

from toolkit.errors import AnalysisError
from toolkit.longrun.drift import QuarterClassifier, _pairs, weighted_auc


def test_weighted_auc_matches_scikit_learn_with_ties_and_weights():
    rng = np.random.default_rng(5)
    label = rng.integers(0, 2, 500)
    scores = np.round(rng.random(500) + 0.3 * label, 1)  # rounded: many ties
    weight = rng.integers(0, 4, 500)
    assert weighted_auc(label, scores) == pytest.approx(roc_auc_score(label, scores), abs=1e-12)
    assert weighted_auc(label, scores, weight) == pytest.approx(roc_auc_score(label, scores, sample_weight=weight),
                                                                abs=1e-12)


def test_classifier_tells_shifted_groups_apart_and_names_the_feature():
    """A shift planted in one feature is found, and that feature carries the importance (common practice, no source)."""
    rng = np.random.default_rng(2)
    n = 600
    label = np.r_[np.zeros(n), np.ones(n)].astype(int)
    X = pd.DataFrame({"orders": rng.poisson(2, 2 * n).astype(float),
                      "deal_share": np.clip(rng.normal(0.2 + 0.15 * label, 0.1), 0, 1)})
    fit = QuarterClassifier(folds=3, bootstrap_rounds=100, permutation_repeats=2, seed=1).fit(
        X, label, groups=np.arange(2 * n))
    low, high = fit.conf_int()
    assert low > 0.7 and fit.auc_ < high
    assert fit.importances_.iloc[0]["feature"] == "deal_share"


def test_classifier_interval_includes_half_without_a_shift():
    rng = np.random.default_rng(3)
    X = pd.DataFrame({"orders": rng.poisson(2, 800).astype(float), "basket": rng.gamma(2, 20, 800)})
    label = np.r_[np.zeros(400), np.ones(400)].astype(int)
    fit = QuarterClassifier(folds=3, bootstrap_rounds=100, permutation_repeats=0, seed=1).fit(
        X, label, groups=np.arange(800))
    low, high = fit.conf_int()
    assert low <= 0.5 <= high


def test_too_few_rows_for_the_folds_is_refused():
    with pytest.raises(AnalysisError, match="fewer than the 5 folds"):
        QuarterClassifier().fit(pd.DataFrame({"orders": [1.0, 2.0, 3.0]}), [0, 0, 1], groups=[1, 2, 3])


def test_pairs_are_year_over_year_where_the_data_reaches_back_then_adjacent():
    quarters = ["2025Q3", "2025Q4", "2026Q1", "2026Q2", "2026Q3"]
    pairs = _pairs(quarters)
    assert pairs[0] == ("year_over_year", "2025Q3", "2026Q3")
    assert [p for p in pairs if p[0] == "adjacent"][0] == ("adjacent", "2025Q3", "2025Q4")
    assert len(pairs) == 1 + 4
    assert _pairs(quarters, adjacent=False) == [("year_over_year", "2025Q3", "2026Q3")]


def _behaviour_panel(con, order_by: str) -> None:
    """A customer_quarter_behaviour panel of 1,200 customers over 5 quarters, stored in a given row order."""
    con.execute(f"""
        CREATE OR REPLACE TABLE customer_quarter_behaviour AS
        WITH grid AS (
            SELECT c, q FROM range(1200) AS a(c), range(5) AS b(q)
            WHERE (c * 7 + q * 3) % 5 <> 0              -- not every customer buys every quarter
        )
        SELECT
            'c' || lpad(CAST(c AS VARCHAR), 5, '0') AS customer_id,
            CAST(2025 + q // 4 AS VARCHAR) || 'Q' || CAST(q % 4 + 1 AS VARCHAR) AS quarter,
            CAST(make_date(2025 + q // 4, 3 * (q % 4) + 1, 1) AS DATE) AS quarter_on,
            1 + (c * 13 + q) % 4 AS orders,
            1 + (c * 13 + q) % 3 AS purchase_days,
            1 + (c * 13 + q) % 3 AS purchase_weeks,
            (c * 17 + q * 5) % 80 AS active_span_days,
            CAST(2 + (c * 11 + q) % 6 AS BIGINT) AS lines,
            CAST(3 + (c * 5 + q) % 7 AS DOUBLE) AS quantity,
            20.0 + (c * 31 + q * 7) % 90 + 0.5 * q AS net_amount,
            25.0 + (c * 31 + q * 7) % 90 + 0.5 * q AS list_amount,
            5.0 * ((c + q) % 3) AS discount_amount,
            ((c + q) % 3) * (1 + (c * 13 + q) % 4) // 3 AS deal_orders,
            0.1 * ((c + 2 * q) % 4) AS max_depth
        FROM grid
        ORDER BY {order_by}
    """)


_TWICE = """
import datetime as dt, sys, types
import duckdb
from toolkit.config import LongrunSettings, ReportSettings
from toolkit.longrun import drift
sys.path.insert(0, sys.argv[1])
from test_drift import _behaviour_panel
settings = types.SimpleNamespace(report=ReportSettings(), longrun=LongrunSettings(
    bootstrap_rounds=30, drift_permutation_repeats=2, drift_folds=3, drift_adjacent=False))
for run, order_by in enumerate(("customer_id, quarter_on", "md5(customer_id || quarter) DESC")):
    con = duckdb.connect()
    _behaviour_panel(con, order_by)
    tables, _ = drift.analyse(con, settings, dt.date(2026, 3, 31))
    for name, table in tables.items():
        table.to_parquet(f"{sys.argv[2]}/{name}.{run}.parquet")
    con.close()
"""


def test_drift_tables_are_the_same_on_a_second_run_and_in_any_row_order(tmp_path):
    """The first analysis in a fresh process and a second one (the panel stored in another row
    order) give identical tables, the feature ranking included: the classifier fits on one thread
    both times (the first used to fit on every core, and near-tied importances then reordered)."""
    import subprocess
    import sys
    from pathlib import Path

    subprocess.run([sys.executable, "-c", _TWICE, str(Path(__file__).parent), str(tmp_path)], check=True)
    for name in ("population_drift", "population_drift_features"):
        first = pd.read_parquet(tmp_path / f"{name}.0.parquet")
        second = pd.read_parquet(tmp_path / f"{name}.1.parquet")
        pd.testing.assert_frame_equal(first, second, check_exact=True, obj=name)
    assert len(pd.read_parquet(tmp_path / "population_drift_features.0.parquet")) > 0
