"""``liftlag init``: inspect an export folder and write a starter ``liftlag.toml``.

Files are read with DuckDB's own readers (schema only plus a small sample). Each file is matched
to a contract table by how many of the table's columns its column names resemble, and each
contract column to the export column whose name is closest among known synonyms and whose type
fits. Every guess is marked ``# guessed`` in the file and printed.
"""

from __future__ import annotations

import difflib
import warnings
from dataclasses import dataclass
from pathlib import Path

import duckdb

from .contract import INPUT_TABLES
from .errors import ConfigError, DataError, DataWarning
from .failures import duckdb_cause

SYNONYMS: dict[str, tuple[str, ...]] = {
    "order_id": ("order_id", "order", "order_no", "order_number", "basket", "basket_id", "basket_no",
                 "invoice", "invoice_no", "receipt", "receipt_id", "transaction_id", "ticket_id"),
    "customer_id": ("customer_id", "customer", "client", "client_id", "client_ref", "member_id", "shopper",
                    "shopper_id", "shopper_ref", "account_id", "user_id", "buyer_id", "cust_id"),
    "ordered_at": ("ordered_at", "order_date", "order_ts", "created", "created_at", "date", "datetime",
                   "timestamp", "sold_at", "purchased_at", "transaction_date"),
    "product_id": ("product_id", "product", "sku", "item", "item_id", "article", "article_id", "ean", "upc"),
    "quantity": ("quantity", "qty", "units", "number_of_items", "count", "pieces"),
    "net_amount": ("net_amount", "net", "paid", "amount", "revenue", "sales", "value", "price_paid",
                   "dollar_value", "total", "line_total"),
    "list_amount": ("list_amount", "gross", "gross_amount", "list_price_total", "list", "regular_amount",
                    "full_price"),
    "discount_amount": ("discount_amount", "discount", "markdown", "rebate", "promo_amount"),
    "promotion_id": ("promotion_id", "promotion", "promo", "promo_id", "promo_code", "coupon", "coupon_id",
                     "campaign_id", "offer_id", "deal_id"),
    "channel": ("channel", "sales_channel", "source"),
    "store_id": ("store_id", "store", "shop_id", "location_id", "warehouse"),
    "starts_at": ("starts_at", "start", "start_date", "starts", "valid_from", "begin", "from_date"),
    "ends_at": ("ends_at", "end", "end_date", "ends", "valid_to", "until", "to_date"),
    "mechanic": ("mechanic", "type", "promo_type", "offer_type", "kind"),
    "depth": ("depth", "percent", "pct_off", "discount_rate", "discount_pct", "rate"),
    "audience": ("audience", "targeting", "target_type", "scope"),
    "cost_per_redemption": ("cost_per_redemption", "redemption_cost", "cost"),
    "name": ("name", "title", "label", "description"),
    "arm": ("arm", "group", "variant", "test_group", "treatment_group", "cell", "bucket"),
    "assigned_at": ("assigned_at", "assigned", "sent_at", "assignment_date", "issued_at", "send_date"),
    "first_seen_at": ("first_seen_at", "signup_date", "registered_at", "created_at", "first_order_date",
                      "joined_at", "first_seen"),
    "category": ("category", "department", "product_group", "family"),
    "unit_cost": ("unit_cost", "cost", "cogs", "cost_price", "purchase_price"),
}

TABLE_HINTS: dict[str, tuple[str, ...]] = {
    "transactions": ("transaction", "order", "line", "sales", "receipt", "basket", "invoice"),
    "promotions": ("promotion", "promo", "offer", "deal", "coupon_def"),
    "assignments": ("assignment", "assign", "arm", "holdout", "allocation", "target"),
    "customers": ("customer", "client", "member", "shopper"),
    "products": ("product", "item", "sku", "article", "catalog"),
}

_TYPE_FAMILY = {"VARCHAR": "text", "DOUBLE": "number", "TIMESTAMP": "time"}


@dataclass
class Candidate:
    path: str  # as written in the config (relative to the config's folder)
    format: str
    columns: list[tuple[str, str]]  # (name, duckdb type)
    files: list[str] | None = None  # absolute paths, for sampling values


ARM_WORDS = {
    "treatment": ("treatment", "treated", "treat", "t", "test", "target", "targeted", "1", "true", "yes", "coupon"),
    "holdout": ("holdout", "hold", "h", "control", "c", "0", "false", "no", "ctrl", "held_out"),
}


def guess_arm_values(values: list[str]) -> dict[str, str]:
    """contract arm -> export value, for exports that code the arms (T/H, test/control, 1/0)."""
    out = {}
    for arm, words in ARM_WORDS.items():
        for v in values:
            if v is not None and str(v).strip().lower() in words and str(v) != arm:
                out[arm] = str(v)
                break
    return out


def sample_values(cand: Candidate, column: str, limit: int = 20) -> list[str]:
    con = duckdb.connect()
    reader = "read_parquet(?, union_by_name = true)" if cand.format == "parquet" else "read_csv(?, all_varchar = true)"
    sql = f'SELECT DISTINCT CAST("{column.replace(chr(34), chr(34) * 2)}" AS VARCHAR) FROM {reader} LIMIT {int(limit)}'
    try:
        return [r[0] for r in con.execute(sql, [cand.files]).fetchall()]
    except duckdb.Error:
        return []


def _family(duck_type: str) -> str:
    t = duck_type.upper()
    if any(k in t for k in ("INT", "DOUBLE", "FLOAT", "DECIMAL", "NUMERIC", "REAL")):
        return "number"
    if any(k in t for k in ("TIMESTAMP", "DATE")):
        return "time"
    return "text"


def find_candidates(export_dir: Path) -> list[Candidate]:
    """One candidate per CSV file, and one per folder of Parquet files (hive partitions included)."""
    if not export_dir.is_dir():
        raise ConfigError(f"{export_dir} is not a folder; give the folder that holds the export's files")
    con = duckdb.connect()
    candidates: list[Candidate] = []
    skipped: list[str] = []
    parquet_dirs: dict[Path, list[Path]] = {}
    for f in sorted(export_dir.rglob("*")):
        if not f.is_file() or f.name.startswith("."):
            continue
        if f.suffix in (".parquet", ".pq"):
            top = f.relative_to(export_dir).parts[0]
            parquet_dirs.setdefault(export_dir / top, []).append(f)
        elif f.name.endswith((".csv", ".csv.gz", ".tsv", ".tsv.gz")):
            rel = f.relative_to(export_dir).as_posix()
            try:
                cols = _describe(con, "SELECT * FROM read_csv(?, sample_size = 2048)", [str(f)], f)
            except DataError as exc:  # one unreadable file does not stop the others
                skipped.append(str(exc))
                continue
            candidates.append(Candidate(rel, "csv", cols, [str(f)]))
    for top, files in parquet_dirs.items():
        if top.is_file():
            rel = top.relative_to(export_dir).as_posix()
            cols = _describe(con, "SELECT * FROM read_parquet(?)", [str(top)], top)
        else:
            rel = top.relative_to(export_dir).as_posix() + "/**/*.parquet"
            cols = _describe(con, "SELECT * FROM read_parquet(?, union_by_name = true)", [[str(p) for p in files]], top)
        candidates.append(Candidate(rel, "parquet", cols, [str(p) for p in files] if not top.is_file() else [str(top)]))
    if not candidates:
        extra = ("; " + "; ".join(skipped)) if skipped else ""
        raise DataError(f"{export_dir}: no readable Parquet or CSV files found (looked for *.parquet, *.csv, *.csv.gz){extra}")
    for message in skipped:
        warnings.warn(f"liftlag init skipped a file: {message}", DataWarning, stacklevel=2)
    return candidates


def _describe(con, sql: str, params, where: Path) -> list[tuple[str, str]]:
    try:
        rows = con.execute(f"DESCRIBE {sql}", params).fetchall()
    except duckdb.Error as exc:
        raise DataError(f"cannot read {where}: {duckdb_cause(exc)}") from None
    return [(r[0], r[1]) for r in rows]


def _similarity(column: str, contract_column: str) -> float:
    name = column.lower().strip()
    best = 0.0
    for i, syn in enumerate(SYNONYMS.get(contract_column, (contract_column,))):
        if name == syn:
            return 1.0 - i * 0.001  # earlier synonyms are stronger
        best = max(best, difflib.SequenceMatcher(None, name, syn).ratio() * 0.8)
    return best


def guess_columns(table: str, columns: list[tuple[str, str]]) -> dict[str, tuple[str, float]]:
    """contract column -> (export column, score), greedily by best score, each export column used once."""
    contract = INPUT_TABLES[table]
    scores = []
    for c in contract.columns:
        want = _TYPE_FAMILY.get(c.type, "text")
        for name, duck_type in columns:
            s = _similarity(name, c.name)
            fam = _family(duck_type)
            if fam != want and not (fam == "text"):  # text may hold anything (CSV); others must fit
                s *= 0.3
            scores.append((s, c.name, name))
    scores.sort(reverse=True)
    used_contract, used_export, out = set(), set(), {}
    for s, cname, ename in scores:
        if s < 0.55 or cname in used_contract or ename in used_export:
            continue
        out[cname] = (ename, s)
        used_contract.add(cname)
        used_export.add(ename)
    return out


def _table_score(table: str, cand: Candidate) -> float:
    guessed = guess_columns(table, cand.columns)
    required = INPUT_TABLES[table].required
    covered = sum(1 for r in required if r in guessed) / len(required)
    hint = 0.3 if any(h in cand.path.lower() for h in TABLE_HINTS[table]) else 0.0
    return covered + hint + 0.01 * len(guessed)


def assign_tables(candidates: list[Candidate]) -> dict[str, Candidate]:
    pairs = sorted(((_table_score(t, c), t, i) for t in INPUT_TABLES for i, c in enumerate(candidates)), reverse=True)
    chosen: dict[str, Candidate] = {}
    used: set[int] = set()
    for score, table, i in pairs:
        if table in chosen or i in used or score < 0.5:
            continue
        chosen[table] = candidates[i]
        used.add(i)
    return chosen


def render_config(chosen: dict[str, Candidate]) -> tuple[str, list[str]]:
    lines = ["# liftlag.toml written by `liftlag init`. Every line marked 'guessed' needs a look.", ""]
    report: list[str] = []
    for table in INPUT_TABLES:
        cand = chosen.get(table)
        if cand is None:
            if not INPUT_TABLES[table].optional:
                lines += [f"# [tables.{table}]  -- no file looked like the {table} table; add its path", ""]
                report.append(f"{table}: NOT FOUND (required; add [tables.{table}] path = ...)")
            continue
        lines += [f"[tables.{table}]", f'path = "{cand.path}"  # guessed from the file\'s name and columns']
        report.append(f"{table}: {cand.path}")
        guessed = guess_columns(table, cand.columns)
        mapping = [(c, e, s) for c, (e, s) in guessed.items() if e != c]
        if mapping:
            lines.append(f"[tables.{table}.columns]")
            for c, e, s in mapping:
                lines.append(f'{c} = "{e}"  # guessed ({s:.0%} match)')
                report.append(f"  {c} <- {e} (guessed, {s:.0%})")
        for r in INPUT_TABLES[table].required:
            if r not in guessed:
                lines.append(f'# {r} = "?"  -- required column not found: name the export column')
                report.append(f"  {r}: NOT FOUND (required)")
        if table == "assignments" and "arm" in guessed:
            coded = guess_arm_values(sample_values(cand, guessed["arm"][0]))
            if coded:
                lines.append("[tables.assignments.values.arm]")
                for arm, value in coded.items():
                    lines.append(f'{arm} = "{value}"  # guessed from the values found')
                    report.append(f"  arm {arm} <- {value!r} (guessed)")
        lines.append("")
    lines += ["[economics]", "# margin_rate = 0.35  -- set your own: it stands in for products.unit_cost where that is missing",
              'currency = "EUR"  # guessed', "", "[windows]", "pre_period_days = 365", "after_days = 28", "",
              "[workspace]", 'path = ".liftlag"', ""]
    return "\n".join(lines), report


def write_starter_config(export_dir: Path, output: Path | None = None, force: bool = False, console=None) -> Path:
    export_dir = export_dir.expanduser().resolve()
    target = output or (export_dir / "liftlag.toml")
    if target.exists() and not force:
        raise ConfigError(f"{target} exists; pass --force to overwrite it, or -o to write elsewhere")
    candidates = find_candidates(export_dir)
    chosen = assign_tables(candidates)
    text, report = render_config(chosen)
    if output is not None and output.resolve().parent != export_dir:
        text = text.replace('path = "', f'path = "{export_dir.as_posix()}/')
        text = text.replace(f'path = "{export_dir.as_posix()}/.liftlag"', 'path = ".liftlag"')
    target.write_text(text, encoding="utf-8")
    if console is not None:
        console.print("[bold]what liftlag init guessed[/]")
        for line in report:
            console.print(f"  {line}", markup=False)
    return target
