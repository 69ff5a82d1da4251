"""Property-based fuzzing of the loaders (hypothesis): whatever bytes or values an export holds,
``liftlag check`` ends in a message with a documented exit code — never a traceback, never an
"internal error" (an exception nobody mapped) — and every row read is accepted or rejected.

Common practice, no source. The examples are bounded (each runs a check on a tiny export) and
have no deadline: the machine may be loaded.
"""

from __future__ import annotations

import csv
import datetime as dt
import tempfile
from pathlib import Path

import duckdb
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tests.bad_input.harness import assert_no_traceback
from tests.conftest import TINY_TRANSACTIONS, TRANSACTION_COLUMNS, write_export
from toolkit import cli

FUZZ = settings(max_examples=8, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])

# Texts an export really carries, mixed with arbitrary text.
AWKWARD = st.sampled_from([
    "", " ", "  ", "NaN", "inf", "-0", "1e309", "1,234.50", "12,50", "€12", "15%", "abc", "NULL", "null", "None",
    "0x1F", "٣", "½", "true", "\t", "\"", "'", "[/]", "[bold]x", "a\nb", "2026-02-30", "2026-13-01", "0000-00-00",
    "9999-12-31 23:59:59", "1970-01-01", "2026-03-03T12:00:00Z", "2026-03-03 12:00:00+14:00", "20260303",
    "03/03/2026", "é", "e\u0301", "\u00a0", "\ufeff", "x" * 300,
])
TEXT = st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=20)
VALUE = st.one_of(AWKWARD, TEXT)
NUMBER = st.one_of(AWKWARD, st.floats(allow_nan=True, allow_infinity=True).map(repr),
                   st.integers(-10**20, 10**20).map(str))
STAMP = st.one_of(AWKWARD, st.datetimes(min_value=dt.datetime(1, 1, 1), max_value=dt.datetime(9999, 12, 31)).map(str))
COLUMN_KIND = {"order_id": VALUE, "customer_id": VALUE, "ordered_at": STAMP, "product_id": VALUE,
               "quantity": NUMBER, "net_amount": NUMBER, "list_amount": NUMBER, "discount_amount": NUMBER,
               "promotion_id": st.one_of(st.sampled_from(["", "PA", "PB", "PZ"]), VALUE)}
ROW = st.fixed_dictionaries({c: COLUMN_KIND[c] for c in TRANSACTION_COLUMNS})


def check_folder(folder: Path) -> tuple[int, str, list]:
    import io
    from contextlib import redirect_stderr, redirect_stdout

    buffer = io.StringIO()
    with redirect_stdout(buffer), redirect_stderr(buffer):
        code = cli.main(["check", "-c", str(folder / "liftlag.toml")])
    checked = folder / ".liftlag" / "checked.duckdb"
    summary = []
    if checked.exists():
        con = duckdb.connect(str(checked), read_only=True)
        summary = con.execute("SELECT \"table\", rows_read, accepted, rejected FROM check_summary").fetchall()
        con.close()
    return code, buffer.getvalue(), summary


@FUZZ
@given(rows=st.lists(ROW, min_size=1, max_size=8))
def test_random_values_per_column_type_are_accepted_or_rejected_never_a_crash(rows):
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "export"
        lines = TINY_TRANSACTIONS + [[row[c] for c in TRANSACTION_COLUMNS] for row in rows]
        write_export(folder, transactions=lines)
        code, out, summary = check_folder(folder)
        assert_no_traceback(out)
        assert code in (0, 2, 3), out
        for table, read, accepted, rejected in summary:
            assert accepted + rejected == read, (table, read, accepted, rejected)
        if code == 0:
            # A CSV written by the csv module is read row for row: nothing lost, nothing invented.
            counted = {t: read for t, read, _, _ in summary}
            assert counted["transactions"] == len(lines), out


@FUZZ
@given(data=st.binary(max_size=400), keep_header=st.booleans())
def test_random_bytes_in_a_file_end_in_a_message(data, keep_header):
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "export"
        write_export(folder)
        path = folder / "transactions.csv"
        header = (",".join(TRANSACTION_COLUMNS) + "\n").encode() if keep_header else b""
        path.write_bytes(header + data)
        code, out, summary = check_folder(folder)
        assert_no_traceback(out)
        assert code in (0, 2, 3), out
        for table, read, accepted, rejected in summary:
            assert accepted + rejected == read, (table, read, accepted, rejected)


@FUZZ
@given(values=st.lists(st.tuples(VALUE, VALUE, STAMP, VALUE, NUMBER, VALUE), min_size=1, max_size=5))
def test_random_promotion_rows_never_crash(values):
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "export"
        write_export(folder)
        with (folder / "promotions.csv").open("a", newline="", encoding="utf-8") as fh:
            writer = csv.writer(fh)
            for pid, start, end, mechanic, depth, audience in values:
                writer.writerow([pid, start, end, mechanic, depth, audience, "fuzz"])
        code, out, summary = check_folder(folder)
        assert_no_traceback(out)
        assert code in (0, 2, 3), out
        for table, read, accepted, rejected in summary:
            assert accepted + rejected == read, (table, read, accepted, rejected)
