"""Generate the demo export from a seed, or reuse one generated before with the same settings."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np

from ..errors import ConfigError
from .calendar import build_calendar
from .export import (
    CONFIG_NAME,
    clear_previous,
    write_config,
    write_json,
    write_tables,
    write_transactions,
    write_truth,
)
from .lines import make_lines
from .population import make_customers, make_products
from .scenario import Scenario
from .simulate import simulate
from .truth import build_truth

GENERATOR_VERSION = 1
DEFAULT_SEED = 20261201
DEFAULT_CUSTOMERS = 4000
GENERATION_FILE = "generation.json"


def generate(
    out_dir: str | Path,
    *,
    seed: int = DEFAULT_SEED,
    customers: int = DEFAULT_CUSTOMERS,
    effects: str = "all",
    scenario: Scenario | None = None,
) -> Path:
    """Generate the Fernwick Home & Garden demo export and its known truth.

    Parameters
    ----------
    out_dir : str or Path
        Folder to write into (created if missing). Files of an earlier generation there are
        replaced; nothing else in the folder is touched.
    seed : int, default=20261201
        Seed of numpy's Generator; the same seed and settings give byte-identical files.
    customers : int, default=4000
        Number of customers.
    effects : {"all", "uplift_only", "none", "stationary", "learning"}, default="all"
        Which mechanisms are on (see :data:`toolkit.demo.scenario.EFFECTS`).
    scenario : Scenario, optional
        Full parameters; overrides ``effects`` when given.

    Returns
    -------
    Path
        The ``liftlag.toml`` of the export.

    Examples
    --------
    >>> import tempfile
    >>> from toolkit.demo import generate
    >>> config = generate(tempfile.mkdtemp(), customers=300)
    >>> config.name
    'liftlag.toml'
    """
    if not isinstance(customers, int) or customers < 50:
        raise ConfigError(f"demo customers must be a whole number of at least 50, found {customers!r}")
    if not isinstance(seed, int) or seed < 0:
        raise ConfigError(f"demo seed must be a non-negative whole number, found {seed!r}")
    scenario = scenario if scenario is not None else Scenario.for_effects(effects)
    scenario.validate()
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)

    streams = [np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(6)]
    calendar_rng, customer_rng, product_rng, purchase_rng, assignment_rng, line_rng = streams
    calendar = build_calendar(scenario, calendar_rng)
    population = make_customers(scenario, customers, customer_rng)
    products = make_products(scenario, product_rng)
    simulation = simulate(scenario, calendar, population, purchase_rng=purchase_rng, assignment_rng=assignment_rng)
    lines = make_lines(scenario, calendar, population, products, simulation, line_rng)
    campaign_truth, broadcast_truth, uplift_table = build_truth(scenario, calendar, population, simulation)

    clear_previous(out)
    write_transactions(out, lines, calendar, population, products)
    write_tables(out, scenario, calendar, population, products, simulation)
    config = write_config(out, scenario)
    truth = {
        "description": (
            "Known truth of the Fernwick Home & Garden demo (invented retailer). Effects are exact "
            "expectations under the generating process, conditional on each assigned customer's "
            "state at the campaign start, averaged over the campaign's assigned customers."
        ),
        "generator_version": GENERATOR_VERSION,
        "seed": seed,
        "customers": customers,
        "effects": effects if scenario == Scenario.for_effects(effects) else "custom",
        "holdout_share": scenario.holdout_share,
        "scenario": scenario.to_dict(),
        "mechanisms": _mechanisms(scenario),
        "campaigns": campaign_truth,
        "broadcasts": broadcast_truth,
        "realised": _realised(population, products, simulation, lines, campaign_truth),
        "acquisition": _acquisition(scenario, calendar, population, simulation),
    }
    write_truth(out, truth, uplift_table)
    record = _record(seed, customers, truth["effects"], scenario)
    record["files"] = _file_hashes(out)
    write_json(out / GENERATION_FILE, record)
    return config


def ensure_demo_data(
    out_dir: str | Path,
    *,
    seed: int = DEFAULT_SEED,
    customers: int = DEFAULT_CUSTOMERS,
    effects: str = "all",
) -> Path:
    """Return the config of a demo export in ``out_dir``, generating it only when needed.

    An existing generation is reused when its ``generation.json`` records the same generator
    version, seed, customer count, effects and scenario parameters, and every file it lists is
    still there unchanged; otherwise the export is generated afresh.

    Examples
    --------
    >>> import tempfile
    >>> from toolkit.demo import ensure_demo_data
    >>> folder = tempfile.mkdtemp()
    >>> ensure_demo_data(folder, customers=300) == ensure_demo_data(folder, customers=300)
    True
    """
    out = Path(out_dir)
    scenario = Scenario.for_effects(effects)
    if is_current(out, seed=seed, customers=customers, effects=effects, scenario=scenario):
        return out / CONFIG_NAME
    return generate(out, seed=seed, customers=customers, effects=effects)


def is_current(out_dir: Path, *, seed: int, customers: int, effects: str, scenario: Scenario) -> bool:
    """Whether ``out_dir`` holds an unchanged generation with exactly these settings."""
    try:
        recorded = json.loads((out_dir / GENERATION_FILE).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    expected = _record(seed, customers, effects, scenario)
    if any(recorded.get(key) != value for key, value in expected.items()):
        return False
    files = recorded.get("files")
    if not isinstance(files, dict) or CONFIG_NAME not in files:
        return False
    current = _file_hashes(out_dir)
    return current == files


def _record(seed: int, customers: int, effects: str, scenario: Scenario) -> dict:
    return {
        "generator_version": GENERATOR_VERSION,
        "seed": seed,
        "customers": customers,
        "effects": effects,
        "scenario_fingerprint": scenario.fingerprint(),
    }


def _file_hashes(out_dir: Path) -> dict[str, str]:
    """sha256 of every generated file, by path relative to ``out_dir``."""
    names = sorted(p for p in out_dir.glob("transactions/month=*/part-0.parquet"))
    names += [out_dir / n for n in ("promotions.csv", "assignments.csv", "customers.csv", "products.csv",
                                     CONFIG_NAME, "truth.json", "truth_uplift.parquet")]
    hashes = {}
    for path in names:
        if path.is_file():
            hashes[path.relative_to(out_dir).as_posix()] = hashlib.sha256(path.read_bytes()).hexdigest()
    return hashes


def _mechanisms(scenario: Scenario) -> dict:
    return {
        "uplift": {
            "active": scenario.has_uplift,
            "acts_on": "purchase hazard of treatment customers on each day of the campaign window",
            "rule": (
                "coupon_hazard_ratio = uplift_base_hr x uplift_garden_hr (if household_garden = 1) "
                "x uplift_recent_infrequent_hr (if recency_days <= recent_days and 1 <= frequency <= "
                "infrequent_max_orders); 1 for sure things (frequency >= sure_thing_min_orders); "
                "do_not_disturb_hr for signup_channel = do_not_disturb_channel (takes precedence). "
                "recency_days and frequency are read from the exported orders in the pre_period_days "
                "before the campaign start."
            ),
            "uplift_base_hr": scenario.uplift_base_hr,
            "uplift_garden_hr": scenario.uplift_garden_hr,
            "uplift_recent_infrequent_hr": scenario.uplift_recent_infrequent_hr,
            "recent_days": scenario.recent_days,
            "infrequent_max_orders": scenario.infrequent_max_orders,
            "sure_thing_min_orders": scenario.sure_thing_min_orders,
            "do_not_disturb_channel": scenario.do_not_disturb_channel,
            "do_not_disturb_hr": scenario.do_not_disturb_hr,
        },
        "post_promotion_dip": {
            "active": scenario.has_dip,
            "acts_on": "purchase hazard on the dip_days days after each order placed with a targeted coupon",
            "post_promotion_dip_hr": scenario.post_promotion_dip_hr,
            "dip_days": scenario.dip_days,
        },
        "anticipation": {
            "active": scenario.has_anticipation,
            "acts_on": (
                "full-price purchase hazard on the anticipation_days days before each scheduled campaign "
                "start, for customers with at least anticipation_min_coupons treatment coupons from "
                "campaigns already started"
            ),
            "anticipation_hr": scenario.anticipation_hr,
            "anticipation_days": scenario.anticipation_days,
            "anticipation_min_coupons": scenario.anticipation_min_coupons,
        },
        "learning": {
            "active": scenario.has_learning,
            "acts_on": (
                "every day's purchase hazard, times exp(-learning_full_price_per_coupon x min(coupons received before "
                "the latest campaign start, "
                "learning_cap)); and each campaign's coupon hazard ratio where above 1, times exp(learning_coupon_per_coupon x "
                "min(coupons received before it, learning_cap)): customers who have received more coupons buy "
                "less at full price and respond more to the next coupon, so discount dependence rises"
            ),
            "learning_full_price_per_coupon": scenario.learning_full_price_per_coupon,
            "learning_coupon_per_coupon": scenario.learning_coupon_per_coupon,
            "learning_cap": scenario.learning_cap,
        },
        "broadcast": {
            "active": scenario.broadcast_hr != 1.0,
            "acts_on": "every customer's purchase hazard on each day of the sale (no dip follows a sale order)",
            "broadcast_hr": scenario.broadcast_hr,
        },
    }


def _acquisition(scenario: Scenario, calendar, population, simulation) -> dict:
    """The welcome offer: who was deal-acquired, and how their later purchase rate differs.

    ``rate_ratio`` is the ratio of the mean baseline hazards (deal-acquired / the other welcome
    orders of the same span): below 1 means the deal-acquired cohort buys less often afterwards.
    ``cohorts`` splits every customer first seen inside the history who ordered, as the cohort
    analysis does, by whether the first order was a deal (the welcome offer, a coupon or the
    sale): their mean baseline hazard and its ratio. Customers whose first order came on its own
    are those who buy often (a size-biased draw), so that ratio is below 1 even when the offer
    changes no one (the ``none`` variant): the cohort contrast is descriptive.
    """
    first = population.first_day
    start, end = calendar.day_of(scenario.welcome_offer_starts_on), calendar.day_of(scenario.welcome_offer_ends_on)
    in_span = population.welcome_order & (first >= start) & (first <= end)
    deal = population.welcome_deal if population.welcome_deal is not None else np.zeros(len(first), bool)
    other = in_span & ~deal
    deal_rate = float(population.base_rate[deal].mean()) if deal.any() else None
    other_rate = float(population.base_rate[other].mean()) if other.any() else None
    # The first order of each customer first seen inside the history, and whether it was a deal.
    first_order = {}
    for customer, day, promo in zip(simulation.order_customer, simulation.order_day, simulation.order_promotion):
        if customer not in first_order:  # orders are in day order
            first_order[customer] = (day, promo)
    cohort_rate = {}
    members = np.array(sorted(c for c in first_order if first[c] >= 0), dtype=np.int64)
    if len(members):
        first_deal = np.array([first_order[c][1] >= 0 or (deal[c] and first_order[c][0] == first[c]) for c in members])
        for name, take in (("deal_acquired", first_deal), ("full_price_acquired", ~first_deal)):
            cohort_rate[name] = {"customers": int(take.sum()),
                                 "mean_rate": round(float(population.base_rate[members[take]].mean()), 6) if take.any() else None}
    rates = [cohort_rate.get(k, {}).get("mean_rate") for k in ("deal_acquired", "full_price_acquired")]
    return {
        "cohorts": cohort_rate,
        "cohort_rate_ratio": round(rates[0] / rates[1], 6) if all(rates) else None,
        "welcome_offer_starts_on": scenario.welcome_offer_starts_on.isoformat(),
        "welcome_offer_ends_on": scenario.welcome_offer_ends_on.isoformat(),
        "welcome_offer_depth": scenario.welcome_offer_depth,
        "rate_factor": scenario.welcome_offer_rate_factor,
        "deal_acquired_customers": int(deal.sum()),
        "full_price_acquired_same_span": int(other.sum()),
        "deal_acquired_mean_rate": None if deal_rate is None else round(deal_rate, 6),
        "full_price_acquired_mean_rate": None if other_rate is None else round(other_rate, 6),
        "rate_ratio": None if not (deal_rate and other_rate) else round(deal_rate / other_rate, 6),
    }


def _realised(population, products, simulation, lines, campaign_truth) -> dict:
    """Counts of what was generated (descriptive, not effects)."""
    buyers = np.unique(simulation.order_customer)
    return {
        "customers": int(len(population)),
        "customers_with_orders": int(len(buyers)),
        "products": int(len(products)),
        "orders": int(lines.orders),
        "lines": int(len(lines.order_number)),
        "return_lines": int(lines.is_return.sum()),
        "coupon_orders": int(np.isin(simulation.order_promotion, np.arange(len(campaign_truth))).sum()),
        "broadcast_orders": int((simulation.order_promotion >= len(campaign_truth)).sum()),
        "targeted_campaigns": len(campaign_truth),
        "assignments": int(sum(c["assigned"] for c in campaign_truth)),
        "holdout_share_realised": round(
            sum(c["holdout"] for c in campaign_truth) / max(sum(c["assigned"] for c in campaign_truth), 1), 6
        ),
    }
