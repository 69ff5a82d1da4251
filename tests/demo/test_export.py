"""The written export: layout, columns, and the data rules every line must keep."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pyarrow.parquet as pq

TRANSACTION_COLUMNS = [
    "basket_no", "shopper_ref", "created_at", "sku", "qty", "paid", "list_price_total", "discount",
    "promo_code", "channel", "store_id",
]


def test_transactions_are_hive_partitioned_by_month(export_all):
    parts = sorted(export_all.root.glob("transactions/*/*"))
    assert parts and all(re.fullmatch(r"month=\d{4}-\d{2}/part-0\.parquet", p.relative_to(p.parents[1]).as_posix()) for p in parts)
    for part in parts:
        month = part.parent.name.removeprefix("month=")
        created = pq.read_table(part, columns=["created_at"]).column(0).to_numpy()
        assert (created.astype("datetime64[M]") == np.datetime64(month, "M")).all()
    assert pq.read_schema(parts[0]).names == TRANSACTION_COLUMNS


def test_tables_have_the_documented_columns(export_all):
    assert list(export_all.promotions.columns) == [
        "promotion_id", "starts_at", "ends_at", "mechanic", "depth", "audience", "cost_per_redemption", "name",
    ]
    assert list(export_all.assignments.columns) == ["promotion_id", "customer_id", "arm", "assigned_at"]
    assert list(export_all.customers.columns) == ["customer_id", "first_seen_at", "region", "signup_channel", "household_garden"]
    assert list(export_all.products.columns) == ["product_id", "category", "unit_cost"]


def test_no_protected_attribute_is_exported(export_all):
    # Common practice, no source: targeting features must not include protected attributes.
    protected = {"age", "gender", "sex", "ethnicity", "race", "religion", "birth", "nationality"}
    columns = {c.lower() for c in export_all.customers.columns}
    assert not {c for c in columns if any(word in c for word in protected)}


def test_list_equals_net_plus_discount_on_every_line(export_all):
    lines = export_all.transactions
    np.testing.assert_allclose(lines["list_price_total"], lines["paid"] + lines["discount"], atol=1e-9)
    cents = lines[["paid", "list_price_total", "discount"]] * 100
    assert np.allclose(cents, cents.round(), atol=1e-6)


def test_promotions_are_the_planned_schedule(export_all):
    promos = export_all.promotions
    targeted = promos[promos["audience"] == "targeted"].sort_values("starts_at")
    assert (targeted["mechanic"] == "percent_off").all()
    assert targeted["depth"].between(0.10, 0.25).all()
    assert (targeted["starts_at"].diff().dropna() == pd.Timedelta(days=42)).all()
    assert ((targeted["ends_at"] - targeted["starts_at"]).dt.days + 1 == 10).all()
    broadcast = promos[promos["audience"] == "broadcast"]
    assert len(broadcast) == 1
    assert (broadcast["ends_at"] - broadcast["starts_at"]).dt.days.iloc[0] + 1 == 7
    assert not export_all.assignments["promotion_id"].isin(broadcast["promotion_id"]).any()


def test_assignments_are_coded_and_precede_the_start(export_all):
    assigned = export_all.assignments.merge(export_all.promotions, on="promotion_id")
    assert set(assigned["arm"]) == {"T", "H"}
    assert (assigned["assigned_at"] < assigned["starts_at"]).all()
    first_seen = assigned["customer_id"].map(export_all.customers.set_index("customer_id")["first_seen_at"])
    assert (first_seen < assigned["assigned_at"]).all()
    assert not assigned.duplicated(["promotion_id", "customer_id"]).any()


def test_realised_holdout_share_is_near_the_planned_share(export_all):
    # Independent Bernoulli(0.2) per assignment: allow 4 binomial standard errors.
    arms = export_all.assignments["arm"]
    share, n = (arms == "H").mean(), len(arms)
    planned = export_all.truth["holdout_share"]
    assert abs(share - planned) < 4 * np.sqrt(planned * (1 - planned) / n)


def test_coupon_lines_belong_to_treatment_customers_in_the_window(export_all):
    lines = export_all.transactions
    promos = export_all.promotions.set_index("promotion_id")
    orders = export_all.orders.dropna(subset=["promo_code"])
    orders = orders.join(promos, on="promo_code")
    assert ((orders["ordered_on"] >= orders["starts_at"]) & (orders["ordered_on"] <= orders["ends_at"])).all()
    coupon = orders[orders["audience"] == "targeted"]
    arms = export_all.assignments.set_index(["promotion_id", "customer_id"])["arm"]
    assert (arms.reindex(list(zip(coupon["promo_code"], coupon["customer_id"]))) == "T").all()
    # The sign-up offer is the one discount without a promotion id: on a new customer's welcome
    # order (the day they were first seen), inside the offer's span, welcome_offer_depth deep.
    scenario = export_all.truth["scenario"]
    first_seen = export_all.customers.set_index("customer_id")["first_seen_at"].dt.normalize()
    day = lines.groupby("basket_no")["created_at"].transform("min").dt.normalize()  # a return keeps its basket's day
    discounted = (lines["discount"] > 0).groupby(lines["basket_no"]).transform("any")
    welcome = (lines["promo_code"].isna() & discounted
               & (day == lines["shopper_ref"].map(first_seen))
               & (day >= pd.Timestamp(scenario["welcome_offer_starts_on"]))
               & (day <= pd.Timestamp(scenario["welcome_offer_ends_on"])))
    depth = lines.join(promos["depth"], on="promo_code")["depth"]
    depth = depth.where(~welcome, scenario["welcome_offer_depth"]).fillna(0.0)
    purchase = lines["qty"] > 0
    exact = depth * lines["list_price_total"]
    assert (lines.loc[purchase, "discount"] <= exact[purchase] + 1e-9).all()  # never deeper than the promotion
    assert (exact[purchase] - lines.loc[purchase, "discount"] < 0.01).all()  # depth x list, rounded down to the cent
    returns = ~purchase
    assert (lines.loc[returns, "discount"] >= exact[returns] - 1e-9).all()
    assert (lines.loc[lines["promo_code"].isna() & ~welcome, "discount"] == 0).all()
    assert welcome.any()


def test_returns_are_negative_lines_netted_in_their_basket(export_all):
    lines = export_all.transactions
    returns = lines[lines["qty"] < 0]
    assert 0.01 < len(returns) / len(lines) < 0.06
    assert (returns["paid"] <= 0).all() and (returns["list_price_total"] < 0).all()
    bought = lines[lines["qty"] > 0].set_index(["basket_no", "sku"])
    matched = bought.reindex(list(zip(returns["basket_no"], returns["sku"])))
    assert matched["qty"].notna().all()
    assert (returns["qty"].to_numpy() + matched["qty"].to_numpy() >= 0).all()
    assert (returns["created_at"].to_numpy() > matched["created_at"].to_numpy()).all()


def test_export_is_clean(export_all):
    lines = export_all.transactions
    assert not lines.duplicated().any()
    assert lines[["basket_no", "shopper_ref", "created_at", "sku", "qty", "paid"]].notna().all().all()
    assert set(lines["channel"]) == {"web", "app"}
    assert lines["shopper_ref"].isin(export_all.customers["customer_id"]).all()
    assert lines["sku"].isin(export_all.products["product_id"]).all()
    assert lines["promo_code"].dropna().isin(export_all.promotions["promotion_id"]).all()
    assert (lines.groupby("basket_no")["shopper_ref"].nunique() == 1).all()
    first_seen = lines["shopper_ref"].map(export_all.customers.set_index("customer_id")["first_seen_at"])
    assert (lines["created_at"] >= first_seen).all()
    store = lines["store_id"].dropna()
    assert store.str.fullmatch(r"WH-[A-Z]{3}").all() and lines["store_id"].isna().any()


def test_lines_per_customer_are_in_the_planned_range(export_all):
    per_customer = export_all.transactions.groupby("shopper_ref").size().reindex(export_all.customers["customer_id"], fill_value=0)
    assert 10 <= per_customer.mean() <= 40
    assert per_customer.quantile(0.9) > 2 * per_customer.median()  # skewed frequencies
