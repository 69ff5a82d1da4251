"""Build the panels: ``sql/panels/*.sql``, one table per file, in the order of ``PANEL_ORDER``.

Each file's stem is the table it builds; it reads only the accepted input rows (under the
contract's table names) and the panels before it. Parameters (window lengths, margin rate) are
bound as DuckDB variables, never formatted into the SQL. ``build`` holds the workspace lock, checks
the export and builds the panels in one pass over the files into a private file, and publishes it
as ``panels.duckdb`` with one rename when all are built; it skips the work when the inputs (by
content), the SQL and the settings each panel reads are unchanged (``toolkit.freshness``).
"""

from __future__ import annotations

import json
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import duckdb

from . import checks, freshness, sqlfiles, workspace
from .config import Settings
from .contract import INPUT_TABLES, PANELS
from .engine import open_engine
from .engine.duckdb import connect as engine_connect
from .engine.duckdb import quote_ident as q
from .engine.duckdb import scalar
from .errors import DataError, DataWarning
from .steps import Timings

PANELS_DIR = sqlfiles.folder("panels")
PANEL_ORDER: tuple[str, ...] = tuple(PANELS)  # orders, customer_periods, purchase_gaps, campaign_windows, customer_quarters


def panel_sql(name: str) -> str:
    return (PANELS_DIR / f"{name}.sql").read_text(encoding="utf-8")


def parameters(settings: Settings) -> dict[str, object]:
    """The DuckDB variables the panel SQL reads with getvariable()."""
    return {
        "margin_rate": settings.economics.margin_rate,
        "pre_period_days": settings.windows.pre_period_days,
        "after_days": settings.windows.after_days,
    }


def parameter_settings() -> dict[str, str]:
    """Each parameter's key in the config (for the reasons a rebuild gives)."""
    return {
        "margin_rate": "economics.margin_rate",
        "pre_period_days": "windows.pre_period_days",
        "after_days": "windows.after_days",
    }


@dataclass
class BuildResult:
    skipped: bool
    rows: dict[str, int] = field(default_factory=dict)
    seconds: dict[str, float] = field(default_factory=dict)
    check: checks.CheckResult | None = None
    fingerprint: str = ""
    reasons: list[str] = field(default_factory=list)  # why it was built (empty when skipped)
    steps: list[dict] = field(default_factory=list)  # per step: step, seconds, rows (toolkit.steps)
    taken_over: dict | None = None  # the holder of a stale lock this build took over


def build_fingerprint(settings: Settings) -> str:
    """The fingerprint a build of ``settings`` would have now (see ``toolkit.freshness``)."""
    return freshness.build_fingerprint(freshness.current(settings))


def build(settings: Settings, *, force: bool = False, progress=None, on_check=None, notify=None,
          wait: float | None = None, command: str | None = None, watcher=None, since=None) -> BuildResult:
    """Check the export and build every panel into ``panels.duckdb``, in one pass over the files.

    Holds the workspace lock throughout (waiting up to ``wait`` seconds, default
    ``[workspace] lock_wait_seconds``, for another build). Writes to private files and publishes
    ``panels.duckdb`` with one rename when every panel is built; on any failure, or Ctrl-C, the
    private files are removed, the published panels stay as they were, and ``state.json`` records
    the failure (when, why, at which step).

    Parameters
    ----------
    settings : Settings
    force : bool, default=False
        Rebuild even when nothing has changed.
    progress : callable, optional
        Called with ``(step, detail)`` as each step starts (steps: check, panel, publish).
    on_check : callable, optional
        Called with the CheckResult as soon as the check is done, also when the build then fails.
    notify : callable, optional
        Called with a line of text about the lock (waiting for another build, a stale lock taken over).
    wait : float, optional
        Seconds to wait for the workspace lock.
    command : str, optional
        The command recorded as the lock's holder and in state.json.
    watcher : object, optional
        Told when each step starts and ends (``started(step)``, ``finished(step)``; see
        ``toolkit.steps``): the terminal's progress display.
    since : datetime.date, optional
        ``build --since``: check only the order-line files from that day on where that is sound
        (``toolkit.incremental``); otherwise a full build, and ``notify`` is told why.

    Raises
    ------
    DataError
        The check found the export unusable (the message lists why).
    WorkspaceBusy
        Another process held the workspace longer than ``wait`` (exit code 2).
    """
    from .lock import command_line, hold

    say = progress or (lambda step, detail="": None)
    wait = settings.workspace.lock_wait_seconds if wait is None else wait
    command = command or command_line()
    with hold(settings.workspace_dir, command, wait=wait, notify=notify) as taken_over:
        workspace.remove_leftovers(settings)
        step = {"now": "reading the inputs"}
        fp = None

        def track(kind, detail=""):
            step["now"] = f"{kind}: {detail}" if detail else kind
            say(kind, detail)

        try:
            record = freshness.current(settings)
            fp = freshness.build_fingerprint(record)
            published = workspace.published_build(settings)
            if not force and published is not None and published.get("fingerprint") == fp:
                state = workspace.read_state(settings)
                if state.pop("failed", None) is not None:  # the inputs are back to those of the good build
                    workspace.write_state(settings, state)
                return BuildResult(skipped=True, rows=published.get("rows", {}), fingerprint=fp, taken_over=taken_over)
            reasons = ["forced (--force)"] if force else freshness.differences(
                published.get("record") if published else None, record)
            plan = None
            if since is not None:
                from . import incremental

                plan = incremental.plan(settings, since, record)
                if plan.sound and not plan.new_files:
                    plan.reasons.append(f"no order-line file lies on or after {plan.since}")
                say_note = notify or (lambda text: None)
                say_note(plan.describe() if plan.sound else
                         f"--since {since}: a full build instead, because " + "; ".join(plan.reasons))
                plan = plan if plan.sound else None
            try:
                result = _build(settings, record, fp, track, on_check, command, watcher=watcher, force=force, plan=plan)
            except checks.NotIncremental as exc:
                (notify or (lambda text: None))(f"--since {since}: a full build instead, because {exc}")
                result = _build(settings, record, fp, track, on_check, command, watcher=watcher, force=force)
            result.reasons, result.taken_over = reasons, taken_over
            return result
        except BaseException as exc:
            interrupted = _is_interrupt(exc)
            reason = "interrupted (Ctrl-C)" if interrupted else (str(exc) or type(exc).__name__)
            try:
                workspace.record_failure(
                    settings, status="interrupted" if interrupted else "failed", reason=reason,
                    exit_code=1 if interrupted else getattr(exc, "exit_code", 1), step=step["now"],
                    fingerprint=fp, command=command, error=type(exc).__name__,
                )
            except OSError:
                pass  # a read-only workspace: the error itself says what is wrong
            if interrupted and not isinstance(exc, KeyboardInterrupt):
                raise KeyboardInterrupt from exc  # DuckDB's own error for Ctrl-C inside a query
            raise


def _is_interrupt(exc: BaseException) -> bool:
    """Ctrl-C: Python's KeyboardInterrupt, or DuckDB's error when it arrives inside a query."""
    if isinstance(exc, (KeyboardInterrupt, duckdb.InterruptException)):
        return True
    return isinstance(exc, (duckdb.Error, RuntimeError)) and "interrupted" in str(exc).lower()


class _BuildWatcher:
    """Passes each step to the build's ``progress(kind, detail)`` (and so to the failure record)
    and to the caller's watcher."""

    def __init__(self, say, watcher=None):
        self.say, self.watcher = say, watcher

    def started(self, step) -> None:
        kind, _, detail = step.name.partition(" ")
        if kind in ("panel", "publish"):
            self.say(kind, detail)
        else:
            self.say("check", step.name)
        call = getattr(self.watcher, "started", None)
        if call is not None:
            call(step)

    def finished(self, step) -> None:
        call = getattr(self.watcher, "finished", None)
        if call is not None:
            call(step)


def _build(settings: Settings, record: dict, fp: str, say, on_check, command: str, watcher=None,
           force: bool = False, plan=None) -> BuildResult:
    """The build proper, under the lock: check (or reuse a fresh one), panels, publish."""
    if settings.economics.margin_rate is None and "products" not in settings.tables:
        warnings.warn(
            f"{settings.config_path}: no products table and no economics.margin_rate: margins "
            "(margin_amount, margin after discount) will be empty; set economics.margin_rate",
            DataWarning, stacklevel=3,
        )
    started_at = workspace.now()
    started = time.perf_counter()
    timings = Timings(_BuildWatcher(say, watcher))
    result = BuildResult(skipped=False, fingerprint=fp)
    check_fp = freshness.check_fingerprint(record)
    checked_published = workspace.path(settings, workspace.CHECKED)
    # A check is reused on DuckDB only (the Spark engine checks again: its reuse path is not built).
    spark = getattr(settings.engine, "kind", "duckdb") == "spark"
    reuse = None if force or spark or plan is not None else checks.reusable(settings, check_fp)
    checked_private = None if reuse else workspace.private_path(settings, workspace.CHECKED)
    panels_private = workspace.private_path(settings, workspace.PANELS)
    checked_done = False
    con = open_engine(settings)
    try:
        if reuse:
            result.check = checks.reuse(con, settings, reuse, timings=timings)
        if result.check is None:
            checked_private = checked_private or workspace.private_path(settings, workspace.CHECKED)
            result.check = checks.validate(con, settings, checked_path=checked_private, fingerprint=check_fp,
                                           timings=timings, plan=plan)
        checked_done = True
        if on_check is not None:
            on_check(result.check)
        if not result.check.usable:
            raise DataError("the export cannot be used as it is:\n  - " + "\n  - ".join(result.check.problems))
        # The panels read the accepted rows under the contract's table names.
        for name in INPUT_TABLES:
            con.execute(f"CREATE OR REPLACE TEMP VIEW {q(name)} AS SELECT * FROM {q('accepted_' + name)}")
        for key, value in parameters(settings).items():
            con.execute(f"SET VARIABLE {key} = ?", [value])
        con.execute("ATTACH ? AS out", [str(panels_private)])
        con.execute("SET search_path = 'out.main'")
        for name in PANEL_ORDER:
            with timings.step(f"panel {name}") as step:
                con.execute(f"CREATE TABLE out.main.{q(name)} AS {panel_sql(name)}")
                result.rows[name] = step.rows = int(scalar(con, f"SELECT count(*) FROM out.main.{q(name)}"))
            result.seconds[name] = step.seconds
        con.execute("SET search_path = 'memory.main'")
        if result.check.reused_from is not None:
            con.execute("DETACH chk")  # attached by checks.reuse
        con.execute("DETACH out")
        # The checked inputs travel with the panels, so that a reader sees one build, whole.
        source = checked_private if checked_private is not None else checked_published
        with timings.step("publish checked inputs and build record"):
            _seal_checked(settings, panels_private, source)
        result.steps = timings.records()
        build = {
            "fingerprint": fp,
            "check_fingerprint": check_fp,
            "started_at": started_at,
            "finished_at": workspace.now(),
            "seconds": round(time.perf_counter() - started, 2),
            "rows": result.rows,
            "panel_seconds": result.seconds,
            "steps": result.steps,
            "check_reused_from": result.check.reused_from,
            "since": None if plan is None else {"day": str(plan.since), "checked_files": len(plan.new_files),
                                                "kept_files": len(plan.kept_files)},
            "command": command,
            "version": record["version"],
            "record": record,
        }
        _seal_record(settings, panels_private, build)
    except BaseException:
        con.close()
        workspace.discard(panels_private)
        if checked_private is not None:
            if checked_done:
                # The failed check's rejects are for people to read (analyses never read this file).
                workspace.publish(settings, checked_private, workspace.CHECKED)
            else:
                workspace.discard(checked_private)
        raise
    con.close()
    workspace.publish(settings, panels_private, workspace.PANELS)  # the commit point
    if checked_private is not None:
        workspace.publish(settings, checked_private, workspace.CHECKED)
    state = workspace.read_state(settings)
    state.pop("failed", None)
    state["build"] = {k: v for k, v in build.items() if k not in ("record", "steps")}
    state["build"]["panels"] = {name: {**record["panels"][name], "rows": result.rows[name],
                                       "seconds": result.seconds[name]} for name in PANEL_ORDER}
    state["build"]["inputs"] = record["inputs"]
    state["check"] = checks.state_entry(result.check)
    workspace.write_state(settings, state)
    workspace.write_manifest(settings, "build", {k: build[k] for k in (
        "fingerprint", "check_fingerprint", "started_at", "finished_at", "seconds", "rows", "steps",
        "check_reused_from", "since", "command", "version")})
    return result


def _seal_checked(settings: Settings, panels_private: Path, checked: Path) -> None:
    """Copy the checked inputs into the private panels file (schema ``checked``), so that a reader
    sees one build, whole. Plain DuckDB on the two files, whichever engine built them."""
    con = engine_connect(settings, panels_private)
    try:
        con.execute("ATTACH ? AS chk (READ_ONLY)", [str(checked)])
        con.execute("CREATE SCHEMA checked")
        for (table,) in con.execute(
                "SELECT table_name FROM duckdb_tables() WHERE database_name = 'chk' AND schema_name = 'main' "
                "ORDER BY 1").fetchall():  # not meta.check, the check's own record
            con.execute(f"CREATE TABLE checked.{q(table)} AS SELECT * FROM chk.main.{q(table)}")
        con.execute("DETACH chk")
    finally:
        con.close()


def _seal_record(settings: Settings, panels_private: Path, build: dict) -> None:
    """Write the build record (``meta.build``) into the private panels file, the last write before
    it is published."""
    con = engine_connect(settings, panels_private)
    try:
        con.execute("CREATE SCHEMA meta")
        con.execute(f"CREATE TABLE {workspace.META_TABLE} (fingerprint VARCHAR, record VARCHAR)")
        con.execute(f"INSERT INTO {workspace.META_TABLE} VALUES (?, ?)",
                    [build["fingerprint"], json.dumps(build, default=str)])
        con.execute("CHECKPOINT")  # the file is complete, with no write-ahead log
    finally:
        con.close()


def sql_files() -> list[Path]:
    return [PANELS_DIR / f"{name}.sql" for name in PANEL_ORDER]
