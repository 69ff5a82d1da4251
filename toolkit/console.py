"""The terminal: the two consoles and the printing that several commands share.

Commands print through ``console`` (results) and ``err_console`` (notes, warnings, errors); every
text that comes from the export is escaped before it reaches rich's markup.
"""

from __future__ import annotations

import time
from pathlib import Path

from rich.console import Console
from rich.markup import escape
from rich.progress import Progress, ProgressColumn, SpinnerColumn, TextColumn
from rich.table import Table
from rich.text import Text

console = Console(stderr=False, highlight=False, soft_wrap=True)
err_console = Console(stderr=True, highlight=False, soft_wrap=True)


class _Seconds(ProgressColumn):
    """A step's elapsed seconds: counting while it runs, its total once done."""

    def render(self, task) -> Text:
        seconds = task.finished_time if task.finished else task.elapsed
        return Text(f"{seconds or 0.0:7.1f} s", style="progress.elapsed")


class StepProgress:
    """Progress of `check` and `build` on an interactive terminal: the running step (reading a
    table, a check rule, a panel, writing) and the last steps done, each with its rows where known
    and its seconds; cleared when the command ends. Silent when the output is not a terminal
    (tests, CI, logs). The full list of timings is in the workspace's ``manifest.json``.

    A watcher for ``toolkit.steps.Timings``: use as a context manager and pass it as ``watcher``.
    """

    SHOWN_DONE = 6  # finished steps kept on screen (the display stays a few lines high)

    def __init__(self, console: Console | None = None):
        self.console = console or err_console
        self.progress = self._display()
        self._task = None
        self._done: list = []

    def _display(self) -> Progress:
        return Progress(
            SpinnerColumn(finished_text="[green]✓[/]"), TextColumn("{task.description}"),
            TextColumn("{task.fields[rows]}", justify="right"), _Seconds(),
            console=self.console, transient=True, disable=not self.console.is_terminal,
        )

    def __enter__(self) -> "StepProgress":
        self.progress.start()
        return self

    def __exit__(self, *exc) -> None:
        self.progress.stop()

    def paused(self, show):
        """``show`` as a callable that prints with the display cleared (then shown again), so that
        a table printed mid-command is not mixed with the progress lines."""
        def call(*args, **kwargs):
            self.progress.stop()
            try:
                return show(*args, **kwargs)
            finally:
                # A new display below what was printed (between steps: no step is running).
                self.progress, self._task, self._done = self._display(), None, []
                self.progress.start()
        return call

    def started(self, step) -> None:
        rows = f"{step.rows:,} rows" if step.rows is not None else ""
        self._task = self.progress.add_task(escape(step.name), total=1, rows=rows)

    def finished(self, step) -> None:
        if self._task is None:
            return
        rows = f"{step.rows:,} rows" if step.rows is not None else ""
        self.progress.update(self._task, completed=1, rows=rows)
        self._done.append(self._task)
        self._task = None
        while len(self._done) > self.SHOWN_DONE:
            self.progress.remove_task(self._done.pop(0))


def print_check(result) -> None:
    when = f"reused from the check at {result.reused_from[:19]} UTC" if getattr(result, "reused_from", None) \
        else f"{result.seconds:.1f} s"
    table = Table(title=f"check ({when})", show_lines=False)
    for col in ("table", "read", "accepted", "rejected", "warnings"):
        table.add_column(col, justify="left" if col == "table" else "right")
    for row in result.summary.itertuples():
        if not row.configured:
            table.add_row(row.table, "not configured", "", "", "")
            continue
        table.add_row(escape(row.table), f"{row.rows_read:,}", f"{row.accepted:,}", f"{row.rejected:,}", f"{row.warnings:,}")
    console.print(table)
    for note in getattr(result, "notes", []):
        console.print(f"[yellow]note:[/] {escape(note)}")
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


def run_build(settings, force: bool = False, *, wait: float | None = None, since=None):
    """Check (when needed) and build the panels, showing progress; returns the BuildResult.

    The check table is printed as soon as the check is done, so that it is there also when the
    build then fails; notes about the workspace lock (waiting for another build, a stale lock
    taken over) go to ``err_console``.
    """
    from . import panels

    started = time.perf_counter()
    with StepProgress() as watcher:
        def notify(text):
            err_console.print(f"[yellow]note:[/] {escape(text)}")

        result = panels.build(settings, force=force, watcher=watcher, on_check=watcher.paused(print_check),
                              notify=notify, wait=wait, since=since)
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
