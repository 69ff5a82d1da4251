"""Do a peer's outputs agree with liftlag's? Check counts and every panel, cell by cell.

Usage: python bench/peers/agreement.py WORKSPACE PEER_OUT_DIR

``WORKSPACE`` is a built liftlag workspace (``checked.duckdb``, ``panels.duckdb``); the peer's
folder holds ``check.json`` and ``<panel>.parquet`` (``pandas_peer.py``, ``polars_peer.py``).
Agreement means: the same rows read per table, the same rejected rows per table and reason, the
same warned rows per table and rule; and for each panel the peer wrote (all eight panels, keys
in ``export_config.PANEL_KEYS``), the same rows (each panel is matched on its key, which is the
same as comparing both tables sorted by it; no key may repeat), with every column equal:
floats within 1e-9 (relative to the larger value, or absolute below 1), dates and timestamps
after casting the peer's column to liftlag's type, nulls only where liftlag has nulls. Prints one
JSON line; exits 1 on any difference.

One difference is told apart rather than hidden: an order whose lines net to zero (a return
cancelling a purchase in the same order) sums to 0.0 or to -1e-15 depending on the order in which
the floats are added, so ``is_return`` (``net_amount < 0``) may flip, and with it that
customer's purchase count in customer_periods, customer_quarters and customer_quarter_behaviour
and a row of purchase_gaps.
``agree_but_zero_net_orders`` is the number of such orders when every difference is of this kind
(the orders differ only in is_return, both sums within 1e-9 of zero, and every other differing
row belongs to one of their customers); ``agree`` stays false.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import duckdb

sys.path.insert(0, str(Path(__file__).resolve().parent))
from export_config import PANEL_KEYS  # noqa: E402

TOLERANCE = 1e-9


def liftlag_check(workspace: Path) -> dict:
    con = duckdb.connect(str(workspace / "checked.duckdb"), read_only=True)
    try:
        summary = con.execute('SELECT "table", rows_read FROM check_summary WHERE configured').fetchall()
        rejects, warnings = {}, {}
        for table, reason, rows in con.execute('SELECT "table", reason, rows FROM rejects_summary').fetchall():
            rejects.setdefault(table, {})[reason] = int(rows)
        for table, rule, rows in con.execute('SELECT "table", rule, rows FROM warnings_summary').fetchall():
            warnings.setdefault(table, {})[rule] = int(rows)
    finally:
        con.close()
    return {"rows_read": {t: int(n) for t, n in summary}, "rejects": rejects, "warnings": warnings}


def compare_panel(con, name: str, peer_file: Path) -> dict:
    keys = PANEL_KEYS[name]
    types = dict(con.execute(f"SELECT column_name, column_type FROM (DESCRIBE ours.{name})").fetchall())
    con.execute(f"CREATE OR REPLACE TEMP VIEW peer AS SELECT * FROM read_parquet('{peer_file}')")
    peer_cols = {r[0] for r in con.execute("DESCRIBE peer").fetchall()}
    missing = [c for c in types if c not in peer_cols]
    if missing:
        return {"agree": False, "missing_columns": missing}
    casts = ", ".join(f'TRY_CAST("{c}" AS {t}) AS "{c}"' for c, t in types.items())
    con.execute(f"CREATE OR REPLACE TEMP TABLE theirs AS SELECT {casts} FROM peer")
    ours_rows = con.execute(f"SELECT count(*) FROM ours.{name}").fetchone()[0]
    their_rows = con.execute("SELECT count(*) FROM theirs").fetchone()[0]
    key_list = ", ".join(f'"{k}"' for k in keys)
    repeated = con.execute(f"SELECT count(*) FROM (SELECT {key_list} FROM theirs GROUP BY ALL HAVING count(*) > 1)").fetchone()[0]
    on = " AND ".join(f'a."{k}" = b."{k}"' for k in keys)
    tests = []
    for c, t in types.items():
        if c in keys:
            continue
        a, b = f'a."{c}"', f'b."{c}"'
        if t == "DOUBLE":
            same = (f"(({a} IS NULL AND {b} IS NULL) OR abs({a} - {b}) <= {TOLERANCE} * greatest(1, abs({a}), abs({b})))")
        else:
            same = f"({a} IS NOT DISTINCT FROM {b})"
        tests.append(f'count(*) FILTER (WHERE a."{keys[0]}" IS NOT NULL AND b."{keys[0]}" IS NOT NULL AND NOT coalesce({same}, false)) AS "{c}"')
    only = (f'count(*) FILTER (WHERE b."{keys[0]}" IS NULL) AS only_ours, '
            f'count(*) FILTER (WHERE a."{keys[0]}" IS NULL) AS only_theirs')
    row = con.execute(f"SELECT {only}, {', '.join(tests)} FROM ours.{name} AS a FULL JOIN theirs AS b ON {on}")
    names = [d[0] for d in row.description]
    values = dict(zip(names, row.fetchone()))
    differing = {c: int(n) for c, n in values.items() if c not in ("only_ours", "only_theirs") and n}
    result = {"rows": [int(ours_rows), int(their_rows)], "only_ours": int(values["only_ours"]),
              "only_theirs": int(values["only_theirs"]), "repeated_keys": int(repeated), "differing_cells": differing}
    result["agree"] = (ours_rows == their_rows and not values["only_ours"] and not values["only_theirs"]
                       and not repeated and not differing)
    if not result["agree"] and "customer_id" in keys:
        # Which customers the differences touch (to tell zero-net orders apart, see compare()).
        conds = [f'a."{keys[0]}" IS NULL', f'b."{keys[0]}" IS NULL']
        for c, t in types.items():
            if c in keys:
                continue
            a, b = f'a."{c}"', f'b."{c}"'
            same = (f"(({a} IS NULL AND {b} IS NULL) OR abs({a} - {b}) <= {TOLERANCE} * greatest(1, abs({a}), abs({b})))"
                    if t == "DOUBLE" else f"({a} IS NOT DISTINCT FROM {b})")
            conds.append(f"NOT coalesce({same}, false)")
        rows = con.execute(f"SELECT DISTINCT coalesce(a.customer_id, b.customer_id) FROM ours.{name} AS a "
                           f"FULL JOIN theirs AS b ON {on} WHERE {' OR '.join(conds)} LIMIT 10001").fetchall()
        result["customers_touched"] = sorted(r[0] for r in rows)
        if name == "orders":
            # An order whose lines net to zero: `net_amount < 0` (is_return) then depends on the
            # order in which floats are summed (a return line cancelling a purchase line).
            result["zero_net_flips"] = [list(r) for r in con.execute(
                f"SELECT a.customer_id, a.order_id, a.net_amount, b.net_amount FROM ours.orders AS a "
                f"JOIN theirs AS b ON {on} WHERE a.is_return <> b.is_return AND abs(a.net_amount) < {TOLERANCE} "
                f"AND abs(b.net_amount) < {TOLERANCE}").fetchall()]
    return result


def compare(workspace: Path, peer: Path) -> dict:
    theirs = json.loads((peer / "check.json").read_text())
    ours = liftlag_check(workspace)
    out = {"check": {k: ours[k] == theirs.get(k) for k in ("rows_read", "rejects", "warnings")}, "panels": {}}
    if not all(out["check"].values()):
        out["check_detail"] = {"liftlag": ours, "peer": {k: theirs.get(k) for k in ours}}
    if not (workspace / "panels.duckdb").exists():  # `liftlag check` only: the counts alone
        out["agree"] = all(out["check"].values())
        return out
    con = duckdb.connect()
    try:
        con.execute("SET TimeZone = 'UTC'")
        con.execute(f"ATTACH '{workspace / 'panels.duckdb'}' AS ours (READ_ONLY)")
        for name in PANEL_KEYS:
            f = peer / f"{name}.parquet"
            out["panels"][name] = compare_panel(con, name, f) if f.exists() else {"agree": None, "not_built": True}
    finally:
        con.close()
    out["agree"] = all(out["check"].values()) and all(p["agree"] is not False for p in out["panels"].values())
    if not out["agree"] and all(out["check"].values()):
        out["agree_but_zero_net_orders"] = _only_zero_net(out["panels"])
    return out


def _only_zero_net(panels: dict) -> int:
    """How many orders, if the only differences are zero-net orders flagged a return on one side
    only and what follows from them in the other panels (rows of the same customers); else 0."""
    orders = panels.get("orders", {})
    flips = orders.get("zero_net_flips", [])
    if not flips or orders.get("differing_cells") != {"is_return": len(flips)} or orders.get("only_ours") \
            or orders.get("only_theirs") or orders.get("repeated_keys"):
        return 0
    customers = {c for c, *_ in flips}
    for name, p in panels.items():
        if p.get("agree") is False and name != "orders":
            touched = p.get("customers_touched")
            if touched is None or len(touched) > 10000 or not set(touched) <= customers or p.get("repeated_keys"):
                return 0
    return len(flips)


def main() -> int:
    result = compare(Path(sys.argv[1]), Path(sys.argv[2]))
    print(json.dumps(result))
    return 0 if result["agree"] or result.get("agree_but_zero_net_orders") else 1


if __name__ == "__main__":
    sys.exit(main())
