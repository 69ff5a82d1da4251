"""The workspace folder: the published panels, the last check, and the state of the last builds.

Layout (``[workspace] path``, default ``.liftlag`` beside the config)::

    panels.duckdb     what analyses read: one table per panel (sql/panels/), the checked inputs
                      in schema ``checked`` (``checked.promotions``, ...) and, in ``meta.build``,
                      the record of what this build was made from (toolkit.freshness)
    checked.duckdb    the last check's results for people to read: accepted inputs (not the order
                      lines), rejected_rows, warning_rows, summaries (written by `check` and by
                      every `build`, also one that then fails)
    state.json        the last good build, the last failure (when and why), the last check
    manifest.json     timings of the last `check` and the last `build`: per step (reading a table,
                      each check rule, each panel, writing) its seconds and rows (toolkit.steps)
    build.lock        the writers' lock, and build.lock.json: who holds it (toolkit.lock)
    tmp/<host>-<pid>  DuckDB's spill folder of each process (unless [engine] temp_directory)
    spark/<private>   the Spark engine's Parquet on its way into a private file ([engine] kind =
                      "spark"; removed when loaded, or as a leftover of a process that ended)

Writers (``build``, ``check``) hold the lock and write to private files named
``<file>.<host>-<pid>-<token>.partial``, moved into place with one ``os.replace`` when complete;
a failed or interrupted build removes its private files and leaves the published panels as they
were. Readers take no lock: they open ``panels.duckdb`` read-only, which is always a complete
build (the rename is atomic), and find in it what it was made from, so that ``state.json`` never
needs to be read in step with it.
"""

from __future__ import annotations

import datetime as dt
import json
import os
import secrets
import shutil
import socket
from pathlib import Path

import duckdb

from . import __version__
from .config import Settings
from .errors import AnalysisError

CHECKED = "checked.duckdb"
PANELS = "panels.duckdb"
STATE = "state.json"
MANIFEST = "manifest.json"
META_TABLE = "meta.build"

# Published builds that a reader may use although they are stale: workspace folder -> build
# fingerprint. Set by toolkit.ensure when the user chose to read the last good build after a
# failed one, so that the analyses' own connect() calls in the same process accept it.
_accepted_stale: dict[Path, str] = {}


def path(settings: Settings, name: str) -> Path:
    return settings.workspace_dir / name


def now() -> str:
    return dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds")


def process_tag() -> str:
    return f"{socket.gethostname()}-{os.getpid()}"


# --- state.json ---------------------------------------------------------------------------------


def _read_json(settings: Settings, name: str) -> dict:
    """A JSON file of the workspace ({} when it is missing or unreadable)."""
    p = path(settings, name)
    if not p.exists():
        return {}
    try:
        return json.loads(p.read_text())
    except (OSError, json.JSONDecodeError):
        return {}


def read_state(settings: Settings) -> dict:
    return _read_json(settings, STATE)


def write_state(settings: Settings, state: dict) -> None:
    """Replace state.json atomically (written by the lock's holder only)."""
    p = path(settings, STATE)
    p.parent.mkdir(parents=True, exist_ok=True)
    tmp = private_path(settings, STATE)
    tmp.write_text(json.dumps(state, indent=2, sort_keys=True, default=str))
    os.replace(tmp, p)


def fingerprint(*parts) -> str:
    """A stable digest of JSON-able parts (kept for callers outside the workspace)."""
    import hashlib

    digest = hashlib.sha256()
    digest.update(__version__.encode())
    for part in parts:
        digest.update(json.dumps(part, sort_keys=True, default=str).encode())
    return digest.hexdigest()[:20]


def read_manifest(settings: Settings) -> dict:
    """``manifest.json``: the last check's and the last build's timings ({} when there is none)."""
    return _read_json(settings, MANIFEST)


def write_manifest(settings: Settings, command: str, entry: dict) -> None:
    """Record ``entry`` (fingerprint, seconds, ``steps``: [{step, seconds, rows}], ...) as the
    last ``command`` ("check" or "build") in ``manifest.json``, replaced atomically (by the lock's holder)."""
    manifest = read_manifest(settings)
    manifest["tool"], manifest["version"] = "liftlag", __version__
    manifest[command] = {**entry, "at": now()}
    tmp = private_path(settings, MANIFEST)
    tmp.write_text(json.dumps(manifest, indent=2, sort_keys=True, default=str))
    os.replace(tmp, path(settings, MANIFEST))


# --- private files and publishing ----------------------------------------------------------------


def private_path(settings: Settings, name: str) -> Path:
    """A file name no other process uses: ``<name>.<host>-<pid>-<token>.partial`` in the workspace."""
    settings.workspace_dir.mkdir(parents=True, exist_ok=True)
    return path(settings, f"{name}.{process_tag()}-{secrets.token_hex(4)}.partial")


def discard(file: Path) -> None:
    """Remove a private database file and its write-ahead log."""
    for p in (file, file.with_name(file.name + ".wal")):
        p.unlink(missing_ok=True)


def publish(settings: Settings, private: Path, name: str) -> Path:
    """Move a complete private database file into place (one atomic rename)."""
    final = path(settings, name)
    # A write-ahead log beside the published name would be replayed onto the new file.
    final.with_name(final.name + ".wal").unlink(missing_ok=True)
    private.with_name(private.name + ".wal").unlink(missing_ok=True)
    os.replace(private, final)
    return final


def remove_leftovers(settings: Settings) -> list[str]:
    """Private files and spill folders of processes that ended without cleaning up.

    Called by the lock's holder: no other writer runs, so every private file not of this process
    is a leftover. Spill folders are removed only when their process no longer runs.
    """
    from .lock import pid_alive

    mine = process_tag()
    removed = []
    ws = settings.workspace_dir
    if not ws.exists():
        return removed
    for p in ws.glob("*.partial*"):
        if f".{mine}-" not in p.name and f".{mine}." not in p.name:
            p.unlink(missing_ok=True)
            removed.append(p.name)
    # The Spark engine's staging folders are named after the private files they are bound for.
    for p in (ws / "spark").glob("*.partial") if (ws / "spark").is_dir() else ():
        if f".{mine}-" not in p.name:
            shutil.rmtree(p, ignore_errors=True)
            removed.append(f"spark/{p.name}")
    host = socket.gethostname()
    tmp = ws / "tmp"
    if tmp.is_dir():
        for d in tmp.iterdir():
            owner, _, pid = d.name.rpartition("-")
            if d.is_dir() and owner == host and pid.isdigit() and not pid_alive(int(pid)):
                shutil.rmtree(d, ignore_errors=True)
    return removed


# --- failures -------------------------------------------------------------------------------------


def record_failure(settings: Settings, *, status: str, reason: str, exit_code: int, step: str | None,
                   fingerprint: str | None, command: str, error: str | None = None) -> dict:
    """Mark the workspace as failed in state.json: when, why, at which step, of which inputs."""
    failure = {
        "status": status,  # failed | interrupted
        "at": now(),
        "reason": reason,
        "error": error,
        "exit_code": exit_code,
        "step": step,
        "fingerprint": fingerprint,
        "pid": os.getpid(),
        "host": socket.gethostname(),
        "command": command,
    }
    state = read_state(settings)
    state["failed"] = failure
    write_state(settings, state)
    return failure


# --- reading --------------------------------------------------------------------------------------


def read_meta(con: duckdb.DuckDBPyConnection) -> dict | None:
    """The build record stored in a panels database (None when it has none: an older layout)."""
    try:
        rows = con.execute(f"SELECT record FROM {META_TABLE}").fetchall()
    except duckdb.Error:
        return None
    return json.loads(rows[0][0]) if rows else None


def published_build(settings: Settings) -> dict | None:
    """The build record of the published panels (None when there are none)."""
    panels = path(settings, PANELS)
    if not panels.exists():
        return None
    try:
        con = duckdb.connect(str(panels), read_only=True)
    except duckdb.Error:
        return None
    try:
        return read_meta(con)
    finally:
        con.close()


def accept_stale(settings: Settings, build_fingerprint: str) -> None:
    """Let this process's analyses read the published build although it is stale (see toolkit.ensure)."""
    _accepted_stale[settings.workspace_dir.resolve()] = build_fingerprint


def staleness(settings: Settings, build: dict | None) -> list[str]:
    """Why the published build does not match the inputs and settings now ([] when it does)."""
    from . import freshness

    if build is None:
        return ["no build yet"]
    record = freshness.current(settings)
    if freshness.build_fingerprint(record) == build.get("fingerprint"):
        return []
    return freshness.differences(build.get("record"), record) or ["the inputs or settings changed"]


def connect(settings: Settings, *, check_fresh: bool = True) -> duckdb.DuckDBPyConnection:
    """A read-only connection on the published panels; the checked inputs are ``checked.<table>``.

    Takes no lock: ``panels.duckdb`` is replaced whole by a finished build, so the connection sees
    one complete build. With ``check_fresh`` (the default) it refuses panels made from other inputs
    or settings than the config's now, unless this process chose to read them
    (``toolkit.ensure.ensure_built`` after a failed build).

    Raises
    ------
    AnalysisError
        When there are no panels, or they are stale (the message says what changed).
    """
    from .engine.duckdb import connect as engine_connect

    panels = path(settings, PANELS)
    if not panels.exists():
        raise AnalysisError(
            f"no built workspace in {settings.workspace_dir}; run `liftlag build -c {settings.config_path}` first"
        )
    con = engine_connect(settings, panels, read_only=True)
    try:
        build = read_meta(con)
        if build is None:
            raise AnalysisError(
                f"the panels in {settings.workspace_dir} were built by an older liftlag; "
                f"run `liftlag build -c {settings.config_path}`"
            )
        accepted = _accepted_stale.get(settings.workspace_dir.resolve()) == build.get("fingerprint")
        if check_fresh and not accepted:
            from . import freshness

            reasons = staleness(settings, build)
            if reasons:
                raise AnalysisError(
                    f"the panels in {settings.workspace_dir} were built from other inputs or settings "
                    f"({freshness.summary(reasons)}); run `liftlag build -c {settings.config_path}`"
                )
    except BaseException:
        con.close()
        raise
    return con
