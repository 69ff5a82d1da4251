"""Shared fixtures of the effects tests: a synthetic campaign panel with a known truth, settings,
and an in-memory workspace connection laid out like ``toolkit.workspace.connect``.

The synthetic panel has every column of ``PANELS["campaign_windows"]``. Its true uplift in
buying during the campaign is known per customer (column ``true_uplift``): large for customers who
bought on deals before, slightly negative for the most frequent full-price buyers. Treated buyers
are less likely to buy in the window after the campaign (a known pull-forward).
"""

from __future__ import annotations

from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest

from toolkit import config
from toolkit.contract import PANELS

PANEL_COLUMNS = [c.name for c in PANELS["campaign_windows"]]


def make_panel(*, customers: int = 3000, holdout_share: float = 0.25, promotion_id: str = "P1", seed: int = 1,
               uplift_scale: float = 1.0, after_giveback: float = 0.3) -> pd.DataFrame:
    """A ``campaign_windows`` slice for one promotion, plus ``true_uplift`` and ``true_baseline``."""
    rng = np.random.default_rng(seed)
    n = customers
    frequency = rng.poisson(3.0, n)
    has_orders = frequency > 0
    recency = np.where(has_orders, rng.integers(1, 365, n), np.nan)
    monetary = frequency * rng.gamma(4.0, 10.0, n)
    tenure = np.where(rng.random(n) < 0.05, np.nan, rng.integers(0, 1500, n))
    deal_share = np.where(has_orders, rng.beta(2, 3, n), np.nan)
    past_coupons = rng.poisson(2.0, n)
    logit = -1.6 + 0.45 * np.log1p(frequency) - 0.002 * np.nan_to_num(recency, nan=365)
    baseline = 1 / (1 + np.exp(-logit))
    share = np.nan_to_num(deal_share, nan=0.0)
    uplift = uplift_scale * (0.01 + 0.25 * (share > 0.5) - 0.04 * (frequency >= 6))
    treated = rng.random(n) >= holdout_share
    p_during = np.clip(baseline + uplift * treated, 0, 1)
    during_buyer = (rng.random(n) < p_during).astype(int)
    pre_buyer = (rng.random(n) < baseline).astype(int)
    p_after = np.clip(baseline - after_giveback * np.clip(uplift, 0, None) * treated, 0, 1)
    after_buyer = (rng.random(n) < p_after).astype(int)
    pre_orders = pre_buyer * (1 + rng.poisson(0.3, n))
    during_orders = during_buyer * (1 + rng.poisson(0.3, n))
    after_orders = after_buyer * (1 + rng.poisson(0.3, n))
    basket = rng.gamma(5.0, 10.0, n)
    pre_net = pre_orders * basket
    during_net = during_orders * basket
    after_net = after_orders * basket
    redeemed = (treated & (during_buyer == 1) & (rng.random(n) < 0.9)).astype(int)
    discount = redeemed * 0.2 * during_net
    starts = pd.Timestamp("2026-03-02")
    frame = pd.DataFrame({
        "promotion_id": promotion_id,
        "customer_id": [f"C{i:06d}" for i in range(n)],
        "arm": np.where(treated, "treatment", "holdout"),
        "is_treated": treated,
        "assigned_at": starts - pd.Timedelta(days=2),
        "starts_on": starts.date(),
        "ends_on": (starts + pd.Timedelta(days=13)).date(),
        "after_ends_on": (starts + pd.Timedelta(days=41)).date(),
        "recency_days": pd.array(recency, dtype="Int64").astype("float"),
        "frequency": frequency.astype(np.int64),
        "monetary": monetary,
        "tenure_days": tenure,
        "past_deal_share": deal_share,
        "past_coupons": past_coupons.astype(np.int64),
        "pre_buyer": pre_buyer,
        "pre_orders": pre_orders.astype(np.int64),
        "pre_net_amount": pre_net,
        "pre_margin_amount": 0.35 * pre_net,
        "during_buyer": during_buyer,
        "during_orders": during_orders.astype(np.int64),
        "during_net_amount": during_net,
        "during_margin_amount": 0.35 * during_net - discount,
        "after_buyer": after_buyer,
        "after_orders": after_orders.astype(np.int64),
        "after_net_amount": after_net,
        "after_margin_amount": 0.35 * after_net,
        "redeemed": redeemed,
        "discount_amount": discount,
    })
    frame["true_uplift"] = uplift
    frame["true_baseline"] = baseline
    return frame


def make_settings(tmp_path: Path, **campaign) -> config.Settings:
    data = {
        "tables": {
            "transactions": {"path": "export/lines.parquet"},
            "promotions": {"path": "export/promotions.csv"},
            "assignments": {"path": "export/assignments.csv"},
        },
        "campaign": campaign,
    }
    return config.parse(data, tmp_path / "liftlag.toml")


def promotion_row(promotion_id: str = "P1", audience: str = "targeted", cost: float | None = 0.5) -> dict:
    return {"promotion_id": promotion_id, "starts_at": pd.Timestamp("2026-03-02"), "ends_at": pd.Timestamp("2026-03-15"),
            "mechanic": "percent_off", "depth": 0.2, "audience": audience, "cost_per_redemption": cost,
            "name": f"Spring coupon {promotion_id}"}


def make_connection(panels: list[pd.DataFrame], promotions: list[dict], customers: pd.DataFrame | None = None):
    """An in-memory DuckDB laid out like the workspace: campaign_windows, and checked.* attached."""
    con = duckdb.connect()
    con.execute("ATTACH ':memory:' AS checked")
    windows = pd.concat(panels, ignore_index=True)[PANEL_COLUMNS] if panels else pd.DataFrame(columns=PANEL_COLUMNS)
    con.register("windows_frame", windows)
    con.execute("CREATE TABLE campaign_windows AS SELECT * FROM windows_frame")
    con.unregister("windows_frame")
    promo = pd.DataFrame(promotions)
    con.register("promo_frame", promo)
    con.execute("CREATE TABLE checked.promotions AS SELECT * FROM promo_frame")
    con.unregister("promo_frame")
    if customers is not None:
        con.register("customer_frame", customers)
        con.execute("CREATE TABLE checked.customers AS SELECT * FROM customer_frame")
        con.unregister("customer_frame")
    return con


@pytest.fixture
def panel() -> pd.DataFrame:
    return make_panel()


@pytest.fixture
def settings(tmp_path) -> config.Settings:
    return make_settings(tmp_path, holdout_share=0.25)


@pytest.fixture(scope="session")
def panel_factory():
    """``make_panel`` (a synthetic campaign_windows slice with its truth)."""
    return make_panel


@pytest.fixture
def settings_factory(tmp_path):
    """``make_settings`` bound to the test's tmp_path: settings_factory(holdout_share=0.25, ...)."""
    return lambda **campaign: make_settings(tmp_path, **campaign)


@pytest.fixture(scope="session")
def connection_factory():
    """``make_connection`` (an in-memory workspace)."""
    return make_connection


@pytest.fixture(scope="session")
def promotion_factory():
    """``promotion_row`` (one checked.promotions row as a dict)."""
    return promotion_row


# --- a small workspace with one campaign of each kind, analysed once per session ---------------------


@pytest.fixture(scope="session")
def workspace(tmp_path_factory):
    """In-memory workspace: P1 (normal), PK (skewed split), PS (tiny), PH (no holdout), PE (no rows), PB (broadcast)."""
    normal = make_panel(customers=2500, promotion_id="P1", seed=8)
    skewed = make_panel(customers=2500, promotion_id="PK", seed=9, holdout_share=0.1)
    tiny = make_panel(customers=60, promotion_id="PS", seed=10)
    no_holdout = make_panel(customers=600, promotion_id="PH", seed=11, holdout_share=0.0)
    promotions = [promotion_row(p) for p in ("P1", "PK", "PS", "PH", "PE")] + [promotion_row("PB", audience="broadcast")]
    customers = pd.DataFrame({"customer_id": normal["customer_id"],
                              "region": np.where(np.arange(len(normal)) % 4 == 0, "north", "south")})
    con = make_connection([normal, skewed, tiny, no_holdout], promotions, customers)
    settings = make_settings(tmp_path_factory.mktemp("settings"), holdout_share=0.25, folds=3,
                             holdout_share_by_promotion={"PS": 0.25})
    return {"con": con, "settings": settings, "panels": {"P1": normal, "PK": skewed, "PS": tiny, "PH": no_holdout}}


@pytest.fixture(scope="session")
def readouts(workspace):
    """analyse_campaign on P1, PK and PS (warnings recorded, not raised)."""
    import warnings

    from toolkit.effects.api import analyse_campaign

    out = {}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        for pid in ("P1", "PK", "PS"):
            out[pid] = analyse_campaign(workspace["con"], workspace["settings"], pid)
    out["_warnings"] = [str(w.message) for w in caught]
    return out
