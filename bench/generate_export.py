"""Generate a synthetic retail export of any size for the foundation benchmarks.

The export follows the input contract in ``toolkit/contract.py``: order lines as several Parquet
files under ``transactions/``, ``promotions.csv``, ``assignments.csv`` and a ``liftlag.toml`` that
points at them. It is built for measuring ``liftlag check`` and ``liftlag build`` on large inputs,
not as a scenario with a known truth (the demo export has that); still, the shape is a plausible
one so the panels do realistic work:

- about 50 lines per customer on average, with skewed purchase frequencies: each customer's rate
  is drawn from a gamma distribution and the order count is Poisson given the rate (a
  gamma-Poisson mixture, i.e. negative binomial counts; common practice, no source);
- 2-4 lines per order on average (1-5), order dates over 18 months, later customers joining
  part-way through;
- a per-customer deal propensity (beta distributed); deal orders are moved into a broadcast
  promotion's window, and 75 % of their lines are discounted and carry its promotion_id, so
  5-10 % of all lines are discounted;
- about 20 promotions, targeted and broadcast; each targeted campaign assigns a few percent of
  the customers already seen, 20 % of them to a holdout; some treatment customers redeem;
- about 0.7 % of lines are returns (negative quantity and amounts).

Memory stays bounded: the per-customer and per-order metadata (a few bytes an order) is drawn
once, then lines are produced in chunks of ``--chunk-lines`` customers' worth and streamed to
Parquet with ``pyarrow.parquet.ParquetWriter``, so 50M lines never hold more than a couple of
million rows at once.

Usage::

    python bench/generate_export.py --lines 10000000 --out /work/benchdata/lines_10m --seed 7
"""

from __future__ import annotations

import argparse
import json
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

EXPORT_START = np.datetime64("2025-01-01", "D")
EXPORT_DAYS = 547  # 18 months: 2025-01-01 to 2026-07-01 (exclusive)
LINES_PER_CUSTOMER = 50.0
ORDER_SIZES = np.array([1, 2, 3, 4, 5], dtype=np.int8)
ORDER_SIZE_P = np.array([0.10, 0.30, 0.30, 0.20, 0.10])  # mean 2.9 lines an order
N_PRODUCTS = 5_000
N_STORES = 40
CHANNELS = ("web", "store", "app")
CHANNEL_P = np.array([0.50, 0.35, 0.15])
DISCOUNTED_LINE_SHARE = 0.75  # lines of a deal order that carry the discount
RETURN_LINE_SHARE = 0.007
REDEMPTION_RATE = 0.30  # treatment customers of a targeted campaign who redeem
HOLDOUT_RATE = 0.20
MICROS_PER_DAY = 86_400_000_000


@dataclass(frozen=True)
class Promotions:
    """The promotion calendar: one entry per promotion, as arrays."""

    ids: np.ndarray  # str
    start_day: np.ndarray  # int, day offset from EXPORT_START
    days: np.ndarray  # int, duration in days (ends_at = start + days - 1, inclusive)
    mechanic: np.ndarray  # str
    depth: np.ndarray  # float, nan when the mechanic has no depth
    audience: np.ndarray  # str
    cost_per_redemption: np.ndarray  # float
    names: np.ndarray  # str

    @property
    def broadcast(self) -> np.ndarray:
        return np.flatnonzero(self.audience == "broadcast")

    @property
    def targeted(self) -> np.ndarray:
        return np.flatnonzero(self.audience == "targeted")


def make_promotions(
    rng: np.random.Generator, n_targeted: int = 12, n_broadcast: int = 8, *, export_days: int = EXPORT_DAYS
) -> Promotions:
    """Draw a calendar of targeted coupons and broadcast sales over the export's span."""
    n = n_targeted + n_broadcast
    audience = np.array(["targeted"] * n_targeted + ["broadcast"] * n_broadcast)
    mechanic = np.empty(n, dtype=object)
    depth = np.full(n, np.nan)
    days = np.where(audience == "targeted", rng.integers(14, 29, n), rng.integers(4, 15, n))
    # Start at least 60 days in (so campaigns have a pre-period) and end inside the export.
    start_day = np.array([rng.integers(60, export_days - d - 1) for d in days])
    kinds = rng.choice(["percent_off", "amount_off", "free_shipping", "bundle"], n, p=[0.55, 0.25, 0.1, 0.1])
    for i, kind in enumerate(kinds):
        mechanic[i] = kind
        if kind == "percent_off":
            depth[i] = rng.choice([0.10, 0.15, 0.20, 0.25, 0.30])
        elif kind == "amount_off":
            depth[i] = rng.choice([5.0, 10.0, 15.0])
    cost = np.where(audience == "targeted", 0.40, 0.0)
    label = {"percent_off": "% off", "amount_off": "off", "free_shipping": "free shipping", "bundle": "bundle"}
    order = np.argsort(start_day, kind="stable")  # ids and names in calendar order
    ids = np.array([f"PR{i + 1:03d}" for i in range(n)])
    names = np.array(
        [
            f"{'Coupon' if audience[j] == 'targeted' else 'Sale'} {i + 1:02d} {label[mechanic[j]]}"
            for i, j in enumerate(order)
        ]
    )
    return Promotions(
        ids=ids,
        start_day=start_day[order],
        days=days[order],
        mechanic=mechanic[order].astype(str),
        depth=depth[order],
        audience=audience[order],
        cost_per_redemption=cost[order],
        names=names,
    )


@dataclass(frozen=True)
class Customers:
    """Per-customer draws, all of length n_customers."""

    join_day: np.ndarray  # int32, first day the customer can buy
    deal_propensity: np.ndarray  # float32, probability an order is a deal order
    n_orders: np.ndarray  # int32
    order_offset: np.ndarray  # int64, index of the customer's first order (length n + 1)


def make_customers(
    rng: np.random.Generator, lines: int, *, export_days: int = EXPORT_DAYS
) -> tuple[Customers, np.ndarray]:
    """Draw customers and the size of each of their orders so that they hold at least ``lines`` lines.

    Returns the customers and the order sizes (int8, one per order, customer-major).
    """
    n_customers = max(1, int(round(lines / LINES_PER_CUSTOMER)))
    # 60 % are customers from before the export starts, the rest join uniformly over 80 % of it.
    join_day = np.where(
        rng.random(n_customers) < 0.6, 0, rng.integers(0, int(export_days * 0.8), n_customers)
    ).astype(np.int32)
    active_share = (export_days - join_day) / export_days
    rate = rng.gamma(shape=0.7, scale=1 / 0.7, size=n_customers)  # mean 1, skewed
    deal_propensity = rng.beta(0.6, 5.4, n_customers).astype(np.float32)  # mean 0.1
    mean_size = float(ORDER_SIZES @ ORDER_SIZE_P)
    weight = rate * active_share
    # Aim a little above the target, then cut the last customer's lines to the exact count.
    target_orders = lines / mean_size * (1.01 + 20 / np.sqrt(lines))
    extra = max(target_orders - n_customers, 0.0)
    n_orders = (1 + rng.poisson(weight / weight.sum() * extra)).astype(np.int32)
    sizes = rng.choice(ORDER_SIZES, int(n_orders.sum()), p=ORDER_SIZE_P)
    while int(sizes.sum(dtype=np.int64)) < lines:  # rare: top up with more orders
        more = rng.multinomial(max(1, int((lines - sizes.sum(dtype=np.int64)) / mean_size) + 1), weight / weight.sum())
        offsets = np.concatenate([[0], np.cumsum(n_orders, dtype=np.int64)])
        n_new = int(more.sum())
        new_sizes = rng.choice(ORDER_SIZES, n_new, p=ORDER_SIZE_P)
        sizes = np.insert(sizes, np.repeat(offsets[1:], more), new_sizes)
        n_orders = n_orders + more.astype(np.int32)
    order_offset = np.concatenate([[0], np.cumsum(n_orders, dtype=np.int64)])
    return Customers(join_day, deal_propensity, n_orders, order_offset), sizes


def make_assignments(
    rng: np.random.Generator, promotions: Promotions, customers: Customers
) -> tuple[list[tuple[int, np.ndarray, np.ndarray, np.ndarray]], int]:
    """For each targeted promotion, pick a few percent of the customers seen by its start.

    Returns ``(promotion index, customer indices, is_treatment, assigned day)`` per campaign,
    customer indices sorted, and the number of assignment rows.
    """
    campaigns = []
    n_rows = 0
    for p in promotions.targeted:
        eligible = np.flatnonzero(customers.join_day < promotions.start_day[p])
        size = int(round(len(customers.join_day) * rng.uniform(0.02, 0.05)))
        size = min(size, len(eligible))
        chosen = np.sort(rng.choice(eligible, size, replace=False))
        is_treatment = rng.random(size) >= HOLDOUT_RATE
        assigned_day = promotions.start_day[p] - rng.integers(1, 4, size)
        campaigns.append((int(p), chosen, is_treatment, assigned_day))
        n_rows += size
    return campaigns, n_rows


def _ids(prefix: str, numbers: np.ndarray, width: int) -> pa.Array:
    """Zero-padded identifiers such as C00012345, built with Arrow kernels (no Python loop)."""
    digits = pc.utf8_lpad(pc.cast(pa.array(numbers), pa.string()), width=width, padding="0")
    return pc.binary_join_element_wise(prefix, digits, "")


def _lookup(values: list[str], index: np.ndarray) -> pa.Array:
    """Strings by index; a negative index gives null."""
    return pa.array(values, pa.string()).take(pa.array(index, mask=index < 0))


SCHEMA = pa.schema(
    [
        ("order_id", pa.string()),
        ("customer_id", pa.string()),
        ("ordered_at", pa.timestamp("us")),
        ("product_id", pa.string()),
        ("quantity", pa.float64()),
        ("net_amount", pa.float64()),
        ("list_amount", pa.float64()),
        ("discount_amount", pa.float64()),
        ("promotion_id", pa.string()),
        ("channel", pa.string()),
        ("store_id", pa.string()),
    ]
)


@dataclass(frozen=True)
class Catalogue:
    weight: np.ndarray  # float, purchase probability of each product (Zipf-like)
    price: np.ndarray  # float, unit list price


def make_catalogue(rng: np.random.Generator) -> Catalogue:
    weight = 1.0 / np.arange(1, N_PRODUCTS + 1) ** 0.9
    rng.shuffle(weight)
    price = np.round(rng.lognormal(mean=2.7, sigma=0.7, size=N_PRODUCTS), 2).clip(0.5)
    return Catalogue(weight / weight.sum(), price)


def make_chunk(
    *,
    seed: int,
    chunk_index: int,
    first: int,
    last: int,
    customers: Customers,
    sizes: np.ndarray,
    promotions: Promotions,
    campaigns: list,
    catalogue: Catalogue,
    max_lines: int,
    export_days: int = EXPORT_DAYS,
) -> pa.Table:
    """Order lines of customers ``first`` to ``last - 1``, at most ``max_lines`` of them, sorted by time."""
    rng = np.random.default_rng([seed, 1, chunk_index])
    o0, o1 = int(customers.order_offset[first]), int(customers.order_offset[last])
    n_orders = o1 - o0
    order_customer = np.repeat(np.arange(first, last, dtype=np.int64), customers.n_orders[first:last])
    join = customers.join_day[order_customer]
    order_day = join + (rng.random(n_orders) * (export_days - join)).astype(np.int32)
    order_promo = np.full(n_orders, -1, dtype=np.int16)

    # Deal orders: moved into a broadcast sale's window (a sales bump), when the customer is seen by then.
    broadcast = promotions.broadcast
    if len(broadcast):
        is_deal = rng.random(n_orders) < customers.deal_propensity[order_customer]
        weight = promotions.days[broadcast] / promotions.days[broadcast].sum()
        pick = broadcast[rng.choice(len(broadcast), int(is_deal.sum()), p=weight)]
        day = promotions.start_day[pick] + (rng.random(len(pick)) * promotions.days[pick]).astype(np.int32)
        deal_rows = np.flatnonzero(is_deal)
        ok = day >= join[deal_rows]
        order_day[deal_rows[ok]] = day[ok]
        order_promo[deal_rows[ok]] = pick[ok]

    # Targeted coupons: a share of the treatment customers in this chunk redeem on one order.
    for p, chosen, is_treatment, _ in campaigns:
        lo, hi = np.searchsorted(chosen, [first, last])
        members = chosen[lo:hi][is_treatment[lo:hi]]
        members = members[rng.random(len(members)) < REDEMPTION_RATE]
        if not len(members):
            continue
        which = customers.order_offset[members] - o0 + (rng.random(len(members)) * customers.n_orders[members]).astype(np.int64)
        start, days = promotions.start_day[p], promotions.days[p]
        day = start + (rng.random(len(members)) * days).astype(np.int32)
        ok = day >= customers.join_day[members]
        order_day[which[ok]] = day[ok]
        order_promo[which[ok]] = p

    channel = rng.choice(len(CHANNELS), n_orders, p=CHANNEL_P).astype(np.int8)
    store = np.where(channel == CHANNELS.index("store"), rng.integers(0, N_STORES, n_orders), -1)
    micros = (
        order_day.astype(np.int64) * MICROS_PER_DAY
        + rng.integers(8 * 3600, 22 * 3600, n_orders) * 1_000_000
    )

    # Lines.
    order_sizes = sizes[o0:o1]
    line_order = np.repeat(np.arange(n_orders, dtype=np.int64), order_sizes)
    if len(line_order) > max_lines:  # the last chunk: cut to the exact number of lines asked for
        line_order = line_order[:max_lines]
    n_lines = len(line_order)
    product = _distinct_in_order(line_order, rng.choice(N_PRODUCTS, n_lines, p=catalogue.weight))
    quantity = rng.geometric(0.7, n_lines).astype(np.float64)
    list_amount = np.round(catalogue.price[product] * quantity, 2)
    line_promo = order_promo[line_order].astype(np.int32)
    line_promo[(line_promo >= 0) & (rng.random(n_lines) >= DISCOUNTED_LINE_SHARE)] = -1
    discount = np.zeros(n_lines)
    has = line_promo >= 0
    mech = promotions.mechanic[line_promo[has]]
    depth = promotions.depth[line_promo[has]]
    lst = list_amount[has]
    disc = np.where(
        mech == "percent_off",
        lst * np.nan_to_num(depth),
        np.where(mech == "amount_off", np.minimum(np.nan_to_num(depth), lst * 0.5), lst * 0.05),
    )
    discount[has] = np.round(disc, 2)
    net_amount = np.round(list_amount - discount, 2)
    is_return = rng.random(n_lines) < RETURN_LINE_SHARE
    sign = np.where(is_return, -1.0, 1.0)
    quantity, list_amount, discount, net_amount = (a * sign for a in (quantity, list_amount, discount, net_amount))

    order_number = o0 + line_order + 1
    ts = micros[line_order]
    by_time = np.argsort(ts, kind="stable")  # exports usually come in time order
    line_order = line_order[by_time]
    return pa.table(
        {
            "order_id": _ids("O", order_number[by_time], 10),
            "customer_id": _ids("C", order_customer[line_order] + 1, 8),
            "ordered_at": pa.array(
                ts[by_time] + (EXPORT_START.astype("datetime64[us]").astype(np.int64)), pa.timestamp("us")
            ),
            "product_id": _ids("P", product[by_time] + 1, 5),
            "quantity": quantity[by_time],
            "net_amount": net_amount[by_time],
            "list_amount": list_amount[by_time],
            "discount_amount": discount[by_time],
            "promotion_id": _lookup(list(promotions.ids), line_promo[by_time]),
            "channel": _lookup(list(CHANNELS), channel[line_order].astype(np.int64)),
            "store_id": _lookup([f"S{i + 1:03d}" for i in range(N_STORES)], store[line_order]),
        },
        schema=SCHEMA,
    )


def _distinct_in_order(line_order: np.ndarray, product: np.ndarray) -> np.ndarray:
    """Make the products of an order's lines distinct, so no two lines are exact duplicates.

    An order's lines are contiguous and at most ``ORDER_SIZES.max()`` long, so each line is
    compared with the few before it; a repeat moves to the next product number, until none repeats.
    """
    product = product.copy()
    for _ in range(20):
        changed = False
        for lag in range(1, int(ORDER_SIZES.max())):
            same = (line_order[lag:] == line_order[:-lag]) & (product[lag:] == product[:-lag])
            if same.any():
                tail = product[lag:]
                tail[same] = (tail[same] + 1) % N_PRODUCTS
                changed = True
        if not changed:
            break
    return product


def _day_text(days: np.ndarray) -> np.ndarray:
    return (EXPORT_START + days.astype("timedelta64[D]")).astype(str)


def write_promotions(path: Path, promotions: Promotions) -> None:
    table = pa.table(
        {
            "promotion_id": promotions.ids,
            "starts_at": _day_text(promotions.start_day),
            "ends_at": _day_text(promotions.start_day + promotions.days - 1),
            "mechanic": promotions.mechanic,
            "depth": pa.array(promotions.depth, from_pandas=True),  # NaN -> empty field
            "audience": promotions.audience,
            "cost_per_redemption": promotions.cost_per_redemption,
            "name": promotions.names,
        }
    )
    _write_csv(path, table)


def write_assignments(path: Path, promotions: Promotions, campaigns: list, rng: np.random.Generator) -> None:
    parts = []
    for p, chosen, is_treatment, assigned_day in campaigns:
        seconds = rng.integers(6 * 3600, 10 * 3600, len(chosen))
        at = (EXPORT_START + assigned_day.astype("timedelta64[D]")).astype("datetime64[s]") + seconds.astype(
            "timedelta64[s]"
        )
        parts.append(
            pa.table(
                {
                    "promotion_id": pa.array(np.full(len(chosen), promotions.ids[p])),
                    "customer_id": _ids("C", chosen + 1, 8),
                    "arm": pa.array(np.where(is_treatment, "treatment", "holdout")),
                    "assigned_at": pa.array(at, pa.timestamp("s")),
                }
            )
        )
    _write_csv(path, pa.concat_tables(parts))


def _write_csv(path: Path, table: pa.Table) -> None:
    import pyarrow.csv as pacsv

    # Nulls are written as empty fields; timestamps as "YYYY-MM-DD HH:MM:SS".
    pacsv.write_csv(table, path, pacsv.WriteOptions(quoting_style="needed"))


def write_config(path: Path, *, threads: int, memory_limit: str | None, margin_rate: float) -> None:
    lines = [
        "# Benchmark export written by bench/generate_export.py",
        "[tables.transactions]",
        'path = "transactions/*.parquet"',
        "[tables.promotions]",
        'path = "promotions.csv"',
        "[tables.assignments]",
        'path = "assignments.csv"',
        "[economics]",
        f"margin_rate = {margin_rate}",
        "[workspace]",
        'path = ".liftlag"',
        "[engine]",
        f"threads = {threads}",
    ]
    if memory_limit:
        lines.append(f'memory_limit = "{memory_limit}"')
    path.write_text("\n".join(lines) + "\n")


def chunk_bounds(lines_per_customer: np.ndarray, chunk_lines: int) -> list[tuple[int, int]]:
    """Split customers into runs holding about ``chunk_lines`` lines each."""
    cum = np.cumsum(lines_per_customer, dtype=np.int64)
    cuts = np.searchsorted(cum, np.arange(chunk_lines, cum[-1], chunk_lines), side="left") + 1
    edges = np.unique(np.concatenate([[0], cuts, [len(cum)]]))
    return list(zip(edges[:-1].tolist(), edges[1:].tolist()))


def generate(
    *,
    lines: int,
    out: Path,
    seed: int,
    rows_per_file: int = 2_000_000,
    chunk_lines: int = 1_000_000,
    threads: int = 2,
    memory_limit: str | None = None,
    margin_rate: float = 0.38,
    days: int = EXPORT_DAYS,
) -> dict:
    """Write the export to ``out`` and return a summary of what was written.

    ``days`` is the export's span from 2025-01-01 (547: 18 months; 730: 8 whole quarters, the
    long-run benchmark's shape).
    """
    started = time.perf_counter()
    rng = np.random.default_rng(seed)
    out.mkdir(parents=True, exist_ok=True)
    tx_dir = out / "transactions"
    tx_dir.mkdir(exist_ok=True)
    for old in tx_dir.glob("*.parquet"):
        old.unlink()

    promotions = make_promotions(rng, export_days=days)
    customers, sizes = make_customers(rng, lines, export_days=days)
    catalogue = make_catalogue(rng)
    campaigns, n_assignments = make_assignments(rng, promotions, customers)

    # Keep only the customers needed to reach the exact line count.
    per_customer = np.add.reduceat(sizes, customers.order_offset[:-1], dtype=np.int64)
    needed = int(np.searchsorted(np.cumsum(per_customer), lines, side="left")) + 1
    # Orders holding at least one line: the last customer's orders past the cut are dropped.
    last_first_order = int(customers.order_offset[needed - 1])
    lines_before = int(per_customer[: needed - 1].sum())
    last_sizes = np.cumsum(sizes[last_first_order : customers.order_offset[needed]], dtype=np.int64)
    n_orders_written = last_first_order + int(np.searchsorted(last_sizes, lines - lines_before, side="left")) + 1

    written, files, writer, file_rows = 0, 0, None, 0
    discounted = 0
    for index, (first, last) in enumerate(chunk_bounds(per_customer[:needed], chunk_lines)):
        table = make_chunk(
            seed=seed,
            chunk_index=index,
            first=first,
            last=last,
            customers=customers,
            sizes=sizes,
            promotions=promotions,
            campaigns=campaigns,
            catalogue=catalogue,
            max_lines=lines - written,
            export_days=days,
        )
        if writer is None:
            writer = pq.ParquetWriter(tx_dir / f"part-{files:04d}.parquet", SCHEMA, compression="snappy")
            files += 1
        writer.write_table(table, row_group_size=table.num_rows)  # one row group a chunk
        written += table.num_rows
        file_rows += table.num_rows
        discounted += table.num_rows - table.column("promotion_id").null_count
        del table
        if file_rows >= rows_per_file - chunk_lines // 2:  # chunks hold about chunk_lines each
            writer.close()
            writer, file_rows = None, 0
        if written >= lines:
            break
    if writer is not None:
        writer.close()

    write_promotions(out / "promotions.csv", promotions)
    write_assignments(out / "assignments.csv", promotions, campaigns, np.random.default_rng([seed, 2]))
    write_config(out / "liftlag.toml", threads=threads, memory_limit=memory_limit, margin_rate=margin_rate)
    summary = {
        "lines": written,
        "customers": needed,
        "orders": n_orders_written,
        "parquet_files": files,
        "discounted_line_share": round(discounted / max(written, 1), 4),
        "promotions": len(promotions.ids),
        "targeted_promotions": len(promotions.targeted),
        "assignment_rows": n_assignments,
        "seed": seed,
        "days": days,
        "seconds": round(time.perf_counter() - started, 1),
    }
    (out / "generation.json").write_text(json.dumps(summary, indent=2) + "\n")
    return summary


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--lines", type=int, required=True, help="number of order lines to write")
    parser.add_argument("--out", type=Path, required=True, help="export directory (created)")
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument("--rows-per-file", type=int, default=2_000_000, help="order lines per Parquet file")
    parser.add_argument("--chunk-lines", type=int, default=1_000_000, help="lines generated at a time")
    parser.add_argument("--threads", type=int, default=2, help="[engine] threads in the config")
    parser.add_argument("--memory-limit", default=None, help='[engine] memory_limit in the config, e.g. "1GB"')
    parser.add_argument("--margin-rate", type=float, default=0.38)
    parser.add_argument(
        "--days", type=int, default=EXPORT_DAYS,
        help="span from 2025-01-01 in days (default 547, 18 months; 730 gives 8 whole quarters)",
    )
    args = parser.parse_args(argv)
    if args.lines < 1:
        parser.error("--lines must be at least 1")
    if args.days < 120:
        parser.error("--days must be at least 120 (promotions start 60 days in)")
    summary = generate(
        lines=args.lines,
        out=args.out,
        seed=args.seed,
        rows_per_file=args.rows_per_file,
        chunk_lines=args.chunk_lines,
        threads=args.threads,
        memory_limit=args.memory_limit,
        margin_rate=args.margin_rate,
        days=args.days,
    )
    print(json.dumps(summary))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
