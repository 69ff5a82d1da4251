"""`liftlag init` guesses the tables and the column mapping of an export in its own names."""

from __future__ import annotations

import tomllib

import pytest

from toolkit import cli
from tests.conftest import write_export


def test_init_guesses_renamed_columns_and_coded_arms_and_the_result_checks_clean(tmp_path, capsys):
    cfg = write_export(tmp_path / "export")
    cfg.unlink()
    tx = cfg.parent / "transactions.csv"
    header, rest = tx.read_text().split("\n", 1)
    renamed = header.replace("order_id", "invoice_no").replace("customer_id", "client_ref") \
        .replace("ordered_at", "created").replace("quantity", "qty").replace("net_amount", "paid")
    (cfg.parent / "order_lines.csv").write_text(renamed + "\n" + rest)
    tx.unlink()
    assert cli.main(["init", str(cfg.parent)]) == 0
    out = capsys.readouterr().out
    assert "order_id <- invoice_no (sure: name 'invoice_no' is a usual name for it" in out
    assert "arm treatment <- 'T' (NOT SURE" in out
    written = tomllib.loads(cfg.read_text())
    columns = written["tables"]["transactions"]["columns"]
    assert columns == {"order_id": "invoice_no", "customer_id": "client_ref", "ordered_at": "created",
                       "quantity": "qty", "net_amount": "paid"}
    assert written["tables"]["assignments"]["values"]["arm"] == {"treatment": "T", "holdout": "H"}
    assert "# guessed" in cfg.read_text()
    assert cli.main(["check", "-c", str(cfg)]) == 0
    assert cli.main(["init", str(cfg.parent)]) == 2  # will not overwrite without --force


def test_names_are_normalised_and_coded_values_read_only_when_every_value_reads():
    """Common practice, no source: camelCase and punctuation are naming habits, not meaning."""
    from toolkit.init import value_map
    from toolkit.init.guess import name_match
    from toolkit.init.profile import normalise

    assert normalise("OrderNumber") == "order_number" and normalise(" Paid Value ") == "paid_value"
    assert name_match("OrderNumber", "order_id") == (pytest.approx(0.997), True)
    assert name_match("mailed", "assigned_at")[0] == 0.0  # a faint resemblance is no evidence
    assert value_map("arm", {"T", "C"}) == {"treatment": "T", "holdout": "C"}
    assert value_map("audience", {"Targeted", "Broadcast"}) == {"targeted": "Targeted", "broadcast": "Broadcast"}
    assert value_map("arm", {"T", "C", "X"}) is None  # one value that does not read spoils the map
    assert value_map("arm", {"T", "test"}) is None  # two values for one arm


def test_a_promotions_file_with_a_repeated_row_is_still_the_promotions_table(tmp_path, capsys):
    """The key named promotion_id repeats (an exact copy of a row): init still takes it, marked, and
    `liftlag check` rejects the copy (common practice, no source)."""
    from tests.conftest import TINY_PROMOTIONS

    cfg = write_export(tmp_path / "export", promotions=TINY_PROMOTIONS + [TINY_PROMOTIONS[0]])
    cfg.unlink()
    assert cli.main(["init", str(cfg.parent)]) == 0
    assert "promotion_id <- promotion_id (sure: name 'promotion_id' is a usual name for it; some values repeat" \
        in capsys.readouterr().out
    assert "promotions" in tomllib.loads(cfg.read_text())["tables"]
    assert cli.main(["check", "-c", str(cfg)]) == 0
    assert "duplicate_row" in capsys.readouterr().out
