"""An export of broadcast sales only (promotions and order lines, no assignments file): the config
loads, check, build and timing run, and the campaign readout says there is nothing to read out.

Common practice, no source: a shop that runs only sitewide sales has no campaign assignments.
"""

from __future__ import annotations

import csv
import re

import duckdb
import pandas as pd
import pytest

from toolkit import cli, config
from toolkit.contract import PANELS
from toolkit.demo import generate
from tests.conftest import write_export


def broadcast_only(folder):
    """A small demo export turned into one without targeted campaigns; returns its config path."""
    cfg = generate(folder, customers=1500, seed=11)
    with (folder / "promotions.csv").open() as fh:
        promotions = list(csv.DictReader(fh))
    targeted = [p["promotion_id"] for p in promotions if p["audience"] == "targeted"]
    assert targeted and len(targeted) < len(promotions)
    with (folder / "promotions.csv").open("w", newline="") as fh:
        writer = csv.DictWriter(fh, fieldnames=list(promotions[0]))
        writer.writeheader()
        writer.writerows(p for p in promotions if p["audience"] == "broadcast")
    # The coupon lines become full-price lines: no promotion, no discount.
    con = duckdb.connect()
    con.execute("SET VARIABLE targeted = ?", [targeted])
    for path in sorted((folder / "transactions").rglob("*.parquet")):
        coupon = "list_contains(getvariable('targeted'), promo_code)"
        frame = con.execute(
            f"SELECT * REPLACE (CASE WHEN {coupon} THEN NULL ELSE promo_code END AS promo_code, "
            f"CASE WHEN {coupon} THEN list_price_total ELSE paid END AS paid, "
            f"CASE WHEN {coupon} THEN 0 ELSE discount END AS discount) "
            f"FROM read_parquet(?, hive_partitioning = false)", [str(path)]).df()
        con.register("frame", frame)
        con.execute(f"COPY frame TO '{path.as_posix()}' (FORMAT parquet)")
        con.unregister("frame")
    con.close()
    (folder / "assignments.csv").unlink()
    text = cfg.read_text()
    text = re.sub(r"\[tables\.assignments\].*?(?=\n\[tables\.customers\])", "", text, flags=re.S)
    assert "assignments" not in text
    cfg.write_text(text + "\n[timing]\nbootstrap_rounds = 5\ncox_sample_customers = 300\n")
    return cfg


@pytest.fixture(scope="module")
def sale_only(tmp_path_factory):
    return broadcast_only(tmp_path_factory.mktemp("sale_only") / "export")


def test_config_loads_without_an_assignments_section(tiny_config):
    text = re.sub(r"\[tables\.assignments\][^\[]*\[tables\.assignments\.values\.arm\][^\[]*", "", tiny_config.read_text())
    tiny_config.write_text(text)
    settings = config.load(tiny_config)
    assert "assignments" not in settings.tables and {"transactions", "promotions"} <= set(settings.tables)


def test_config_without_promotions_is_still_refused(tmp_path):
    cfg = write_export(tmp_path / "export")
    cfg.write_text(re.sub(r'\[tables\.promotions\]\npath = "promotions.csv"\n', "", cfg.read_text()))
    with pytest.raises(Exception, match=r"\[tables\.promotions\] is missing"):
        config.load(cfg)


def test_a_configured_assignments_file_whose_rows_are_all_rejected_is_still_unusable(tmp_path, capsys):
    cfg = write_export(tmp_path / "export", assignments=[["PA", "c1", "X", "2026-03-01 10:00:00"]])
    assert cli.main(["check", "-c", str(cfg)]) == 3
    assert "table assignments: all 1 rows rejected" in capsys.readouterr().err


@pytest.mark.slow
def test_check_build_and_timing_run_and_the_campaign_readout_says_there_is_nothing_to_read(sale_only, tmp_path, capsys):
    assert cli.main(["check", "-c", str(sale_only)]) == 0
    out = capsys.readouterr().out
    assert re.search(r"assignments\s+.*not configured", out)
    assert cli.main(["build", "-c", str(sale_only)]) == 0
    con = duckdb.connect(str(sale_only.parent / ".liftlag" / "panels.duckdb"), read_only=True)
    try:
        # Panels that read the assignments got an empty input of the right types.
        for panel in ("campaign_assignments", "campaign_windows"):
            assert con.execute(f"SELECT count(*) FROM {panel}").fetchall()[0][0] == 0
            types = {row[0]: row[1] for row in con.execute(f"DESCRIBE {panel}").fetchall()}
            assert types == {c.name: c.type for c in PANELS[panel]}
        coupons, orders = con.execute(
            "SELECT max(coupons_received), count(*) FROM purchase_gaps").fetchall()[0]
        assert coupons == 0 and orders > 1000
    finally:
        con.close()
    results = tmp_path / "results"
    assert cli.main(["timing", "-c", str(sale_only), "--out", str(results), "--no-cox"]) == 0
    effects = pd.read_parquet(results / "timing_effects.parquet")
    acceleration = effects[(effects["effect"] == "acceleration") & (effects["model"] == "discrete_cloglog")]
    assert len(acceleration) == 1 and acceleration["estimate"].notna().all()
    capsys.readouterr()
    assert cli.main(["campaign", "--all", "-c", str(sale_only), "--out", str(results)]) == 1
    err = capsys.readouterr().err
    assert "there is no targeted campaign to read out" in err and "[tables.assignments]" in err
