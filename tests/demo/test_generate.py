"""generate() and ensure_demo_data(): determinism, the config's form, reuse of a generation."""

from __future__ import annotations

import json
import tomllib

import pytest

from toolkit.demo import ensure_demo_data, generate
from toolkit.errors import ConfigError

# The config form the project's docs promise for the demo export (common practice, no source:
# it is our own contract, written out here independently of the generator's template).
EXPECTED_CONFIG = {
    "tables": {
        "transactions": {
            "path": "transactions/**/*.parquet",
            "date_partition": "month",
            "columns": {
                "order_id": "basket_no",
                "customer_id": "shopper_ref",
                "ordered_at": "created_at",
                "product_id": "sku",
                "quantity": "qty",
                "net_amount": "paid",
                "list_amount": "list_price_total",
                "discount_amount": "discount",
                "promotion_id": "promo_code",
            },
        },
        "promotions": {"path": "promotions.csv"},
        "assignments": {"path": "assignments.csv", "values": {"arm": {"treatment": "T", "holdout": "H"}}},
        "customers": {"path": "customers.csv"},
        "products": {"path": "products.csv"},
    },
    "economics": {"margin_rate": 0.38, "currency": "EUR"},
    "windows": {"pre_period_days": 365, "after_days": 28},
    "campaign": {"holdout_share": 0.2},
    "workspace": {"path": ".liftlag"},
}


def _all_files(root):
    return {p.relative_to(root).as_posix(): p.read_bytes() for p in sorted(root.rglob("*")) if p.is_file()}


def test_same_seed_gives_byte_identical_files(tmp_path):
    first = generate(tmp_path / "a", seed=7, customers=300).parent
    second = generate(tmp_path / "b", seed=7, customers=300).parent
    files_a, files_b = _all_files(first), _all_files(second)
    assert files_a.keys() == files_b.keys()
    assert len(files_a) > 8
    assert [name for name in files_a if files_a[name] != files_b[name]] == []


def test_other_seed_gives_other_data(tmp_path):
    first = generate(tmp_path / "a", seed=7, customers=300).parent
    second = generate(tmp_path / "b", seed=8, customers=300).parent
    assert (first / "assignments.csv").read_bytes() != (second / "assignments.csv").read_bytes()
    assert (first / "truth.json").read_bytes() != (second / "truth.json").read_bytes()


def test_config_has_the_documented_form_with_relative_paths(tmp_path):
    config = generate(tmp_path, seed=3, customers=200)
    assert config.name == "liftlag.toml"
    assert tomllib.loads(config.read_text()) == EXPECTED_CONFIG
    assert list(tmp_path.glob("transactions/**/*.parquet"))


def test_ensure_demo_data_reuses_a_matching_generation(tmp_path):
    config = ensure_demo_data(tmp_path, seed=5, customers=200)
    stamp = {p: p.stat().st_mtime_ns for p in tmp_path.rglob("*") if p.is_file()}
    again = ensure_demo_data(tmp_path, seed=5, customers=200)
    assert again == config
    assert {p: p.stat().st_mtime_ns for p in tmp_path.rglob("*") if p.is_file()} == stamp
    record = json.loads((tmp_path / "generation.json").read_text())
    assert (record["seed"], record["customers"], record["effects"]) == (5, 200, "all")
    assert "truth.json" in record["files"]


def test_ensure_demo_data_regenerates_on_other_seed_or_changed_file(tmp_path):
    ensure_demo_data(tmp_path, seed=5, customers=200)
    before = (tmp_path / "assignments.csv").read_bytes()
    ensure_demo_data(tmp_path, seed=6, customers=200)
    assert json.loads((tmp_path / "generation.json").read_text())["seed"] == 6
    assert (tmp_path / "assignments.csv").read_bytes() != before

    (tmp_path / "customers.csv").write_text("tampered\n")
    ensure_demo_data(tmp_path, seed=6, customers=200)
    assert (tmp_path / "customers.csv").read_text().startswith("customer_id,")


def test_regenerating_leaves_no_stale_partition(tmp_path):
    generate(tmp_path, seed=1, customers=200)
    stale = tmp_path / "transactions" / "month=2030-01"
    stale.mkdir()
    (stale / "part-0.parquet").write_bytes(b"old")
    generate(tmp_path, seed=1, customers=200)
    assert not stale.exists()


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"customers": 10}, "customers must be a whole number of at least 50"),
        ({"seed": -1}, "seed must be a non-negative whole number"),
        ({"effects": "some"}, "effects must be one of all, uplift_only, none"),
    ],
)
def test_bad_arguments_raise_config_error(tmp_path, kwargs, message):
    with pytest.raises(ConfigError, match=message):
        generate(tmp_path, **kwargs)
