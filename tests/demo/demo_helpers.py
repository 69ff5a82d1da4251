"""Readers for a generated demo export, shared by the demo generator's tests."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq


class Export:
    """The files of one generated export, read as the warehouse wrote them."""

    def __init__(self, config: Path):
        self.config = config
        self.root = config.parent
        self.truth = json.loads((self.root / "truth.json").read_text())
        self.uplift = pd.read_parquet(self.root / "truth_uplift.parquet")
        self.promotions = pd.read_csv(self.root / "promotions.csv", parse_dates=["starts_at", "ends_at"])
        self.assignments = pd.read_csv(self.root / "assignments.csv", parse_dates=["assigned_at"])
        self.customers = pd.read_csv(self.root / "customers.csv", parse_dates=["first_seen_at"])
        self.products = pd.read_csv(self.root / "products.csv")
        parts = sorted(self.root.glob("transactions/month=*/part-0.parquet"))
        self.transactions = pd.concat([pq.read_table(p).to_pandas() for p in parts], ignore_index=True)
        self._orders: pd.DataFrame | None = None
        self._outcomes: pd.DataFrame | None = None

    @property
    def orders(self) -> pd.DataFrame:
        """One row per basket: customer, day of its first line, promotion carried."""
        if self._orders is None:
            lines = self.transactions
            self._orders = (
                lines.groupby("basket_no", sort=False)
                .agg(customer_id=("shopper_ref", "first"), ordered_at=("created_at", "min"), promo_code=("promo_code", "first"))
                .reset_index()
            )
            self._orders["ordered_on"] = self._orders["ordered_at"].dt.normalize()
        return self._orders

    def campaign_outcomes(self) -> pd.DataFrame:
        """Per assignment: orders in the campaign window and in the after window, from the export."""
        if self._outcomes is None:
            self._outcomes = self._campaign_outcomes()
        return self._outcomes.copy()

    def _campaign_outcomes(self) -> pd.DataFrame:
        after_days = self.truth["scenario"]["after_days"]
        rows = []
        orders = self.orders
        for promo in self.promotions[self.promotions["audience"] == "targeted"].itertuples():
            assigned = self.assignments[self.assignments["promotion_id"] == promo.promotion_id]
            after_end = promo.ends_at + pd.Timedelta(days=after_days)
            inside = orders[(orders["ordered_on"] >= promo.starts_at) & (orders["ordered_on"] <= promo.ends_at)]
            after = orders[(orders["ordered_on"] > promo.ends_at) & (orders["ordered_on"] <= after_end)]
            frame = assigned[["promotion_id", "customer_id", "arm"]].copy()
            frame["during_orders"] = frame["customer_id"].map(inside["customer_id"].value_counts()).fillna(0)
            frame["after_orders"] = frame["customer_id"].map(after["customer_id"].value_counts()).fillna(0)
            frame["first_during_on"] = frame["customer_id"].map(inside.groupby("customer_id")["ordered_on"].min())
            rows.append(frame)
        out = pd.concat(rows, ignore_index=True)
        out["during_buyer"] = (out["during_orders"] > 0).astype(int)
        return out


def pooled_difference(frame: pd.DataFrame, column: str) -> tuple[float, float]:
    """Treatment minus holdout mean of ``column`` and its standard error (two-sample, unpooled)."""
    t = frame.loc[frame["arm"] == "T", column].to_numpy(float)
    h = frame.loc[frame["arm"] == "H", column].to_numpy(float)
    se = np.sqrt(t.var(ddof=1) / len(t) + h.var(ddof=1) / len(h))
    return float(t.mean() - h.mean()), float(se)
