"""The workspace folder: checked inputs, panels, and the state that lets `build` skip work.

Layout (``[workspace] path``, default ``.liftlag`` beside the config)::

    checked.duckdb   accepted input rows, rejected rows with reasons, summaries
    panels.duckdb    one table per panel (sql/panels/)
    state.json       fingerprints of what each file was built from
    tmp/             DuckDB's spill folder (unless [engine] temp_directory says otherwise)

Each database is written under a temporary name and moved into place only when complete, so a
failed or interrupted run never leaves a workspace that looks finished.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
from pathlib import Path

import duckdb

from . import __version__
from .config import Settings
from .errors import AnalysisError

CHECKED = "checked.duckdb"
PANELS = "panels.duckdb"
STATE = "state.json"


def path(settings: Settings, name: str) -> Path:
    return settings.workspace_dir / name


def read_state(settings: Settings) -> dict:
    p = path(settings, STATE)
    if not p.exists():
        return {}
    try:
        return json.loads(p.read_text())
    except (OSError, json.JSONDecodeError):
        return {}


def write_state(settings: Settings, state: dict) -> None:
    p = path(settings, STATE)
    tmp = p.with_suffix(".json.partial")
    tmp.write_text(json.dumps(state, indent=2, sort_keys=True, default=str))
    os.replace(tmp, p)


def fingerprint(*parts) -> str:
    """A stable digest of JSON-able parts (config, file fingerprints, SQL text, version)."""
    digest = hashlib.sha256()
    digest.update(__version__.encode())
    for part in parts:
        digest.update(json.dumps(part, sort_keys=True, default=str).encode())
    return digest.hexdigest()[:20]


@contextlib.contextmanager
def atomic_database(settings: Settings, name: str):
    """Yield a path to write a DuckDB file to; it replaces ``name`` only if the block succeeds."""
    settings.workspace_dir.mkdir(parents=True, exist_ok=True)
    final = path(settings, name)
    partial = final.with_name(final.name + ".partial")
    for leftover in (partial, partial.with_name(partial.name + ".wal")):
        leftover.unlink(missing_ok=True)
    try:
        yield partial
    except BaseException:
        partial.unlink(missing_ok=True)
        partial.with_name(partial.name + ".wal").unlink(missing_ok=True)
        raise
    final.with_name(final.name + ".wal").unlink(missing_ok=True)
    os.replace(partial, final)


def connect(settings: Settings) -> duckdb.DuckDBPyConnection:
    """A read-only connection on the panels, with the checked inputs attached as ``checked``.

    Raises
    ------
    AnalysisError
        When the workspace has not been built (run ``liftlag build -c CONFIG`` first).
    """
    from .engine.duckdb import connect as engine_connect

    panels = path(settings, PANELS)
    checked = path(settings, CHECKED)
    if not panels.exists() or not checked.exists():
        raise AnalysisError(
            f"no built workspace in {settings.workspace_dir}; run `liftlag build -c {settings.config_path}` first"
        )
    state = read_state(settings)
    built_on = state.get("build", {}).get("check_fingerprint")
    if built_on is None or built_on != state.get("check", {}).get("fingerprint"):
        raise AnalysisError(
            f"the panels in {settings.workspace_dir} are not those of the last check; "
            f"run `liftlag build -c {settings.config_path}`"
        )
    con = engine_connect(settings, panels, read_only=True)
    con.execute("ATTACH ? AS checked (READ_ONLY)", [str(checked)])
    return con
