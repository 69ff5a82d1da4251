"""Guess which file is which table and which column is which contract column, with evidence.

A guess rests on the column's name (known synonyms; camelCase and punctuation normalised) and on
its values: dates by parsing, numbers, the allowed values of a coded column (audience, mechanic,
arm), keys whose values are another table's key values (promotion codes on the order lines are
the promotions' key), and amounts for which list - discount = paid holds. Every guess carries the
evidence for it and says whether it is sure; a guess from a resembling name alone is never sure.
"""

from __future__ import annotations

import difflib
import itertools
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..contract import INPUT_TABLES
from .files import Candidate
from .profile import ColumnProfile, normalise, profile, sample

SYNONYMS: dict[str, tuple[str, ...]] = {
    "order_id": ("order_id", "order", "order_no", "order_number", "basket", "basket_id", "basket_no",
                 "invoice", "invoice_no", "invoice_number", "receipt", "receipt_id", "receipt_no",
                 "transaction_id", "ticket", "ticket_id", "ticket_no"),
    "customer_id": ("customer_id", "customer", "client", "client_id", "client_ref", "member_id", "member",
                    "shopper", "shopper_id", "shopper_ref", "account_id", "user_id", "buyer_id", "cust_id",
                    "customer_key", "customer_ref", "customer_no", "customer_number"),
    "ordered_at": ("ordered_at", "order_date", "order_ts", "created", "created_at", "date", "datetime",
                   "timestamp", "sold_at", "sold_on", "purchased_at", "transaction_date", "order_time"),
    "product_id": ("product_id", "product", "sku", "item", "item_id", "article", "article_id", "ean", "upc",
                   "product_key", "product_code", "item_code", "article_no"),
    "quantity": ("quantity", "qty", "units", "number_of_items", "count", "pieces", "quantity_sold"),
    "net_amount": ("net_amount", "net", "paid", "amount", "revenue", "sales", "value", "price_paid",
                   "dollar_value", "total", "line_total", "amount_paid", "paid_amount", "paid_value",
                   "net_value", "net_sales"),
    "list_amount": ("list_amount", "gross", "gross_amount", "list_price_total", "list", "regular_amount",
                    "full_price", "gross_value", "list_price", "list_value", "gross_sales"),
    "discount_amount": ("discount_amount", "discount", "markdown", "rebate", "promo_amount", "discount_value"),
    "promotion_id": ("promotion_id", "promotion", "promo", "promo_id", "promo_code", "coupon", "coupon_id",
                     "coupon_code", "campaign_id", "offer_id", "deal_id", "promotion_code"),
    "channel": ("channel", "sales_channel", "source"),
    "store_id": ("store_id", "store", "shop_id", "location_id", "warehouse"),
    "starts_at": ("starts_at", "start", "start_date", "starts", "valid_from", "begin", "from_date", "first_day",
                  "start_on", "starts_on"),
    "ends_at": ("ends_at", "end", "end_date", "ends", "valid_to", "until", "to_date", "last_day", "end_on",
                "ends_on", "valid_until"),
    "mechanic": ("mechanic", "type", "promo_type", "offer_type", "kind", "mechanism", "discount_type"),
    "depth": ("depth", "percent", "pct_off", "discount_rate", "discount_pct", "rate", "size"),
    "audience": ("audience", "targeting", "target_type", "scope"),
    "cost_per_redemption": ("cost_per_redemption", "redemption_cost", "cost"),
    "name": ("name", "title", "label", "description"),
    "arm": ("arm", "group", "variant", "test_group", "treatment_group", "cell", "bucket"),
    "assigned_at": ("assigned_at", "assigned", "sent_at", "assignment_date", "issued_at", "send_date", "assigned_on",
                    "sent_on", "sent"),
    "first_seen_at": ("first_seen_at", "signup_date", "registered_at", "created_at", "first_order_date",
                      "joined_at", "first_seen"),
    "category": ("category", "department", "product_group", "family"),
    "unit_cost": ("unit_cost", "cost", "cogs", "cost_price", "purchase_price"),
}

TABLE_HINTS: dict[str, tuple[str, ...]] = {
    "transactions": ("transaction", "order", "line", "sales", "receipt", "basket", "invoice", "ticket"),
    "promotions": ("promotion", "promo", "offer", "deal", "coupon_def", "campaign"),
    "assignments": ("assignment", "assign", "arm", "holdout", "allocation", "target", "group"),
    "customers": ("customer", "client", "member", "shopper"),
    "products": ("product", "item", "sku", "article", "catalog"),
}

# Export values read as contract values (compared lower-case, after normalising).
VALUE_WORDS: dict[str, dict[str, tuple[str, ...]]] = {
    "arm": {
        "treatment": ("treatment", "treated", "treat", "t", "test", "target", "targeted", "1", "true", "yes", "coupon"),
        "holdout": ("holdout", "hold", "h", "control", "c", "0", "false", "no", "ctrl", "held_out", "hold_out"),
    },
    "audience": {
        "targeted": ("targeted", "target", "personal", "personalised", "personalized", "individual", "one_to_one"),
        "broadcast": ("broadcast", "sitewide", "site_wide", "mass", "public", "everyone", "blanket", "all"),
    },
    "mechanic": {
        "percent_off": ("percent_off", "percent", "pct", "pct_off", "percentage", "percentage_off"),
        "amount_off": ("amount_off", "amount", "fixed", "fixed_amount", "money_off", "cash_off", "value_off"),
        "bundle": ("bundle", "bogo", "multibuy", "multi_buy", "buy_x_get_y"),
        "free_shipping": ("free_shipping", "shipping", "free_delivery", "delivery"),
        "other": ("other",),
    },
}

MIN_SCORE = 0.55
# Contract columns that are a table's own key (one row each).
KEYS = {"promotions": "promotion_id", "customers": "customer_id", "products": "product_id"}


@dataclass
class Evidence:
    score: float
    sure: bool
    text: str


@dataclass
class Guess:
    """One contract column's guess: the export column, how strong, whether sure, and why."""

    column: str
    score: float
    sure: bool
    evidence: list[str]


@dataclass
class TableGuess:
    table: str
    candidate: Candidate
    profiles: dict[str, ColumnProfile]
    columns: dict[str, Guess] = field(default_factory=dict)
    values: dict[str, tuple[dict[str, str], bool, str]] = field(default_factory=dict)  # col -> (map, sure, why)
    formats: dict[str, tuple[str, bool, str]] = field(default_factory=dict)  # col -> (format, sure, why)
    sample: pd.DataFrame | None = None  # the rows the profiles were made from


def name_match(export_name: str, contract_column: str) -> tuple[float, bool]:
    """(score, exact): 1 for a known synonym (earlier ones slightly stronger), else a resemblance below 0.8."""
    name = normalise(export_name)
    best = 0.0
    for i, syn in enumerate(SYNONYMS.get(contract_column, (contract_column,))):
        if name == syn:
            return 1.0 - i * 0.001, True
        best = max(best, difflib.SequenceMatcher(None, name, syn).ratio() * 0.8)
    return (best if best >= 0.5 else 0.0), False  # a faint resemblance is no evidence


def value_map(column: str, distinct: set[str]) -> dict[str, str] | None:
    """contract value -> export value when every export value reads as one contract value, else None."""
    words = VALUE_WORDS[column]
    found: dict[str, str] = {}
    for value in sorted(distinct):
        key = normalise(value) or value.strip().lower()
        hits = [c for c, ws in words.items() if key in ws]
        if len(hits) != 1 or hits[0] in found:
            return None
        found[hits[0]] = value
    return found


def _shown(values, at_most: int = 4) -> str:
    values = sorted(values)
    return ", ".join(values[:at_most]) + (f", … ({len(values)} in all)" if len(values) > at_most else "")


def column_evidence(table: str, contract_column: str, prof: ColumnProfile) -> list[Evidence] | None:
    """The evidence one export column gives for one contract column; None when its values cannot fit."""
    contract = INPUT_TABLES[table].column(contract_column)
    name_score, exact = name_match(prof.name, contract_column)
    out: list[Evidence] = []
    if name_score > 0:
        out.append(Evidence(name_score, False,
                            f"name '{prof.name}' is a usual name for it" if exact
                            else f"name '{prof.name}' resembles {contract_column} ({name_score:.0%})"))
    if prof.present == 0:
        out.append(Evidence(0.0, False, "no values in the sample to confirm it"))
        return out
    if contract.type == "TIMESTAMP":
        if not prof.is_date:
            return None
        fmt = f" with format {prof.date_format}" if prof.date_format else ""
        out.append(Evidence(0.35, exact, f"{prof.date_share:.0%} of its values parse as dates{fmt}"))
    elif contract.type == "DOUBLE":
        if not prof.is_number:
            return None
        out.append(Evidence(0.1, exact, f"numbers on {prof.numeric_share:.0%} of rows"))
        if contract_column == "quantity":
            numbers = prof.numbers.dropna()
            if prof.integer_share >= 0.99 and len(numbers) and float(np.median(numbers.abs())) <= 20:
                out.append(Evidence(0.3, exact, f"small whole numbers (median {np.median(numbers):g})"))
            elif not exact:  # amounts are numbers too; a quantity by name alone may be a weight
                return None
    else:  # text: ids, codes, names
        if prof.is_date:
            return None
        if contract_column.endswith("_id") and prof.is_number and prof.integer_share < 0.99:
            return None  # 0.37 is an amount or a score, not an id
        if exact:
            out.append(Evidence(0.0, True, ""))  # a usual name, and text fits any id or code
        allowed = INPUT_TABLES[table].allowed_values.get(contract_column)
        if allowed is not None:
            lower = {v.strip().lower() for v in prof.distinct}
            if lower and lower <= set(allowed):
                out.append(Evidence(1.0, True, f"its values ({_shown(prof.distinct)}) are allowed {contract_column} values"))
            elif len(prof.distinct) <= 12 and (mapping := value_map(contract_column, prof.distinct)) is not None:
                shown = ", ".join(f"{k} = {v}" for k, v in mapping.items())
                out.append(Evidence(0.6, name_score >= 0.5, f"its values read as {contract_column} values ({shown})"))
            elif len(prof.distinct) > 20:
                return None  # a coded column has a few values
        if KEYS.get(table) == contract_column:
            if prof.is_key:
                out.append(Evidence(0.1, False, f"unique on every sampled row ({prof.present:,})"))
            elif exact and table == "promotions":  # repeated rows are for `liftlag check` to reject
                out.append(Evidence(0.0, False, "some values repeat in the sample"))
            # Otherwise a file whose customer (or product) column repeats is not that table.
            else:
                return None
    return out


def total(evidence: list[Evidence]) -> tuple[float, bool]:
    return sum(e.score for e in evidence), any(e.sure for e in evidence)


def guess_columns(table: str, profiles: dict[str, ColumnProfile],
                  extra: dict[tuple[str, str], list[Evidence]] | None = None) -> dict[str, Guess]:
    """contract column -> Guess, greedily by score; each export column used once."""
    extra = extra or {}
    scored = []
    for c in INPUT_TABLES[table].columns:
        for name, prof in profiles.items():
            evidence = column_evidence(table, c.name, prof)
            if evidence is None:
                continue
            evidence = evidence + extra.get((c.name, name), [])
            score, sure = total(evidence)
            scored.append((score, c.name, name, sure, evidence))
    scored.sort(key=lambda s: (-s[0], s[1], s[2]))
    used_contract, used_export, out = set(), set(), {}
    for score, cname, ename, sure, evidence in scored:
        if score < MIN_SCORE or cname in used_contract or ename in used_export:
            continue
        # A guess that rests on the name's resemblance alone is never sure.
        out[cname] = Guess(ename, score, sure, [e.text for e in evidence if e.text])
        used_contract.add(cname)
        used_export.add(ename)
    return out


def table_score(table: str, cand: Candidate, profiles: dict[str, ColumnProfile]) -> tuple[float, float]:
    """(score, share of the table's required columns found) of a candidate for a table."""
    guessed = guess_columns(table, profiles)
    required = INPUT_TABLES[table].required
    covered = sum(1 for r in required if r in guessed) / len(required)
    hint = 0.3 if any(h in cand.path.lower() for h in TABLE_HINTS[table]) else 0.0
    return covered + hint + 0.01 * len(guessed), covered


def assign_tables(candidates: list[Candidate], profiles: list[dict[str, ColumnProfile]]) -> dict[str, int]:
    """table -> index of its candidate, greedily by score."""
    pairs = sorted(((*table_score(t, c, p), t, i) for t in INPUT_TABLES for i, (c, p) in enumerate(zip(candidates, profiles))),
                   reverse=True)
    chosen: dict[str, int] = {}
    used: set[int] = set()
    for score, covered, table, i in pairs:
        if table in chosen or i in used or covered < 0.5:
            continue
        chosen[table] = i
        used.add(i)
    return chosen


# --- evidence between columns and tables ---------------------------------------------------------


def _codes(prof: ColumnProfile) -> bool:
    """Whether a column can hold ids or codes: text, or whole numbers; not dates."""
    if prof.is_date or not prof.distinct:
        return False
    if prof.is_number:  # whole numbers only, and more than one (a lone 1 matches too easily)
        return prof.integer_share >= 0.99 and len(prof.distinct) >= 2
    return True


def _coverage(child: ColumnProfile, parent: ColumnProfile) -> tuple[float, int, int]:
    found = len(child.distinct & parent.distinct)
    return found / max(len(child.distinct), 1), found, len(child.distinct)


def relate_keys(guesses: dict[str, TableGuess], extra: dict[str, dict]) -> None:
    """Keys whose values are another table's key values: promotion codes, customers, products."""
    def add(table, contract_column, column, ev):
        extra.setdefault(table, {}).setdefault((contract_column, column), []).append(ev)

    claimed: dict[str, set[str]] = {t: set() for t in guesses}
    promotions = guesses.get("promotions")
    if promotions is not None:
        keys = [p for p in promotions.profiles.values() if p.is_key and _codes(p)]
        for child_table in ("transactions", "assignments"):
            child = guesses.get(child_table)
            if child is None:
                continue
            best = None
            for key in keys:
                for col in child.profiles.values():
                    if not _codes(col) or (col.is_number and name_match(col.name, "promotion_id")[0] < 0.5):
                        continue  # small whole numbers (quantities) overlap any numeric key by chance
                    share, found, of = _coverage(col, key)
                    if share >= 0.5 and (best is None or (share, found) > best[0]):
                        best = ((share, found), key, col, of)
            if best is None:
                continue
            (share, found), key, col, of = best
            sure = share >= 0.9
            add(child_table, "promotion_id", col.name, Evidence(1.0 if sure else 0.5, sure,
                f"{found:,} of its {of:,} distinct values are promotions.{key.name} values"))
            add("promotions", "promotion_id", key.name, Evidence(1.0 if sure else 0.5, sure,
                f"its values are the {child_table}' {col.name} values ({found:,} of {of:,} found)"))
            claimed[child_table].add(col.name)
            claimed["promotions"].add(key.name)
    for parent_table, contract_column, children in (
        ("transactions", "customer_id", ("assignments", "customers")),
        ("transactions", "product_id", ("products",)),
    ):
        parent = guesses.get(parent_table)
        if parent is None:
            continue
        # The parent's column: the one its names point to, else one its names leave unused.
        by_name = guess_columns(parent_table, parent.profiles)
        if contract_column in by_name:
            allowed = {by_name[contract_column].column}
        else:
            allowed = set(parent.profiles) - {g.column for g in by_name.values()}
        for child_table in children:
            child = guesses.get(child_table)
            if child is None:
                continue
            best = None
            for pcol in parent.profiles.values():
                if pcol.name in claimed[parent_table] or pcol.name not in allowed or not _codes(pcol):
                    continue
                for ccol in child.profiles.values():
                    if ccol.name in claimed[child_table] or not _codes(ccol):
                        continue
                    share, found, of = _coverage(ccol, pcol)
                    # The order-line sample may miss some customers: half found is evidence.
                    if share >= 0.5 and found >= 2 and (best is None or (share, found) > best[0]):
                        best = ((share, found), pcol, ccol, of)
            if best is None:
                continue
            (share, found), pcol, ccol, of = best
            sure = share >= 0.8
            add(child_table, contract_column, ccol.name, Evidence(0.8 if sure else 0.4, sure,
                f"{found:,} of its {of:,} distinct values are {parent_table}.{pcol.name} values"))
            add(parent_table, contract_column, pcol.name, Evidence(0.8 if sure else 0.4, sure,
                f"holds {found:,} of the {of:,} {child_table}.{ccol.name} values"))


def lone_date(tg: TableGuess, extra: dict) -> None:
    """A file with one date column, for a table with one required time: likely that time (not sure)."""
    times = [c.name for c in INPUT_TABLES[tg.table].columns if c.type == "TIMESTAMP" and c.required]
    dates = [p.name for p in tg.profiles.values() if p.is_date]
    if len(times) == 1 and len(dates) == 1:
        extra.setdefault(tg.table, {}).setdefault((times[0], dates[0]), []).append(
            Evidence(0.3, False, f"the file's only date column, and {tg.table} have one required time"))


def relate_amounts(tg: TableGuess, extra: dict) -> None:
    """list - discount = paid on most rows: which amount is paid (net), which list, which discount."""
    def add(contract_column, column, ev):
        extra.setdefault("transactions", {}).setdefault((contract_column, column), []).append(ev)

    numbers = {n: p.numbers for n, p in tg.profiles.items() if p.is_number and p.numbers is not None
               and name_match(n, "quantity")[0] < 0.99}
    best = None
    for lst, disc, paid in itertools.permutations(numbers, 3):
        frame = np.column_stack([numbers[lst], numbers[disc], numbers[paid]])
        frame = frame[~np.isnan(frame).any(axis=1)]
        if len(frame) < 5 or not (frame[:, 1] != 0).any():
            continue
        holds = np.abs(frame[:, 0] - frame[:, 1] - frame[:, 2]) <= 0.005 * np.maximum(1, np.abs(frame[:, 0]))
        share = float(holds.mean())
        # list - discount = paid and list - paid = discount both hold: paid is the larger one.
        if share >= 0.9 and np.abs(frame[:, 2]).sum() > np.abs(frame[:, 1]).sum():
            if best is None or share > best[0]:
                best = (share, lst, disc, paid, len(frame))
    if best is not None:
        share, lst, disc, paid, n = best
        why = f"{lst} - {disc} = {paid} on {share:.0%} of {n:,} sampled rows"
        add("net_amount", paid, Evidence(1.0, True, why))
        add("list_amount", lst, Evidence(1.0, True, why))
        add("discount_amount", disc, Evidence(1.0, True, why))
        return
    # Two amounts without a discount column: paid <= list everywhere, lower on some rows.
    pair = None
    for lst, paid in itertools.permutations(numbers, 2):
        frame = np.column_stack([numbers[lst], numbers[paid]])
        frame = frame[~np.isnan(frame).any(axis=1)]
        if len(frame) < 5:
            continue
        le = float((frame[:, 1] <= frame[:, 0] + 1e-9).mean())
        lower = float((frame[:, 1] < frame[:, 0] - 1e-9).mean())
        if le >= 0.98 and 0 < lower < 0.9 and (pair is None or le > pair[0]):
            pair = (le, lst, paid, lower, len(frame))
    if pair is not None:
        le, lst, paid, lower, n = pair
        why = (f"{paid} <= {lst} on {le:.0%} of {n:,} sampled rows, lower on {lower:.0%} "
               f"(the discounted lines; equal on the others)")
        add("net_amount", paid, Evidence(0.9, True, why))
        add("list_amount", lst, Evidence(0.9, True, why))


def relate_dates(tg: TableGuess, extra: dict) -> None:
    """starts_at <= ends_at on every row: which date starts a promotion and which ends it."""
    dates = [p for p in tg.profiles.values() if p.is_date]
    if len(dates) < 2:
        return
    parsed = {p.name: _parse(tg, p) for p in dates}
    ordered = []
    for a, b in itertools.permutations(parsed, 2):
        both = parsed[a].notna() & parsed[b].notna()
        if both.sum() >= 2 and (parsed[a][both] <= parsed[b][both]).all() and (parsed[a][both] < parsed[b][both]).any():
            ordered.append((a, b, int(both.sum())))
    if len(ordered) == 1 or (len(ordered) > 1 and len({o[:2] for o in ordered}) == 1):
        a, b, n = ordered[0]
        why = f"{a} <= {b} on every sampled row ({n:,})"
        extra.setdefault("promotions", {}).setdefault(("starts_at", a), []).append(Evidence(0.5, True, why))
        extra.setdefault("promotions", {}).setdefault(("ends_at", b), []).append(Evidence(0.5, True, why))


def _parse(tg: TableGuess, prof: ColumnProfile) -> pd.Series:
    text = tg.sample[prof.name].str.strip()
    if prof.date_format:
        return pd.to_datetime(text, format=prof.date_format, errors="coerce")
    return pd.to_datetime(text, errors="coerce", utc=True, format="mixed")


def finish(tg: TableGuess) -> None:
    """Value maps of the coded columns and formats of the dates, for the guessed columns."""
    for cname, guess in tg.columns.items():
        prof = tg.profiles[guess.column]
        contract = INPUT_TABLES[tg.table]
        if cname in contract.allowed_values and prof.distinct:
            if not {v for v in prof.distinct} <= set(contract.allowed_values[cname]):
                mapping = value_map(cname, prof.distinct)
                if mapping is not None:
                    mapping = {k: v for k, v in mapping.items() if k != v}
                    # Sure only when the values are the contract's own words in another case
                    # (Targeted); a code (T, C) or another word (fixed) is a reading to confirm.
                    sure = all(normalise(v) == k for k, v in mapping.items())
                    read = ", ".join(f"{v} as {k}" for k, v in mapping.items())
                    if mapping:
                        tg.values[cname] = (mapping, sure, f"values found: {_shown(prof.distinct)}, read {read}")
                else:
                    tg.values[cname] = ({}, False, f"values found: {_shown(prof.distinct)}; map each one "
                                                  f"to one of {', '.join(contract.allowed_values[cname])}")
        if contract.column(cname).type == "TIMESTAMP" and prof.date_format:
            tg.formats[cname] = (prof.date_format, not prof.date_note,
                                 prof.date_note or f"{prof.date_share:.0%} of sampled values parse with it")


def guess_export(candidates: list[Candidate], passed_over: dict | None = None) -> dict[str, TableGuess]:
    """Every table's guess: which candidate, which columns (with evidence), value maps and formats.

    ``passed_over`` (if given) receives, for an optional table, the candidate that resembled it
    but lacked required columns, with those columns.
    """
    passed_over = {} if passed_over is None else passed_over
    samples = [sample(c) for c in candidates]
    profiles = [profile(s, dict(c.columns)) for s, c in zip(samples, candidates)]
    chosen = assign_tables(candidates, profiles)
    guesses = {}
    for table, i in chosen.items():
        tg = TableGuess(table, candidates[i], profiles[i], sample=samples[i])
        guesses[table] = tg
    extra: dict[str, dict] = {}
    for table, tg in guesses.items():
        lone_date(tg, extra)
    relate_keys(guesses, extra)
    if "transactions" in guesses:
        relate_amounts(guesses["transactions"], extra)
    if "promotions" in guesses:
        relate_dates(guesses["promotions"], extra)
    for table, tg in list(guesses.items()):
        tg.columns = guess_columns(table, tg.profiles, extra.get(table))
        finish(tg)
        # A required table is taken with half its columns found (the rest are asked for); an
        # optional one only with all of them, so that, say, a results file of customer scores is
        # not taken for campaign assignments.
        missing = [c for c in INPUT_TABLES[table].required if c not in tg.columns]
        if INPUT_TABLES[table].optional and missing:
            del guesses[table]
            passed_over[table] = (tg.candidate, missing)
    return guesses
