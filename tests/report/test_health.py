"""The verdict's rule and the indicators' changes, on hand-made tables (common practice, no source:
the arithmetic is worked out in each test)."""

from __future__ import annotations

import dataclasses
import math

import pandas as pd
import pytest

from toolkit.config import ReportSettings, Settings
from toolkit.report.quarter import health
from toolkit.report.quarter.derive import ECONOMICS_COLUMNS, TAIL_COLUMNS


def settings(**report):
    return Settings(config_path=__import__("pathlib").Path("x.toml"), tables={}, report=ReportSettings(**report))


def dependence(p50_now=(0.40, 0.38, 0.42), p50_before=(0.30, 0.28, 0.32)):
    rows = []
    for q, (v, lo, hi) in (("2026Q1", p50_before), ("2026Q2", p50_now)):
        rows.append({"quarter": q, "customers": 500, "dependence_index_p50": v, "dependence_index_p50_ci_low": lo,
                     "dependence_index_p50_ci_high": hi, "dependence_index_p90": 0.8, "dependence_index_p90_ci_low": 0.7,
                     "dependence_index_p90_ci_high": 0.9, "full_price_share": 0.6, "full_price_share_ci_low": 0.55,
                     "full_price_share_ci_high": 0.65, "deal_only_share": 0.1, "deal_only_share_ci_low": 0.08,
                     "deal_only_share_ci_high": 0.12})
    return pd.DataFrame(rows)


def economics(estimate, low, high):
    return pd.DataFrame([{"item": "net_incremental_margin", "estimate": estimate, "ci_low": low, "ci_high": high,
                          "ci_level": 0.95, "campaigns": 1, "customers": 100, "unit": "EUR", "method": "", "note": ""}],
                        columns=ECONOMICS_COLUMNS)


NO_TAILS = pd.DataFrame(columns=TAIL_COLUMNS).astype({"is_against_average": bool})


def test_dependence_change_and_its_interval_add_half_widths_in_quadrature():
    rows = health.dependence_indicators(dependence(), "2026Q2", "2026Q1", None, 0.95)
    p50 = next(r for r in rows if r["indicator"] == "dependence_index_p50")
    # change 0.40 - 0.30 = 0.10; half-widths 0.02 and 0.02 -> sqrt(0.0008) = 0.028284
    assert p50["change"] == pytest.approx(0.10)
    assert p50["change_ci_low"] == pytest.approx(0.10 - math.sqrt(0.0008))
    assert p50["change_ci_high"] == pytest.approx(0.10 + math.sqrt(0.0008))
    assert p50["assessment"] == "adverse"  # up is harmful, the interval excludes zero
    p90 = next(r for r in rows if r["indicator"] == "dependence_index_p90")
    assert p90["assessment"] == "within noise"


def test_a_change_whose_interval_includes_zero_is_within_noise():
    rows = health.dependence_indicators(dependence(p50_now=(0.32, 0.28, 0.36)), "2026Q2", "2026Q1", None, 0.95)
    assert next(r for r in rows if r["indicator"] == "dependence_index_p50")["assessment"] == "within noise"


def test_missing_tables_give_rows_that_say_not_available_with_the_reason():
    rows = health.dependence_indicators(None, "2026Q2", "2026Q1", "not part of this build", 0.95)
    assert {r["assessment"] for r in rows} == {"not available"}
    assert all("not part of this build" in r["sentence"] for r in rows)


def _call(rows, margin, tails=NO_TAILS, **report):
    table = health.indicators_table(rows)
    return health.verdict(table, margin, tails, settings(**report), "2026Q2").iloc[0]


def test_rule_act_watch_healthy():
    adverse = health.dependence_indicators(dependence(), "2026Q2", "2026Q1", None, 0.95)
    calm = health.dependence_indicators(dependence(p50_now=(0.31, 0.29, 0.33)), "2026Q2", "2026Q1", None, 0.95)
    positive = economics(1000.0, 200.0, 1800.0)
    assert _call(calm, positive)["call"] == "healthy"
    assert _call(adverse, positive)["call"] == "watch"                      # one adverse indicator
    assert _call(adverse, positive, act_min_adverse=1)["call"] == "act"     # the threshold is the config's
    assert _call(calm, economics(-900.0, -1500.0, -100.0))["call"] == "act"  # margin wholly below zero
    assert _call(calm, economics(-900.0, -1500.0, -100.0), act_on_negative_margin=False)["call"] == "watch"
    assert _call(calm, economics(100.0, -500.0, 700.0))["call"] == "watch"  # margin could be zero


def test_a_group_against_the_average_makes_the_call_watch_unless_switched_off():
    calm = health.dependence_indicators(dependence(p50_now=(0.31, 0.29, 0.33)), "2026Q2", "2026Q1", None, 0.95)
    tails = pd.DataFrame([{c: None for c in TAIL_COLUMNS} | {"is_against_average": True}])
    positive = economics(1000.0, 200.0, 1800.0)
    assert _call(calm, positive, tails)["call"] == "watch"
    assert _call(calm, positive, tails, watch_on_groups_against=False)["call"] == "healthy"


def test_hazard_ratio_level_without_quarterly_series_can_make_watch_but_never_act():
    timing = pd.DataFrame([
        {"effect": "post_promotion_dip", "scope": "all", "estimate": 0.5, "ci_low": 0.45, "ci_high": 0.56,
         "model": "discrete_cloglog", "n_customers": 900, "n_events": 10, "ci_level": 0.95, "note": ""},
        {"effect": "anticipation", "scope": "all", "estimate": 0.6, "ci_low": 0.5, "ci_high": 0.7,
         "model": "discrete_cloglog", "n_customers": 900, "n_events": 10, "ci_level": 0.95, "note": ""}])
    rows = health.timing_indicators(timing, "2026Q2", "2026Q1", None, quarter_ids=[], previous_ids=[], level=0.95,
                                    model="discrete_cloglog")
    assert {r["assessment"] for r in rows} == {"harmful level"}
    verdict = _call(rows, economics(1000.0, 200.0, 1800.0), act_min_adverse=1)
    assert verdict["call"] == "watch" and verdict["harmful_levels"] == 2


def test_per_campaign_hazard_ratios_are_pooled_and_compared_with_the_previous_quarter():
    """Inverse-variance pooling on the log scale; two equal-precision campaigns pool to their geometric mean."""
    z = 1.959963984540054
    def row(scope, hr, se):
        return {"effect": "anticipation", "scope": scope, "estimate": hr, "ci_low": hr * math.exp(-z * se),
                "ci_high": hr * math.exp(z * se), "model": "discrete_cloglog", "n_customers": 100, "n_events": 5,
                "ci_level": 0.95, "note": ""}
    timing = pd.DataFrame([row("A", 0.5, 0.1), row("B", 0.8, 0.1), row("C", 1.0, 0.1)])
    rows = health.timing_indicators(timing, "2026Q2", "2026Q1", None, quarter_ids=["A", "B"], previous_ids=["C"],
                                    level=0.95, model="discrete_cloglog")
    anticipation = next(r for r in rows if r["indicator"] == "anticipation")
    assert anticipation["value"] == pytest.approx(math.sqrt(0.5 * 0.8))
    assert anticipation["previous_value"] == pytest.approx(1.0)
    assert anticipation["change"] == pytest.approx(math.sqrt(0.4))
    assert anticipation["assessment"] == "adverse"  # anticipation fell: customers hold off more
