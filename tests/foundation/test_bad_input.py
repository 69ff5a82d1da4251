"""Bad input: one clear message naming what and where, the design's exit code, and no
workspace left looking complete (common practice, no source)."""

from __future__ import annotations

from toolkit import cli
from tests.conftest import TINY_PROMOTIONS, TINY_TRANSACTIONS, write_export


def run(args, capsys):
    code = cli.main(args)
    captured = capsys.readouterr()
    return code, captured.out + captured.err


def no_workspace(cfg):
    ws = cfg.parent / ".liftlag"
    return not (ws / "panels.duckdb").exists() and not list(ws.glob("*.partial"))


def test_missing_file(tmp_path, capsys):
    cfg = write_export(tmp_path / "e")
    (cfg.parent / "promotions.csv").unlink()
    code, out = run(["build", "-c", str(cfg)], capsys)
    assert code == 2  # a path that matches no file is a config mistake
    assert "tables.promotions.path = 'promotions.csv' matches no file" in out
    assert no_workspace(cfg) and not (cfg.parent / ".liftlag" / "checked.duckdb").exists()


def test_empty_file(tmp_path, capsys):
    cfg = write_export(tmp_path / "e")
    (cfg.parent / "transactions.csv").write_text("")
    code, out = run(["check", "-c", str(cfg)], capsys)
    assert code == 3
    assert "transactions.csv is empty (0 bytes)" in out


def test_header_only_transactions(tmp_path, capsys):
    cfg = write_export(tmp_path / "e", transactions=[])
    code, out = run(["build", "-c", str(cfg)], capsys)
    assert code == 3
    assert "table transactions: no rows read" in out
    assert no_workspace(cfg)


def test_wrong_delimiter(tmp_path, capsys):
    cfg = write_export(tmp_path / "e")
    path = cfg.parent / "transactions.csv"
    path.write_text(path.read_text().replace(",", ";"))
    text = cfg.read_text().replace('path = "transactions.csv"', 'path = "transactions.csv"\ndelimiter = ","')
    cfg.write_text(text)
    code, out = run(["check", "-c", str(cfg)], capsys)
    assert code == 3
    assert "required column 'order_id'" in out and "may use another delimiter" in out


def test_column_of_the_wrong_type(tmp_path, capsys):
    rows = [r[:5] + ["n/a"] + r[6:] for r in TINY_TRANSACTIONS]
    cfg = write_export(tmp_path / "e", transactions=rows)
    code, out = run(["check", "-c", str(cfg)], capsys)
    assert code == 3
    assert "table transactions: all 12 rows rejected" in out
    assert "unparseable_value" in out


def test_required_column_missing_names_column_file_and_closest(tmp_path, capsys):
    cfg = write_export(tmp_path / "e")
    path = cfg.parent / "transactions.csv"
    path.write_text(path.read_text().replace("net_amount", "net_amt", 1))
    code, out = run(["check", "-c", str(cfg)], capsys)
    assert code == 3
    assert "required column 'net_amount'" in out and "transactions.csv" in out and "net_amt" in out


def test_config_that_points_at_nothing(tmp_path, capsys):
    code, out = run(["check", "-c", str(tmp_path / "missing.toml")], capsys)
    assert code == 2 and "does not exist" in out
    cfg = write_export(tmp_path / "e")
    cfg.write_text(cfg.read_text().replace('path = "transactions.csv"', 'path = "nowhere/*.parquet"'))
    code, out = run(["check", "-c", str(cfg)], capsys)
    assert code == 2 and "matches no file" in out


def test_promotion_that_ends_before_it_starts(tmp_path, capsys):
    promotions = [TINY_PROMOTIONS[0], ["PB", "2026-03-18", "2026-03-16", "percent_off", "0.1", "broadcast", "x"]]
    cfg = write_export(tmp_path / "e", promotions=promotions)
    code, out = run(["build", "-c", str(cfg)], capsys)
    assert code == 3
    assert "promotion PB ends 2026-03-16" in out and "before it starts 2026-03-18" in out
    assert no_workspace(cfg)


def test_bad_arguments_exit_2(capsys):
    code, out = run(["build", "--no-such-flag"], capsys)
    assert code == 2
