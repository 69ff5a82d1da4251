"""The terminal: the two consoles and the printing that several commands share.

Commands print through ``console`` (results) and ``err_console`` (notes, warnings, errors); every
text that comes from the export is escaped before it reaches rich's markup.
"""

from __future__ import annotations

import time
from pathlib import Path

from rich.console import Console
from rich.markup import escape
from rich.table import Table

console = Console(stderr=False, highlight=False, soft_wrap=True)
err_console = Console(stderr=True, highlight=False, soft_wrap=True)


def print_check(result) -> None:
    table = Table(title=f"check ({result.seconds:.1f} s)", show_lines=False)
    for col in ("table", "read", "accepted", "rejected", "warnings"):
        table.add_column(col, justify="left" if col == "table" else "right")
    for row in result.summary.itertuples():
        if not row.configured:
            table.add_row(row.table, "not configured", "", "", "")
            continue
        table.add_row(escape(row.table), f"{row.rows_read:,}", f"{row.accepted:,}", f"{row.rejected:,}", f"{row.warnings:,}")
    console.print(table)
    if len(result.rejects):
        rej = Table(title="rejected rows by reason (details in the workspace: checked.duckdb, rejected_rows)")
        for col in ("table", "reason", "rows"):
            rej.add_column(col, justify="right" if col == "rows" else "left")
        for row in result.rejects.itertuples(index=False):
            rej.add_row(escape(row[0]), escape(row[1]), f"{row[2]:,}")
        console.print(rej)
        if result.examples is not None and len(result.examples):
            console.print("examples (first rows of each reason):")
            for row in result.examples.itertuples(index=False):
                where = f"{shown_file(row.source_file)} row {row.row_id}" if row.source_file else f"row {row.row_id}"
                console.print(f"  {row.table} / {row.reason}: {where}: {row.detail} — {row.raw_values}", markup=False)
    if len(result.warnings):
        warn = Table(title="warnings (rows kept)")
        for col in ("table", "rule", "rows"):
            warn.add_column(col, justify="right" if col == "rows" else "left")
        for row in result.warnings.itertuples(index=False):
            warn.add_row(escape(row[0]), escape(row[1]), f"{row[2]:,}")
        console.print(warn)


def shown_file(source_file: str) -> str:
    """A file's name with its partition folders (``month=2025-01/part-0.parquet``), which tell
    apart the many files that share one name in a partitioned export."""
    path = Path(str(source_file))
    parts = [path.name]
    for parent in path.parents:
        if "=" not in parent.name:
            break
        parts.insert(0, parent.name)
    return "/".join(parts)


def run_build(settings, force: bool = False, *, wait: float | None = None):
    """Check (when needed) and build the panels, showing progress; returns the BuildResult.

    The check table is printed as soon as the check is done, so that it is there also when the
    build then fails; notes about the workspace lock (waiting for another build, a stale lock
    taken over) go to ``err_console``.
    """
    from . import panels

    started = time.perf_counter()
    with console.status("building…") as status:
        def progress(step, detail=""):
            status.update(f"{step}: {escape(detail)}")

        def notify(text):
            err_console.print(f"[yellow]note:[/] {escape(text)}")

        result = panels.build(settings, force=force, progress=progress, on_check=print_check, notify=notify, wait=wait)
    if result.skipped:
        console.print("panels are up to date (inputs, SQL and settings unchanged); use --force to rebuild")
    else:
        if result.reasons:
            from .freshness import summary

            console.print(f"built because: {escape(summary(result.reasons))}")
        table = Table(title=f"panels ({time.perf_counter() - started:.1f} s)")
        for col in ("panel", "rows", "seconds"):
            table.add_column(col, justify="left" if col == "panel" else "right")
        for name, rows in result.rows.items():
            table.add_row(name, f"{rows:,}", f"{result.seconds.get(name, 0):.2f}")
        console.print(table)
    return result
