"""The bad-input catalogue: one case per class of bad or awkward input, each run through the
``liftlag`` command on a copy of the tiny export (tests/conftest.py).

Each case asserts the exit code, a fragment of the message, no traceback, accepted + rejected =
read, and — for the cases marked ``good_workspace_first`` — that the panels of a good earlier
build are intact afterwards or not served (tests/bad_input/harness.py). To add a case, see
DEVELOPERS.md ("The bad-input catalogue"). Every expectation is common practice, no source.
"""

from __future__ import annotations

import unicodedata
from pathlib import Path

import duckdb
import pytest

from tests.bad_input.harness import (
    Case,
    add_config,
    assert_good_panels_kept_or_not_served,
    assert_no_traceback,
    assert_rows_accounted,
    digest,
    plain_lines,
    rewrite,
    run_cli,
)
from tests.conftest import TINY_PROMOTIONS, TINY_TRANSACTIONS, TRANSACTION_COLUMNS, write_csv, write_export

# ---------------------------------------------------------------------------- edits


def check(cfg: Path) -> list[str]:
    return ["check", "-c", cfg]


def build(cfg: Path) -> list[str]:
    return ["build", "-c", cfg]


def tx(cfg: Path) -> Path:
    return cfg.parent / "transactions.csv"


def add_lines(*rows):
    def edit(cfg):
        with tx(cfg).open("a", newline="") as fh:
            import csv

            csv.writer(fh).writerows(rows)
        return build(cfg)
    return edit


def far_future_line(cfg):
    return add_lines(["o10", "c3", "2099-06-01 10:00:00", "p1", "1", "10", "10", "0", ""])(cfg)


def far_past_line(cfg):
    return add_lines(["o10", "c3", "1900-01-01 00:00:00", "p1", "1", "10", "10", "0", ""])(cfg)


def open_ended_promotion(cfg):
    rewrite(cfg.parent / "promotions.csv", lambda r: r.update(ends_at="9999-12-31") if r["promotion_id"] == "PB" else None)
    return build(cfg)


def ids_in_other_case(cfg):
    rewrite(cfg.parent / "assignments.csv", lambda r: r.update(customer_id=r["customer_id"].upper()))
    return build(cfg)


ACCENTED = {"c1": "cé1", "c2": "cè2", "c3": "cô3"}


def ids_in_other_normal_form(cfg):
    rewrite(tx(cfg), lambda r: r.update(customer_id=unicodedata.normalize("NFC", ACCENTED[r["customer_id"]])))
    rewrite(cfg.parent / "assignments.csv",
            lambda r: r.update(customer_id=unicodedata.normalize("NFD", ACCENTED[r["customer_id"]])))
    rewrite(cfg.parent / "customers.csv", lambda r: r.update(customer_id=ACCENTED[r["customer_id"]]))
    return build(cfg)


def ids_from_another_scheme(cfg):
    rewrite(cfg.parent / "assignments.csv", lambda r: r.update(customer_id="member-" + r["customer_id"]))
    return build(cfg)


def day_first_dates(cfg):
    def change(r):
        if r["order_id"] != "o1":
            stamp = r["ordered_at"]
            r["ordered_at"] = f"{stamp[8:10]}/{stamp[5:7]}/{stamp[:4]} {stamp[11:]}"
    rewrite(tx(cfg), change)
    return build(cfg)


def bad_promotion_row(cfg):
    rewrite(cfg.parent / "promotions.csv", lambda r: r.update(mechanic="bogus") if r["promotion_id"] == "PB" else None)
    return build(cfg)


def bad_promotion_row_few_lines(cfg):
    add_lines(*plain_lines(40))(cfg)
    return bad_promotion_row(cfg)


def depth_as_percent(cfg):
    rewrite(cfg.parent / "promotions.csv", lambda r: r.update(depth="15%") if r["promotion_id"] == "PA" else None)
    return build(cfg)


def cost_as_text(cfg):
    header = list(TINY_PROMOTIONS[0])  # noqa: F841 - rows below
    write_csv(cfg.parent / "promotions.csv",
              ["promotion_id", "starts_at", "ends_at", "mechanic", "depth", "audience", "name", "cost_per_redemption"],
              [TINY_PROMOTIONS[0] + ["abc"], TINY_PROMOTIONS[1] + ["0.5"]])
    return build(cfg)


def outlying_date(cfg):
    add_lines(*plain_lines(200))(cfg)
    return add_lines(["o10", "c3", "2021-05-01 10:00:00", "p1", "1", "10", "10", "0", ""])(cfg)


def return_paid(cfg):
    return add_lines(["o10", "c3", "2026-04-07 10:00:00", "p1", "-1", "10", "10", "0", ""])(cfg)


def unknown_arm_code(cfg):
    import csv

    with (cfg.parent / "assignments.csv").open("a", newline="") as fh:
        csv.writer(fh).writerow(["PA", "c4", "X", "2026-03-01 10:00:00"])
    return build(cfg)


def mixed_line_endings(cfg):
    with (cfg.parent / "assignments.csv").open("a") as fh:  # the file's lines end in CR LF; this one in LF
        fh.write("PA,c4,H,2026-03-01 10:00:00\n")
    return check(cfg)


def latin1_file(cfg):
    path = cfg.parent / "promotions.csv"
    path.write_bytes(path.read_text().replace("garden days", "jardín days").encode("latin-1"))
    return check(cfg)


def latin1_file_declared(cfg):
    latin1_file(cfg)
    add_config(cfg, 'path = "promotions.csv"', 'encoding = "latin-1"')
    return check(cfg)


def long_field(cfg):
    path = tx(cfg)
    lines = path.read_text().splitlines()
    lines[3] = lines[3].replace("p1", "p" + "x" * 3_000_000, 1)
    path.write_text("\n".join(lines) + "\n")
    return check(cfg)


def unbalanced_quote(cfg):
    path = tx(cfg)
    lines = [line.replace("c1", '"c1"') for line in path.read_text().splitlines()]
    lines[3] = lines[3].replace('"c1"', '"c1', 1)
    path.write_text("\n".join(lines) + "\n")
    return check(cfg)


def duplicate_contract_header(cfg):
    path = tx(cfg)
    lines = path.read_text().splitlines()
    lines = [lines[0] + ",net_amount"] + [line + ",1" for line in lines[1:]]
    path.write_text("\n".join(lines) + "\n")
    return check(cfg)


def duplicate_other_header(cfg):
    path = tx(cfg)
    lines = path.read_text().splitlines()
    lines = [lines[0] + ",note,note"] + [line + ",a,b" for line in lines[1:]]
    path.write_text("\n".join(lines) + "\n")
    return check(cfg)


def damaged_parquet(cfg):
    path = cfg.parent / "transactions.parquet"
    data = bytearray(path.read_bytes())
    for i in range(8, len(data) // 2):
        data[i] = 0x41
    path.write_bytes(bytes(data))
    return build(cfg)


def not_parquet(cfg):
    (cfg.parent / "transactions.parquet").write_text("order_id,customer_id\n1,2\n")
    return check(cfg)


def header_only(cfg):
    path = tx(cfg)
    path.write_text(path.read_text().splitlines()[0] + "\n")
    return build(cfg)


def empty_file(cfg):
    tx(cfg).write_text("")
    return check(cfg)


def wrong_delimiter(cfg):
    path = tx(cfg)
    path.write_text(path.read_text().replace(",", ";"))
    add_config(cfg, 'path = "transactions.csv"', 'delimiter = ","')
    return check(cfg)


def ends_before_starts(cfg):
    rewrite(cfg.parent / "promotions.csv",
            lambda r: r.update(starts_at="2026-03-18", ends_at="2026-03-16") if r["promotion_id"] == "PB" else None)
    return build(cfg)


def required_column_absent(cfg):
    path = tx(cfg)
    lines = path.read_text().splitlines()
    path.write_text("\n".join([lines[0].replace("product_id", "zzz")] + lines[1:]) + "\n")
    return check(cfg)


def required_column_absent_parquet(cfg):
    import duckdb as db

    path = cfg.parent / "transactions.parquet"
    con = db.connect()
    con.execute("COPY (SELECT * EXCLUDE (product_id) FROM read_parquet(?)) TO ? (FORMAT parquet)",
                [str(path), str(path) + ".tmp"])
    con.close()
    Path(str(path) + ".tmp").replace(path)
    return check(cfg)


def path_matching_nothing(cfg):
    cfg.write_text(cfg.read_text().replace('path = "transactions.csv"', 'path = "nowhere/*.csv"'))
    return build(cfg)


def mapped_optional_column_absent(cfg):
    add_config(cfg, 'path = "transactions.csv"', '[tables.transactions.columns]\nlist_amount = "gross_total"')
    return build(cfg)


def mapped_required_column_absent(cfg):
    add_config(cfg, 'path = "transactions.csv"', '[tables.transactions.columns]\ncustomer_id = "client_ref"')
    return build(cfg)


def unknown_date_format(cfg):
    add_config(cfg, 'path = "transactions.csv"', '[tables.transactions.formats]\nordered_at = "%Y-%m-%Q"')
    return build(cfg)


def config_with_bom(cfg):
    cfg.write_bytes(b"\xef\xbb\xbf" + cfg.read_bytes())
    return check(cfg)


def config_with_latin1_byte(cfg):
    cfg.write_bytes(cfg.read_bytes().replace(b"[economics]", "# économie\n[economics]".encode("latin-1")))
    return check(cfg)


def config_not_toml(cfg):
    cfg.write_text(cfg.read_text() + "\nthis is = = not toml\n")
    return check(cfg)


def config_is_a_folder(cfg):
    return ["check", "-c", cfg.parent]


def out_is_a_file(cfg):
    (cfg.parent / "results").write_text("not a folder")
    return ["check", "-c", cfg, "--out", cfg.parent / "results"]


def timing_out_under_a_file(cfg):
    (cfg.parent / "results").write_text("not a folder")
    return ["timing", "-c", cfg, "--out", cfg.parent / "results" / "timing"]  # refused before any work


def workspace_under_a_file(cfg):
    (cfg.parent / "afile").write_text("x")
    cfg.write_text(cfg.read_text().replace('path = ".liftlag"', 'path = "afile/ws"'))
    return build(cfg)


def unknown_key(cfg):
    add_config(cfg, "[economics]", "margin_rte = 0.3")
    return check(cfg)


def timing_without_promotions(cfg):
    rows = [r[:7] + ["0", ""] for r in TINY_TRANSACTIONS]
    write_csv(tx(cfg), TRANSACTION_COLUMNS, rows)
    for name in ("promotions.csv", "assignments.csv"):
        path = cfg.parent / name
        path.write_text(path.read_text().splitlines()[0] + "\n")
    assert run_cli_quiet(build(cfg)) == 0
    return ["timing", "-c", cfg, "--out", cfg.parent / "out"]


def campaign_on_broadcast(cfg):
    assert run_cli_quiet(build(cfg)) == 0
    return ["campaign", "PB", "-c", cfg, "--out", cfg.parent / "out"]


def campaign_unknown_id(cfg):
    assert run_cli_quiet(build(cfg)) == 0
    return ["campaign", "PZ", "-c", cfg, "--out", cfg.parent / "out"]


def panel_missing_from_workspace(cfg):
    assert run_cli_quiet(build(cfg)) == 0
    con = duckdb.connect(str(cfg.parent / ".liftlag" / "panels.duckdb"))
    con.execute("DROP TABLE purchase_gaps")
    con.close()
    return ["timing", "-c", cfg, "--out", cfg.parent / "out"]


def sql_without_config(cfg):
    return ["sql", "--dialect", "spark", "--panel", "orders"]


def run_cli_quiet(argv) -> int:
    from toolkit import cli

    return cli.main([str(a) for a in argv])


# ---------------------------------------------------------------------------- the catalogue

CASES = [
    # Bad data: timestamps beyond the horizon are rejected, so no single row stretches the timeline.
    Case("far_future_order_line", far_future_line, 0, "timestamp_beyond_horizon"),
    Case("far_past_order_line", far_past_line, 0, "is earlier than the horizon"),
    Case("open_ended_promotion", open_ended_promotion, 3, "ends_at 9999-12-31", good_workspace_first=True),
    # Data that matches nothing: the sanity gates stop before any analysis.
    Case("assignment_ids_in_other_case", ids_in_other_case, 3, "letter case or Unicode normal form",
         good_workspace_first=True),
    Case("assignment_ids_in_other_normal_form", ids_in_other_normal_form, 3, "letter case or Unicode normal form"),
    Case("assignment_ids_from_another_scheme", ids_from_another_scheme, 3, "another customer id"),
    Case("day_first_dates", day_first_dates, 3, "tables.transactions.formats", good_workspace_first=True),
    Case("bad_promotion_row_drops_many_lines", bad_promotion_row, 3, "was rejected in the promotions table"),
    Case("bad_promotion_row_drops_its_lines", bad_promotion_row_few_lines, 3,
         "PB (its promotions row was rejected: value_not_allowed"),
    Case("order_date_far_from_the_bulk", outlying_date, 3, "outside the bulk of the order dates"),
    # A malformed optional value: nulled with a warning, its row and the rows naming it kept.
    Case("depth_written_as_percent", depth_as_percent, 0, "unparseable_optional", absent=("unknown_promotion",)),
    Case("cost_per_redemption_as_text", cost_as_text, 0, "unparseable_optional", absent=("unknown_promotion",)),
    # Odd rows kept with a warning.
    Case("return_with_positive_amount", return_paid, 0, "return_sign_mismatch"),
    Case("unknown_arm_code_lists_export_codes", unknown_arm_code, 3, "T (treatment), H (holdout)"),
    # Files that cannot be read: DuckDB's whole cause, and what to do.
    Case("mixed_line_endings", mixed_line_endings, 3, "could not be detected", absent=("strict_mode",)),
    Case("latin1_csv", latin1_file, 3, "encoding = \"latin-1\""),
    Case("latin1_csv_declared", latin1_file_declared, 0, "check"),
    Case("field_of_3_mb", long_field, 3, "Maximum line size"),
    Case("unbalanced_quote", unbalanced_quote, 0, "check"),
    Case("duplicate_contract_column_in_header", duplicate_contract_header, 3, "names column 'net_amount' 2 times"),
    Case("duplicate_other_column_in_header", duplicate_other_header, 0, "more than once"),
    Case("damaged_parquet", damaged_parquet, 3, "transactions.parquet", export={"parquet": True}),
    Case("text_file_named_parquet", not_parquet, 3, "cannot read", export={"parquet": True}),
    # Classes that already passed before the catalogue (kept passing).
    Case("header_only_order_lines", header_only, 3, "no rows read", good_workspace_first=True),
    Case("empty_file", empty_file, 3, "is empty (0 bytes)", good_workspace_first=True),
    Case("wrong_delimiter", wrong_delimiter, 3, "may use another delimiter"),
    Case("promotion_ends_before_it_starts", ends_before_starts, 3, "before it starts"),
    Case("required_column_absent", required_column_absent, 3, "required column 'product_id'",
         absent=("_source_file",)),
    Case("required_column_absent_parquet", required_column_absent_parquet, 3, "required column 'product_id'",
         absent=("_source_file", "file_row_number"), export={"parquet": True}),
    # Config mistakes: exit 2, naming the key.
    Case("path_matching_no_file", path_matching_nothing, 2, "matches no file", good_workspace_first=True),
    Case("mapped_optional_column_absent", mapped_optional_column_absent, 2, "tables.transactions.columns.list_amount",
         good_workspace_first=True),
    Case("mapped_required_column_absent", mapped_required_column_absent, 2, "tables.transactions.columns.customer_id"),
    Case("unknown_date_format", unknown_date_format, 2, "tables.transactions.formats.ordered_at",
         good_workspace_first=True),
    Case("config_with_bom", config_with_bom, 0, "check"),
    Case("config_with_latin1_byte", config_with_latin1_byte, 2, "is not UTF-8", good_workspace_first=True),
    Case("config_not_toml", config_not_toml, 2, "not valid TOML"),
    Case("config_is_a_folder", config_is_a_folder, 2, "is a folder, not a config file"),
    Case("out_is_a_file", out_is_a_file, 2, "give --out a folder"),
    Case("timing_out_under_a_file", timing_out_under_a_file, 2, "which is a file"),
    Case("workspace_path_under_a_file", workspace_under_a_file, 2, "[workspace] path"),
    Case("unknown_config_key", unknown_key, 2, "did you mean 'margin_rate'"),
    # Analyses on data that cannot answer: a message, never a traceback.
    Case("timing_without_promotions", timing_without_promotions, 0, "not estimable"),
    Case("campaign_on_broadcast_promotion", campaign_on_broadcast, 2, "has no holdout, so there is no campaign "
         "readout to compute; its effect against a counterfactual is in `liftlag longrun"),
    Case("campaign_unknown_promotion", campaign_unknown_id, 2, "is not in the promotions table"),
    Case("panel_missing_from_workspace", panel_missing_from_workspace, 1, "liftlag build --force"),
    Case("sql_without_config", sql_without_config, 0, "margin_rate = NULL", absent=("None",)),
]


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_bad_input_case(tmp_path, capsys, case):
    cfg = write_export(tmp_path / "export", **case.export)
    before = None
    if case.good_workspace_first:
        assert run_cli_quiet(build(cfg)) == 0
        before = digest(cfg.parent / ".liftlag" / "panels.duckdb")
        assert before is not None
        capsys.readouterr()
    argv = case.edit(cfg)
    capsys.readouterr()
    code, out = run_cli(argv, capsys)
    assert_no_traceback(out)
    assert code == case.code, out
    assert case.fragment in out, out
    for text in case.absent:
        assert text not in out, out
    assert_rows_accounted(cfg)
    if case.good_workspace_first:
        assert_good_panels_kept_or_not_served(cfg, before)


def test_far_future_line_does_not_stretch_the_timeline(tmp_path, capsys):
    """Issue: one order line dated 2099 censored every customer's last gap at 2099."""
    cfg = write_export(tmp_path / "export")
    code, _ = run_cli(far_future_line(cfg), capsys)
    assert code == 0
    con = duckdb.connect(str(cfg.parent / ".liftlag" / "panels.duckdb"), read_only=True)
    end = con.execute("SELECT max(ordered_on + days_to_next_order) FROM purchase_gaps").fetchall()[0][0]
    con.close()
    assert end.year == 2026


def test_optional_value_nulled_keeps_the_promotions_lines(tmp_path, capsys):
    """Issue: depth '15%' rejected the promotion and, with it, its order lines and assignments."""
    cfg = write_export(tmp_path / "export")
    code, _ = run_cli(depth_as_percent(cfg), capsys)
    assert code == 0
    con = duckdb.connect(str(cfg.parent / ".liftlag" / "checked.duckdb"), read_only=True)
    try:
        assert con.execute("SELECT count(*) FROM rejected_rows").fetchall() == [(0,)]
        assert con.execute("SELECT depth FROM promotions WHERE promotion_id = 'PA'").fetchall() == [(None,)]
        detail = con.execute("SELECT detail FROM warning_rows WHERE rule = 'unparseable_optional'").fetchall()
    finally:
        con.close()
    assert detail == [("depth = '15%' cannot be read as its type; left empty, the row is kept",)]


def test_read_only_workspace_is_a_message_naming_the_setting(tmp_path, capsys, monkeypatch):
    """A workspace liftlag cannot write (simulated: the tests may run as root, who can write anywhere)."""
    from toolkit import workspace

    cfg = write_export(tmp_path / "export")
    target = cfg.parent / ".liftlag" / "checked.duckdb.partial"

    def refuse(*args, **kwargs):
        raise PermissionError(13, "Permission denied", str(target))

    monkeypatch.setattr(workspace, "private_path", refuse)
    code, out = run_cli(check(cfg), capsys)
    assert_no_traceback(out)
    assert code == 2
    assert "Permission denied" in out and "[workspace] path" in out


def test_interrupt_swallowed_by_a_library_still_exits_1(tmp_path, capsys, monkeypatch):
    """Issue: Ctrl-C during `campaign --all` was once ignored ("Exception ignored ... KeyboardInterrupt",
    exit 0): an interrupt raised inside a finaliser cannot propagate. The flag set by liftlag's SIGINT
    handler still ends the run as interrupted."""
    import signal

    from toolkit import core_commands

    def swallowing(args):
        try:
            signal.raise_signal(signal.SIGINT)
        except KeyboardInterrupt:
            pass  # as Python does for an exception raised in __del__
        return 0

    monkeypatch.setattr(core_commands, "cmd_check", swallowing)
    code, out = run_cli(["check", "-c", tmp_path / "x.toml"], capsys)
    assert code == 1 and "interrupted" in out
    assert_no_traceback(out)


def test_duckdb_interrupt_exits_1(tmp_path, capsys, monkeypatch):
    from toolkit import core_commands

    def interrupted(args):
        raise duckdb.InterruptException("INTERRUPT Error: Interrupted!")

    monkeypatch.setattr(core_commands, "cmd_build", interrupted)
    code, out = run_cli(["build", "-c", tmp_path / "x.toml"], capsys)
    assert code == 1 and "interrupted" in out
