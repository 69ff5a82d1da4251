"""Model features: panel pre-period columns plus customer attributes."""

from __future__ import annotations

import numpy as np
import pandas as pd

from toolkit.effects.features import PANEL_FEATURES, campaign_features


def test_features_keep_missing_values_and_one_hot_text_attributes(panel_factory):
    panel = panel_factory(customers=300, seed=4)
    customers = pd.DataFrame({
        "customer_id": panel["customer_id"],
        "first_seen_at": pd.Timestamp("2024-01-01"),
        "region": np.where(np.arange(300) % 3 == 0, "north", "south"),
        "household_garden": np.arange(300) % 2 == 0,
        "loyalty_number": [f"L{i}" for i in range(300)],  # looks like an identifier: left out
        "sex": "x",                                        # excluded by the caller
    }).iloc[::-1]  # order must not matter: rows are joined on customer_id
    features, notes = campaign_features(panel, customers, exclude=["sex"])
    assert len(features) == len(panel)
    assert [c for c in PANEL_FEATURES if c in features.columns] == [c for c in features.columns if not c.startswith("customer_")]
    assert features["recency_days"].isna().any()  # no pre-period order: left missing for the trees
    assert features["customer_region=north"].tolist() == (np.arange(300) % 3 == 0).astype(float).tolist()
    assert features["customer_household_garden"].sum() == 150
    assert not any("loyalty_number" in c or "sex" in c or "first_seen" in c for c in features.columns)
    assert any("loyalty_number" in n and "identifier" in n for n in notes)


def test_customers_missing_from_the_attributes_get_missing_features(panel_factory):
    panel = panel_factory(customers=50, seed=4)
    customers = pd.DataFrame({"customer_id": panel["customer_id"].iloc[:10], "score_band": np.arange(10, dtype=float)})
    features, _ = campaign_features(panel, customers)
    assert features["customer_score_band"].notna().sum() == 10
