"""A targeted campaign without holdout, from the command line: the panel brings a comparison pool
of unassigned pre-period buyers and the readout is weighted and says it is not randomised
(common practice, no source)."""

from __future__ import annotations

import csv

import pandas as pd
import pytest

from toolkit import cli
from toolkit.demo import generate


@pytest.mark.slow
def test_campaign_without_holdout_gets_a_weighted_not_randomised_readout(tmp_path, capsys):
    cfg = generate(tmp_path / "export", customers=1500, seed=11)
    path = cfg.parent / "assignments.csv"
    with path.open() as fh:
        rows = list(csv.DictReader(fh))
    # FW-T05 loses its holdout: every holdout row of it is dropped from the export.
    kept = [r for r in rows if not (r["promotion_id"] == "FW-T05" and r["arm"] == "H")]
    assert len(kept) < len(rows)
    with path.open("w", newline="") as fh:
        writer = csv.DictWriter(fh, fieldnames=list(rows[0]))
        writer.writeheader()
        writer.writerows(kept)
    assert cli.main(["build", "-c", str(cfg)]) == 0
    out = tmp_path / "results"
    assert cli.main(["campaign", "FW-T05", "-c", str(cfg), "--out", str(out)]) == 0
    effects = pd.read_parquet(out / "campaign_effects.parquet")
    mine = effects[effects["promotion_id"] == "FW-T05"]
    assert set(mine["method"]) <= {"ipw", "doubly_robust"} and len(mine) > 0
    assert not mine["is_randomised"].any()
    assert set(mine["randomisation_check"]) == {"not randomised"}
    html = (out / "campaign_FW-T05.html").read_text()
    assert "not randomised" in html.lower()
