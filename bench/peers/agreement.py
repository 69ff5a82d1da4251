"""Do a peer's outputs agree with liftlag's? Check counts and every panel, cell by cell.

Usage: python bench/peers/agreement.py WORKSPACE PEER_OUT_DIR

``WORKSPACE`` is a built liftlag workspace (``checked.duckdb``, ``panels.duckdb``); the peer's
folder holds ``check.json`` and ``<panel>.parquet`` (``pandas_peer.py``, ``polars_peer.py``).
Agreement means: the same rows read per table, the same rejected rows per table and reason, the
same warned rows per table and rule; and for each panel the peer wrote, the same rows (each
panel is matched on its key, which is the same as comparing both tables sorted by it; no key
may repeat), with every column equal: floats within 1e-9 (relative to the larger value, or
absolute below 1), dates and timestamps after casting the peer's column to liftlag's type,
nulls only where liftlag has nulls. Prints one JSON line; exits 1 on any difference.
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
    return out


def main() -> int:
    result = compare(Path(sys.argv[1]), Path(sys.argv[2]))
    print(json.dumps(result))
    return 0 if result["agree"] else 1


if __name__ == "__main__":
    sys.exit(main())
