"""Sections with and without their tables, and small cells, on the demo report's gathered inputs.

A stand-in long-run readout (tables of the documented shape, values made up for the layout only)
shows the long-run sections filled; the build's own inputs show them as not available.
"""

from __future__ import annotations

import copy

import pandas as pd
import pytest

from toolkit import workspace
from toolkit.report.quarter import api
from toolkit.report.quarter.render import render_report

from . import html_parse

pytestmark = pytest.mark.slow

LONGRUN = ("dependence_by_quarter", "dependence_transitions", "dependence_distribution", "responsiveness_drift",
           "population_drift", "cohort_retention", "cohort_value", "broadcast_effects", "broadcast_series")


def _render(settings, inputs):
    con = workspace.connect(settings)
    try:
        tables = api.derive_tables(con, settings, inputs)
    finally:
        con.close()
    facts = {"quarter": inputs.quarter.label, "quarter_first_day": str(inputs.quarter.first_day),
             "quarter_last_day": str(inputs.quarter.last_day), "export_first_day": "2025-01-01",
             "export_last_day": "2026-09-30", "tool_version": "test", "config": "liftlag.toml",
             "fingerprints": {"check": "c", "build": "b", "inputs": {}}, "seeds": {"campaign": 1, "timing": 2},
             "generated_at": "now", "analysis_seconds": 0, "missing": inputs.missing}
    return tables, render_report(tables, inputs.missing, inputs.notes, settings, facts)


def _stand_in_longrun():
    dep = pd.DataFrame({"quarter": ["2026Q2", "2026Q3"], "customers": [800, 820],
                        "dependence_index_mean": [0.20, 0.30], "dependence_index_mean_ci_low": [0.18, 0.28],
                        "dependence_index_mean_ci_high": [0.22, 0.32], "dependence_index_p50": [0.1, 0.2],
                        "dependence_index_p90": [0.6, 0.7], "full_price_share": [0.7, 0.6],
                        "full_price_share_ci_low": [0.68, 0.58], "full_price_share_ci_high": [0.72, 0.62],
                        "deal_only_share": [0.1, 0.1], "deal_only_share_ci_low": [0.09, 0.09],
                        "deal_only_share_ci_high": [0.11, 0.11], "ci_level": [0.95, 0.95]})
    drift = pd.DataFrame({"term": ["coupon_available_x_coupons_before", "coupons_before"], "estimate": [0.05, -0.001],
                          "ci_low": [0.01, -0.003], "ci_high": [0.09, 0.001], "n_customers": [700, 700],
                          "n_weeks": [80, 80], "method": ["fixed effects", "fixed effects"]})
    population = pd.DataFrame({"quarter_from": ["2026Q2"], "quarter_to": ["2026Q3"], "auc": [0.52],
                               "auc_ci_low": [0.49], "auc_ci_high": [0.55], "customers": [820]})
    retention = pd.DataFrame({"cohort": ["2025Q1", "2025Q2"], "quarters_since": [1, 1], "customers": [3, 400],
                              "retention": [0.33, 0.61]})
    series = pd.DataFrame({"promotion_id": ["FW-B01"] * 3, "outcome": ["orders"] * 3,
                           "day_on": pd.to_datetime(["2025-11-20", "2025-11-21", "2025-11-22"]),
                           "actual": [50.0, 90.0, 80.0], "counterfactual": [48.0, 52.0, 51.0],
                           "ci_low": [40.0, 44.0, 43.0], "ci_high": [56.0, 60.0, 59.0]})
    return {"dependence_by_quarter": dep, "responsiveness_drift": drift, "population_drift": population,
            "cohort_retention": retention, "broadcast_series": series}


def test_long_run_sections_filled_when_their_tables_exist(demo_report, quick_settings):
    inputs = copy.deepcopy(demo_report.inputs)
    for name, frame in _stand_in_longrun().items():
        inputs.tables[name] = frame
        inputs.missing.pop(name, None)
    tables, html = _render(quick_settings, inputs)
    indicators = tables["health_indicators"].set_index("indicator")
    assert indicators.loc["dependence_index_mean", "assessment"] == "adverse"      # 0.20 -> 0.30, clear of zero
    assert indicators.loc["full_price_share", "assessment"] == "adverse"           # 0.70 -> 0.60
    assert indicators.loc["responsiveness_drift", "assessment"] == "adverse"       # interval above zero
    assert indicators.loc["full_price_drift", "assessment"] == "within noise"
    assert indicators.loc["population_drift", "assessment"] == "within noise"      # AUC 0.52 (0.49 to 0.55) vs 0.5
    assert tables["health_verdict"]["call"].iloc[0] == "act"                       # three or more adverse >= 2
    page = html_parse.read(html)
    bound = {(n["data-table"], n["data-column"]) for n in page.numbers}
    assert ("dependence_by_quarter", "dependence_index_mean") in bound
    assert ("cohort_retention", "retention") in bound
    assert "Broadcast sale FW-B01: actual vs counterfactual" in html
    # the cohort of 3 customers is suppressed, the one of 400 is shown
    from toolkit.report.quarter.cells import DESCRIPTORS

    shown = {(int(n["data-row"]), n["data-column"]) for n in page.numbers if n["data-table"] == "cohort_retention"}
    assert {(1, "customers"), (1, "retention")} <= shown
    assert {col for row, col in shown if row == 0} <= DESCRIPTORS  # only the row's descriptor (quarters_since)
    assert any(s.get("data-suppressed") for s in page.suppressed)


def test_long_run_sections_say_not_available_when_their_tables_are_missing(demo_report, quick_settings):
    inputs = copy.deepcopy(demo_report.inputs)
    for name in LONGRUN:
        inputs.tables.pop(name, None)
        inputs.missing[name] = f"the {name} analysis is not part of this build yet"
    tables, html = _render(quick_settings, inputs)
    for name in LONGRUN:
        assert f"Not available in this build: the {name} analysis is not part of this build yet" in html
    assert not any(n["data-table"] in LONGRUN for n in html_parse.read(html).numbers)
    assert (tables["health_indicators"]["assessment"] == "not available").sum() >= 6


def test_a_segment_of_three_customers_is_suppressed(demo_report, quick_settings):
    inputs = copy.deepcopy(demo_report.inputs)
    segments = inputs.tables["uplift_segments"]
    row = segments.index[(segments["promotion_id"] == "FW-T13") & (segments["segment"] == "sure_thing")][0]
    segments.loc[row, ["customers", "n_treated", "n_holdout"]] = [3, 2, 1]
    tables, html = _render(quick_settings, inputs)
    page = html_parse.read(html)
    shown = {(n["data-table"], int(n["data-row"])) for n in page.numbers}
    assert ("uplift_segments", row) not in shown
    tails = tables["uplift_tails"]
    tail_row = tails.index[(tails["promotion_id"] == "FW-T13") & (tails["group"] == "sure_thing")][0]
    assert ("uplift_tails", tail_row) not in shown
    suppressed = [s for s in page.suppressed if s.get("data-suppressed")]
    assert len(suppressed) >= 5
    assert all(s["data-suppressed"] == "fewer than 10 customers" for s in suppressed)


def test_a_broadcast_sale_of_the_quarter_gets_a_card_with_its_counterfactual(demo_report, quick_settings):
    inputs = copy.deepcopy(demo_report.inputs)
    if "broadcast_effects" not in inputs.tables:
        pytest.skip("this build has no broadcast analysis: " + inputs.missing.get("broadcast_effects", ""))
    sale = inputs.promotions.iloc[[0]].copy()
    sale["promotion_id"], sale["audience"], sale["name"] = "FW-B01", "broadcast", "Autumn clearance"
    inputs.promotions = pd.concat([inputs.promotions, sale], ignore_index=True)
    tables, html = _render(quick_settings, inputs)
    campaigns = tables["quarter_campaigns"].set_index("promotion_id")
    assert campaigns.loc["FW-B01", "status"].startswith("broadcast sale")
    card = html.split("Autumn clearance", 1)[1].split("</article>", 1)[0]
    rows = {int(n["data-row"]) for n in html_parse.read(card).numbers if n["data-table"] == "broadcast_effects"}
    effects = tables["broadcast_effects"]
    assert rows == set(effects.index[effects["promotion_id"] == "FW-B01"])
    economics = tables["quarter_economics"].set_index("item")
    total = effects[(effects["promotion_id"] == "FW-B01") & (effects["window"] == "total") & (effects["outcome"] == "orders")]
    assert economics.loc["broadcast_incremental_orders", "estimate"] == pytest.approx(total["estimate"].iloc[0])
