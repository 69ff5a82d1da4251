"""What every bad-input case asserts, and the small export edits the cases are made of.

Every case of the catalogue runs the ``liftlag`` command in-process and asserts: its exit code
(0 ok, 1 analysis could not be done, 2 bad config or arguments, 3 bad data), a fragment of its
message, no traceback (nothing escapes ``cli.main``, and no "internal error", which is what an
exception nobody mapped becomes), accepted + rejected = read for every table the check counted,
and, where the case starts from a good build, that those panels are intact afterwards — or, if a
run replaced them, that they are not served (never a silent mix). Common practice, no source.
"""

from __future__ import annotations

import csv
import hashlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import duckdb

from tests.conftest import (
    ASSIGNMENT_COLUMNS,
    PROMOTION_COLUMNS,
    TRANSACTION_COLUMNS,
    write_csv,
    write_export,
)
from toolkit import cli, config, workspace
from toolkit.errors import LiftlagError


@dataclass(frozen=True)
class Case:
    """One class of bad input: how to make it from the good tiny export, and what must happen."""

    id: str
    edit: Callable[[Path], list[str]]  # edits the export/config (cfg path given), returns the argv
    code: int
    fragment: str
    absent: tuple[str, ...] = ()  # texts the output must not contain
    good_workspace_first: bool = False  # build the good export first; those panels must survive
    export: dict = field(default_factory=dict)  # write_export arguments for the starting export


def run_cli(argv, capsys) -> tuple[int, str]:
    code = cli.main([str(a) for a in argv])
    captured = capsys.readouterr()
    return code, captured.out + captured.err


def digest(path: Path) -> str | None:
    return hashlib.sha256(path.read_bytes()).hexdigest() if path.exists() else None


def assert_no_traceback(out: str) -> None:
    assert "Traceback" not in out, out
    assert "internal error" not in out, out
    assert "Exception ignored" not in out, out


def assert_rows_accounted(cfg: Path) -> None:
    """accepted + rejected = read in the check summary the workspace holds (when one was written)."""
    checked = cfg.parent / ".liftlag" / workspace.CHECKED
    if not checked.exists():
        return
    con = duckdb.connect(str(checked), read_only=True)
    try:
        rows = con.execute("SELECT \"table\", rows_read, accepted, rejected FROM check_summary").fetchall()
    finally:
        con.close()
    for table, read, accepted, rejected in rows:
        assert accepted + rejected == read, (table, read, accepted, rejected)


def assert_good_panels_kept_or_not_served(cfg: Path, before: str | None) -> None:
    """The good build's panels are unchanged, or, if they were replaced or removed, not served."""
    panels = cfg.parent / ".liftlag" / workspace.PANELS
    if digest(panels) == before:
        return
    settings = config.load(cfg)
    try:
        workspace.connect(settings).close()
    except LiftlagError:
        return
    raise AssertionError("the good panels were changed and the workspace still opens without a word")


# ---------------------------------------------------------------------------- export edits

def read_rows(path: Path) -> tuple[list[str], list[list[str]]]:
    with path.open(newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    return rows[0], rows[1:]


def rewrite(path: Path, change: Callable[[dict], None]) -> None:
    """Apply ``change`` to each row (a dict column -> text) of a CSV file of the export."""
    header, rows = read_rows(path)
    out = []
    for row in rows:
        record = dict(zip(header, row))
        change(record)
        out.append([record[c] for c in header])
    write_csv(path, header, out)


def add_config(cfg: Path, after: str, text: str) -> None:
    body = cfg.read_text()
    assert after in body, after
    cfg.write_text(body.replace(after, after + "\n" + text, 1))


def plain_lines(n: int, start_day: int = 1) -> list[list[str]]:
    """n ordinary full-price order lines of the tiny export's customers in Jan-Apr 2026."""
    rows = []
    for i in range(n):
        day = 1 + (start_day + i * 3) % 28
        month = 1 + i % 4
        rows.append([f"x{i}", f"c{1 + i % 3}", f"2026-{month:02d}-{day:02d} 10:00:00", "p1", "1", "10", "10", "0", ""])
    return rows


__all__ = ["ASSIGNMENT_COLUMNS", "PROMOTION_COLUMNS", "TRANSACTION_COLUMNS", "write_export", "write_csv"]
