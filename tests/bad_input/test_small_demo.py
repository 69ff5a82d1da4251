"""Bad input that needs campaigns with enough customers to read out: a small demo export (200
customers, generated from the demo scenario) edited so that one promotion id holds rich markup
(`[/]`), one customer is in both arms of another campaign, and only those two campaigns are
targeted (the others are turned into broadcast sales, which keeps ``campaign --all`` short).
Common practice, no source.
"""

from __future__ import annotations

import csv
import glob
import os
from pathlib import Path

import duckdb
import pytest

from tests.bad_input.harness import assert_no_traceback, run_cli

MARKUP_ID = "FW[/]T01"


@pytest.fixture(scope="module")
def small_demo(tmp_path_factory) -> Path:
    from toolkit import cli
    from toolkit.demo.generate import generate

    folder = tmp_path_factory.mktemp("small_demo")
    cfg = Path(generate(folder / "export", customers=200))
    export = cfg.parent

    def edit(path: Path, change) -> None:
        with path.open(newline="", encoding="utf-8") as fh:
            rows = list(csv.DictReader(fh))
        header = list(rows[0])
        for row in rows:
            change(row)
        with path.open("w", newline="", encoding="utf-8") as fh:
            writer = csv.DictWriter(fh, header)
            writer.writeheader()
            writer.writerows(rows)

    def promotions(row):
        if row["promotion_id"] == "FW-T01":
            row["promotion_id"] = MARKUP_ID
        elif row["promotion_id"] != "FW-T02":
            row["audience"] = "broadcast"

    edit(export / "promotions.csv", promotions)
    edit(export / "assignments.csv",
         lambda row: row.update(promotion_id=MARKUP_ID) if row["promotion_id"] == "FW-T01" else None)
    with (export / "assignments.csv").open(newline="") as fh:
        first_t02 = next(r for r in csv.DictReader(fh) if r["promotion_id"] == "FW-T02")
    other_arm = "H" if first_t02["arm"] == "T" else "T"
    with (export / "assignments.csv").open("a", newline="") as fh:
        csv.writer(fh).writerow(["FW-T02", first_t02["customer_id"], other_arm, first_t02["assigned_at"]])
    con = duckdb.connect()
    for f in glob.glob(str(export / "transactions" / "**" / "*.parquet"), recursive=True):
        con.execute("COPY (SELECT * REPLACE (replace(promo_code, 'FW-T01', ?) AS promo_code) FROM read_parquet(?)) "
                    "TO ? (FORMAT parquet)", [MARKUP_ID, f, f + ".tmp"])
        os.replace(f + ".tmp", f)
    con.close()
    assert cli.main(["build", "-c", str(cfg)]) == 0
    return cfg


def test_promotion_id_with_markup_is_printed_as_written(small_demo, tmp_path, capsys):
    """Issue: a promotion id containing `[/]` crashed the readout with rich's MarkupError."""
    code, out = run_cli(["campaign", MARKUP_ID, "-c", small_demo, "--out", tmp_path], capsys)
    assert_no_traceback(out)
    assert code == 0, out
    assert f"campaign {MARKUP_ID}" in out


def test_campaign_all_writes_every_readout_when_an_id_holds_markup(small_demo, tmp_path, capsys):
    """Issue: with such an id, `campaign --all` wrote nothing."""
    code, out = run_cli(["campaign", "--all", "-c", small_demo, "--out", tmp_path], capsys)
    assert_no_traceback(out)
    assert code == 0, out
    effects = duckdb.connect().execute("SELECT DISTINCT promotion_id FROM read_parquet(?) ORDER BY 1",
                                       [str(tmp_path / "campaign_effects.parquet")]).fetchall()
    assert effects == [("FW-T02",), (MARKUP_ID,)]


def test_readout_mentions_customers_in_both_arms(small_demo, tmp_path, capsys):
    code, out = run_cli(["campaign", "FW-T02", "-c", small_demo, "--out", tmp_path], capsys)
    assert code == 0, out
    assert "1 customer was assigned to both the treatment and the holdout" in out
    notes = duckdb.connect().execute("SELECT message FROM read_parquet(?)",
                                     [str(tmp_path / "campaign_notes.parquet")]).fetchall()
    assert any("both the treatment and the holdout" in m for (m,) in notes)


def test_reject_examples_name_the_partition_folder(small_demo, tmp_path, capsys):
    """Issue: a reject example named `part-0.parquet` without its partition folder (every month has one)."""
    import shutil

    export = tmp_path / "export"
    shutil.copytree(small_demo.parent, export, ignore=shutil.ignore_patterns(".liftlag"))
    first = sorted(glob.glob(str(export / "transactions" / "*" / "*.parquet")))[0]
    con = duckdb.connect()
    con.execute("COPY (SELECT * EXCLUDE (file_row_number) REPLACE (CASE WHEN file_row_number = 0 THEN NULL "
                "ELSE shopper_ref END AS shopper_ref) FROM read_parquet(?, file_row_number = true)) TO ? (FORMAT parquet)",
                [first, first + ".tmp"])
    con.close()
    os.replace(first + ".tmp", first)
    code, out = run_cli(["check", "-c", export / "liftlag.toml"], capsys)
    assert code == 0, out
    folder = Path(first).parent.name
    assert f"{folder}/{Path(first).name} row 1" in out
