"""The embedded DuckDB engine: connections with the config's threads, memory limit and spill folder."""

from __future__ import annotations

import os
import socket
from pathlib import Path

import duckdb

from ..config import Settings


def default_memory_limit() -> str:
    """Half of physical memory: room for Python beside DuckDB, which spills the rest to disk."""
    try:
        total = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):
        return "4GB"
    return f"{max(1, int(total / 2**30 * 0.5))}GB"


def quote_ident(name: str) -> str:
    """Quote an identifier for DuckDB (and standard SQL): double quotes, inner quotes doubled."""
    return '"' + str(name).replace('"', '""') + '"'


def connect(settings: Settings | None = None, database: str | Path = ":memory:", read_only: bool = False) -> duckdb.DuckDBPyConnection:
    """Open a DuckDB connection configured from ``[engine]``.

    Without a memory limit in the config, half of the machine's memory is used, and work beyond
    that spills to ``temp_directory`` (default: ``<workspace>/tmp``) instead of failing, in a
    folder of this process's own (``<host>-<pid>``): DuckDB names its spill files alike in every
    process and removes the folder it made when it closes, so processes must not share one.
    """
    con = duckdb.connect(str(database), read_only=read_only)
    engine = settings.engine if settings is not None else None
    threads = engine.threads if engine and engine.threads else os.cpu_count() or 1
    memory = engine.memory_limit if engine and engine.memory_limit else default_memory_limit()
    if engine and engine.temp_directory:
        temp = settings.resolve(engine.temp_directory)
    elif settings is not None:
        temp = settings.workspace_dir / "tmp"
    else:
        temp = None
    con.execute(f"SET threads = {int(threads)}")
    con.execute("SET memory_limit = ?", [memory])
    if temp is not None:
        temp = Path(temp) / f"{socket.gethostname()}-{os.getpid()}"
        try:
            temp.mkdir(parents=True, exist_ok=True)
        except OSError:
            temp = None  # a read-only workspace can still be read; work that would spill then fails
    if temp is not None:
        con.execute("SET temp_directory = ?", [str(temp)])
    # Row order is never relied on (every table is keyed), so DuckDB may stream and spill freely.
    con.execute("SET preserve_insertion_order = false")
    con.execute("SET TimeZone = 'UTC'")
    con.execute("SET enable_progress_bar = false")
    return con


def scalar(con: duckdb.DuckDBPyConnection, sql: str, params: list | None = None):
    """The first value of a query's first row (None when there is no row), fully fetched."""
    rows = con.execute(sql, params or []).fetchall()
    return rows[0][0] if rows else None
