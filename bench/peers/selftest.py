"""Do the peers compute what liftlag computes on an export where the check rules fire?

Usage: python bench/peers/selftest.py [--parquet]

The generated benchmark exports are clean (nothing is rejected), so agreement on them says
nothing about the rejection rules. This writes the test suite's hand-made messy export (the
rows of ``tests/spark/test_parity.py``: blank and unparseable values, a duplicate row, an
unknown promotion, a date beyond the horizon, a duplicate promotion key, a value outside the
allowed codes, a customer in both arms, a future time, a return with a positive amount, a net
above list, a NaN amount, a time with a UTC offset; without its customers and products
tables, which the peers do not read), gives its order lines a sales channel (some lines none,
one order split over two channels, a return alone in its channel on its day) so that
segment_days has rows, builds it with liftlag, runs both peers on it and compares everything
with ``agreement.py``. Not timed. Prints one line per peer with the rows of each panel; exits 1
on any difference.
"""

from __future__ import annotations

import argparse
import json
import re
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(HERE))
import agreement  # noqa: E402
from tests.conftest import TRANSACTION_COLUMNS, write_csv, write_export  # noqa: E402
from tests.spark.test_parity import (  # noqa: E402
    INVERTED, MESSY_ASSIGNMENTS, MESSY_PROMOTIONS, MESSY_TRANSACTIONS)

# The sales channel of some order lines, by (order, product); the other lines have none.
CHANNELS = {("o1", "p1"): "web", ("o1", "p2"): "store", ("o2", "p1"): "web", ("o3", "p2"): "web",
            ("o4", "p1"): "store", ("o5", "p2"): "store", ("o6", "p1"): "web", ("o6", "p2"): "web",
            ("o8", "p2"): "store", ("o9", "p1"): "store", ("o9", "p2"): "web", ("o18", "p1"): "web",
            ("o21", "p1"): "phone", ("o13", "p1"): "web"}


def with_channel(folder: Path, parquet: bool) -> None:
    """Add the channel column to the export's order lines (then convert them to Parquet if asked),
    as ``write_export`` does for the other columns."""
    csv_path = folder / "transactions.csv"
    rows = [row + [CHANNELS.get((row[0], row[3]), "")] for row in MESSY_TRANSACTIONS]
    write_csv(csv_path, TRANSACTION_COLUMNS + ["channel"], rows)
    if parquet:
        import duckdb

        con = duckdb.connect()
        con.execute("COPY (SELECT * FROM read_csv(?)) TO ? (FORMAT parquet)",
                    [str(csv_path), str(folder / "transactions.parquet")])
        con.close()
        csv_path.unlink()


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--parquet", action="store_true", help="order lines as Parquet instead of CSV")
    args = ap.parse_args()
    liftlag = str(Path(sys.executable).with_name("liftlag"))
    failed = False
    with tempfile.TemporaryDirectory(prefix="peers_selftest_") as tmp:
        tmp = Path(tmp)
        # build: every panel; check only: with a promotion that ends before it starts, which makes
        # the export unusable for a build (liftlag stops), so only the counts are compared.
        for step, promotions in (("build", MESSY_PROMOTIONS), ("check", MESSY_PROMOTIONS + [INVERTED])):
            config = write_export(tmp / step, transactions=MESSY_TRANSACTIONS, promotions=promotions,
                                  assignments=MESSY_ASSIGNMENTS, parquet=args.parquet)
            with_channel(config.parent, args.parquet)
            text = re.sub(r"(?ms)^\[tables\.(customers|products)\]\npath = \"[^\"]+\"\n", "", config.read_text())
            # A third of the rows are faulty on purpose: let the sanity gates pass them.
            config.write_text(text + "\n[gates]\nmin_lines_accepted_share = 0.5\n")
            run = subprocess.run([liftlag, step, "-c", str(config)], capture_output=True, text=True)
            if step == "build" and run.returncode != 0:
                print(run.stdout[-2000:], run.stderr[-2000:])
                return 1
            for peer in ("pandas", "polars"):
                out = tmp / f"{step}_{peer}"
                run = subprocess.run([sys.executable, str(HERE / f"{peer}_peer.py"), str(config.parent), str(out)],
                                     capture_output=True, text=True)
                if run.returncode != 0:
                    print(f"{step}, {peer}: failed\n{run.stderr[-2000:]}")
                    failed = True
                    continue
                found = agreement.compare(config.parent / ".liftlag", out)
                summary = json.loads((out / "check.json").read_text())
                rejects = summary["rejects"]
                rows = ", ".join(f"{name} {n}" for name, n in summary.get("rows", {}).items())
                panels = f"every panel: {rows}" if found["panels"] else "counts only"
                print(f"{step}, {peer}: {'agrees' if found['agree'] else 'DISAGREES'} ({panels}); "
                      f"rejects {json.dumps(rejects, sort_keys=True)}")
                if not found["agree"]:
                    print(json.dumps(found, indent=1))
                    failed = True
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
