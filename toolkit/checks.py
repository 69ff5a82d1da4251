"""Validation: every row read is accepted or rejected with its reason; odd rows are counted.

The rules are the files in ``sql/checks/``, one rule per file, run in the order of ``RULES``.
Each file selects ``(table_name, _row_id, detail)`` for the rows it trips. A rejected row's
``reason`` is the first rejection rule it trips (the others are kept in ``other_reasons``), so
accepted + rejected = read holds per table by construction, and is verified before anything is
written. Warnings never remove a row.
"""

from __future__ import annotations

import datetime as dt
import json
import time
from dataclasses import dataclass, field
from pathlib import Path

import duckdb
import pandas as pd

from . import gates, sources, sqlfiles, workspace
from .config import Settings
from .contract import ARMS, AUDIENCES, INPUT_TABLES, MECHANICS
from .engine import open_engine
from .engine.duckdb import quote_ident as q
from .engine.duckdb import scalar
from .errors import DataError
from .steps import TextWatcher, Timings

SQL_DIR = sqlfiles.root()  # sql/ in a clone, toolkit/sql in an installed package
CHECKS_DIR = sqlfiles.folder("checks")


@dataclass(frozen=True)
class Rule:
    name: str
    severity: str  # "reject" or "warn"
    after_promotions: bool = False  # needs the accepted promotions (runs after every promotions rule)

    @property
    def path(self) -> Path:
        return CHECKS_DIR / f"{self.name}.sql"

    def sql(self) -> str:
        return self.path.read_text(encoding="utf-8")


# The explicit run order. A rejected row's reason is the first rejection rule it trips.
RULES: tuple[Rule, ...] = (
    Rule("missing_required", "reject"),
    Rule("unparseable_value", "reject"),
    Rule("timestamp_beyond_horizon", "reject"),
    Rule("date_outside_partition", "reject"),
    Rule("duplicate_row", "reject"),
    Rule("duplicate_key", "reject"),
    Rule("value_not_allowed", "reject"),
    Rule("ends_before_starts", "reject"),
    Rule("unknown_promotion", "reject", after_promotions=True),
    Rule("discount_deeper_than_depth", "warn", after_promotions=True),
    Rule("order_outside_promotion_dates", "warn", after_promotions=True),
    Rule("customer_in_both_arms", "warn"),
    Rule("future_timestamp", "warn"),
    Rule("net_above_list", "warn"),
    Rule("unparseable_optional", "warn"),
    Rule("return_sign_mismatch", "warn"),
)

WARNING_EXAMPLES = 1000  # rows kept per warning rule in warning_rows; the summary counts them all


@dataclass
class CheckResult:
    """What `liftlag check` found, per table."""

    summary: pd.DataFrame  # table, rows_read, accepted, rejected, warnings
    rejects: pd.DataFrame  # table, reason, rows
    warnings: pd.DataFrame  # table, rule, rows
    problems: list[str] = field(default_factory=list)  # reasons the data cannot be used
    fingerprint: str = ""
    seconds: float = 0.0
    examples: pd.DataFrame | None = None  # up to 3 rejected rows per table and reason
    steps: list[dict] = field(default_factory=list)  # per step: step, seconds, rows (toolkit.steps)
    checked_at: str = ""  # the moment the rules ran (UTC, ISO): the horizon and "the future" are relative to it
    reused_from: str | None = None  # a build that reused this check (toolkit.checks.reuse): when it ran
    notes: list[str] = field(default_factory=list)  # what was read, when a [period] or --since narrowed it

    @property
    def usable(self) -> bool:
        return not self.problems


def input_fingerprint(settings: Settings) -> tuple[str, dict]:
    """The check's fingerprint (inputs by content, table mappings, check settings, rules, code) and
    the input files' fingerprints per table (see ``toolkit.freshness``)."""
    from . import freshness

    record = freshness.current(settings)
    return freshness.check_fingerprint(record), record["inputs"]


def state_entry(result: "CheckResult") -> dict:
    """What state.json keeps of a check."""
    return {"fingerprint": result.fingerprint, "usable": result.usable, "problems": result.problems,
            "checked_at": result.checked_at, "seconds": round(result.seconds, 3), "steps": result.steps,
            "summary": result.summary.to_dict(orient="records")}


def _shifted(moment: dt.datetime, days: int) -> dt.datetime:
    """``moment`` plus ``days``, held within the calendar (a huge horizon means no horizon)."""
    try:
        return moment + dt.timedelta(days=days)
    except OverflowError:
        return dt.datetime.max if days > 0 else dt.datetime.min


def _allowed_text(settings: Settings, table: str, column: str, allowed: tuple[str, ...]) -> str:
    """What a coded column may hold, in the export's own codes where the config maps them."""
    mapping = settings.tables[table].values.get(column, {}) if table in settings.tables else {}
    if not mapping:
        return "one of " + ", ".join(allowed)
    codes = ", ".join(f"{code} ({value})" for value, code in mapping.items())
    unmapped = [v for v in allowed if v not in mapping]
    rest = f", or {', '.join(unmapped)}" if unmapped else ""
    return f"one of the export's codes {codes} (tables.{table}.values.{column}){rest}"


def _accepted_select(con, name: str, rejected: str | None = None, staged: str | None = None) -> str:
    """SELECT of one table's accepted rows, with the contract's derivations applied.

    ``rejected``: the ANTI JOIN that drops the rejected rows (default: the ``rejected`` table by
    row key; "" when the table has no rejected row); ``staged``: the staged view read (default
    ``staged_<name>``)."""
    contract = INPUT_TABLES[name]
    staged = staged or f"staged_{name}"
    cols = [c.name for c in contract.columns]
    extras = []
    if contract.extra_columns:
        described = [r[0] for r in con.execute(f"DESCRIBE {q(staged)}").fetchall()]
        extras = [c for c in described if not c.startswith("_") and c not in cols]
    exprs = []
    for c in cols:
        if name == "transactions" and c == "list_amount":
            # list = net + discount; derive the missing one (no discount known: list = net).
            exprs.append("coalesce(list_amount, net_amount + discount_amount, net_amount) AS list_amount")
        elif name == "transactions" and c == "discount_amount":
            exprs.append("coalesce(discount_amount, list_amount - net_amount, 0.0) AS discount_amount")
        else:
            exprs.append(q(c))
    exprs += [_typed_attribute(con, name, e) for e in extras]
    if rejected is None:
        rejected = f"ANTI JOIN rejected AS r ON r.table_name = '{name}' AND r._row_id = s._row_id"
    return f"SELECT {', '.join(exprs)} FROM {q(staged)} AS s {rejected}".rstrip()


def _typed_attribute(con, table: str, column: str) -> str:
    """Customer attributes arrive as text from CSV: give each the narrowest type all its values take.

    true/false text is BOOLEAN, whole numbers BIGINT, other finite numbers DOUBLE, dates and times
    TIMESTAMP; anything else stays text. (0/1 stays a number: it may be a count.)
    """
    col = q(column)
    types = dict((r[0], r[1]) for r in con.execute(f"DESCRIBE {q('staged_' + table)}").fetchall())
    if types.get(column) != "VARCHAR":
        return col
    value = f"NULLIF(trim({col}), '')"
    tests = (
        ("BOOLEAN", f"lower({value}) IN ('true', 'false')"),
        ("BIGINT", f"regexp_full_match({value}, '[+-]?[0-9]+') AND TRY_CAST({value} AS BIGINT) IS NOT NULL"),
        ("DOUBLE", f"abs(TRY_CAST({value} AS DOUBLE)) < CAST('Infinity' AS DOUBLE)"),
        ("TIMESTAMP", f"TRY_CAST({value} AS TIMESTAMP) IS NOT NULL"),
    )
    for target, fits in tests:
        bad = scalar(con, f"SELECT count(*) FROM {q('staged_' + table)} WHERE {value} IS NOT NULL AND NOT coalesce({fits}, false)")
        if bad == 0:
            return f"TRY_CAST({value} AS {target}) AS {col}"
    return col


# Input tables kept in checked.duckdb. Order lines are not copied there: writing tens of
# millions of lines costs more than reading the export again, so `build` re-reads them through
# the source layer in the same pass that builds the panels.
PERSISTED = tuple(name for name in INPUT_TABLES if name != "transactions")


def run(settings: Settings, progress=None, *, notify=None, watcher=None) -> CheckResult:
    """Validate the export and write ``checked.duckdb`` to the workspace.

    Holds the workspace lock (a running build is waited for, see ``toolkit.lock``); the published
    panels are not touched: analyses find out for themselves whether they are stale.

    Parameters
    ----------
    settings : Settings
        The loaded config.
    progress : callable, optional
        Called with a short text before each step.
    notify : callable, optional
        Called with a line of text about the workspace lock.
    watcher : object, optional
        Told when each step starts and ends (``toolkit.steps``): the terminal's progress display.
        The steps' timings go to the workspace's ``manifest.json`` (``check``) and ``state.json``.

    Raises
    ------
    DataError
        A file is missing, empty or unreadable, or a required column is absent.
    """
    from .lock import hold

    with hold(settings.workspace_dir, wait=settings.workspace.lock_wait_seconds, notify=notify):
        workspace.remove_leftovers(settings)
        con = open_engine(settings)
        timings = Timings(_Both(TextWatcher(progress) if progress else None, watcher))
        try:
            result = validate(con, settings, timings=timings)
        finally:
            con.close()
        state = workspace.read_state(settings)
        state["check"] = state_entry(result)
        workspace.write_state(settings, state)
        workspace.write_manifest(settings, "check", {
            "fingerprint": result.fingerprint, "checked_at": result.checked_at,
            "seconds": round(result.seconds, 3), "usable": result.usable, "steps": result.steps})
    return result


class _Both:
    """Tells two watchers (either may be None)."""

    def __init__(self, *watchers):
        self.watchers = [w for w in watchers if w is not None]

    def started(self, step) -> None:
        for w in self.watchers:
            getattr(w, "started", lambda s: None)(step)

    def finished(self, step) -> None:
        for w in self.watchers:
            getattr(w, "finished", lambda s: None)(step)


def validate(con, settings: Settings, progress=None, *, checked_path: Path | None = None,
             fingerprint: str | None = None, timings: Timings | None = None, plan=None) -> CheckResult:
    """Stage the export on ``con``, run every rule and write the checked tables.

    Leaves on ``con`` the temporary views ``accepted_<table>`` (accepted rows, typed, with the
    contract's derivations) that the panels are built from.

    Parameters
    ----------
    checked_path : Path, optional
        Where to write the checked tables (a private file of the caller, who publishes it). By
        default they are written to a private file and published as ``checked.duckdb``.
    fingerprint : str, optional
        The check's fingerprint when the caller has it (``toolkit.freshness.check_fingerprint``).
    timings : Timings, optional
        Records each step (seconds, rows) and tells its watcher; by default the step names go
        to ``progress``. The records are also in the result's ``steps``.
    plan : toolkit.incremental.Plan, optional
        A ``build --since`` plan: only its new order-line files are checked; the earlier files keep
        the last build's verdicts (``_merge_kept``). Raises ``NotIncremental`` when that is not sound.
    """
    started = time.perf_counter()
    timings = timings or Timings(TextWatcher(progress) if progress else None)
    first_step = len(timings.steps)
    fp = fingerprint or input_fingerprint(settings)[0]
    only = {"transactions": plan.new_files} if plan is not None else None
    infos = sources.register(con, settings, timings=timings, only_files=only)
    for statement in sources.staged_union_sql():
        con.execute(statement)
    for table, column, allowed in (("assignments", "arm", ARMS), ("promotions", "mechanic", MECHANICS),
                                   ("promotions", "audience", AUDIENCES)):
        con.execute(f"SET VARIABLE allowed_{column} = ?", [list(allowed)])
        con.execute(f"SET VARIABLE allowed_{column}_text = ?", [_allowed_text(settings, table, column, allowed)])
    now = dt.datetime.now(dt.timezone.utc).replace(tzinfo=None)
    con.execute("SET VARIABLE checked_at = ?", [now])
    horizon = settings.checks
    con.execute("SET VARIABLE horizon_earliest = ?", [_shifted(now, -round(365.2425 * horizon.past_years))])
    con.execute("SET VARIABLE horizon_latest = ?", [_shifted(now, horizon.future_days)])
    con.execute("SET VARIABLE horizon_promotion_latest = ?", [_shifted(now, horizon.promotion_future_days)])
    con.execute(
        "CREATE OR REPLACE TEMP TABLE check_hits (table_name VARCHAR, _row_id BIGINT, rule VARCHAR, "
        "severity VARCHAR, rule_order INTEGER, detail VARCHAR)"
    )
    promotions_ready = False
    for order, rule in enumerate(RULES):
        if rule.after_promotions and not promotions_ready:
            con.execute(
                "CREATE OR REPLACE TEMP VIEW accepted_promotions AS SELECT * FROM staged_promotions AS s "
                "ANTI JOIN (SELECT _row_id FROM check_hits WHERE table_name = 'promotions' "
                "AND severity = 'reject') AS h ON s._row_id = h._row_id"
            )
            # Why a promotion's row was rejected: the rows that name it then say so.
            con.execute(
                "CREATE OR REPLACE TEMP VIEW rejected_promotions AS SELECT s.promotion_id, h.rule, h.rule_order, "
                "h.detail FROM staged_promotions AS s INNER JOIN check_hits AS h ON h.table_name = 'promotions' "
                "AND h.severity = 'reject' AND s._row_id = h._row_id"
            )
            promotions_ready = True
        with timings.step(f"rule {rule.name}") as step:
            step.rows = _inserted(con.execute(
                f"INSERT INTO check_hits SELECT table_name, _row_id, ?, ?, ?, detail FROM ({rule.sql()})",
                [rule.name, rule.severity, order],
            ))
    with timings.step("rejected and warned rows") as step:
        con.execute(
            "CREATE OR REPLACE TEMP TABLE rejected AS SELECT table_name, _row_id, "
            "arg_min(rule, rule_order) AS reason, arg_min(detail, rule_order) AS detail, "
            "string_agg(rule, ', ' ORDER BY rule_order) AS all_reasons "
            "FROM check_hits WHERE severity = 'reject' GROUP BY table_name, _row_id"
        )
        # Warnings count only rows that are kept.
        con.execute(
            "CREATE OR REPLACE TEMP TABLE warned AS SELECT h.* FROM check_hits AS h "
            "ANTI JOIN rejected AS r ON h.table_name = r.table_name AND h._row_id = r._row_id "
            "WHERE h.severity = 'warn'"
        )
        rejected_per_table = dict(con.execute("SELECT table_name, count(*) FROM rejected GROUP BY 1").fetchall())
        step.rows = sum(rejected_per_table.values())
        for name in INPUT_TABLES:
            # A table with no rejected row is read without the join (and without its row keys).
            drop = None if rejected_per_table.get(name) else ""
            con.execute(f"CREATE OR REPLACE TEMP VIEW {q('accepted_' + name)} AS {_accepted_select(con, name, drop)}")
    with timings.step("accounting (accepted + rejected = read)") as step:
        summary = _summary(con, infos)
        step.rows = int(summary["rows_read"].sum())
    if plan is not None:
        with timings.step("verdicts of the earlier files") as step:
            summary = _merge_kept(con, settings, plan, summary)
            step.rows = int(summary.loc[summary["table"] == "transactions", "rows_read"].iloc[0])
    problems = _problems(summary, con)
    if not problems:
        # The data can be read; can it answer the question? (toolkit.gates)
        with timings.step("sanity gates"):
            problems = gates.evaluate(con, settings, summary)
    with timings.step("examples of rejected rows"):
        examples = _examples(con)
    rejects = con.execute("SELECT * FROM rejects_summary_df").df()
    warnings = con.execute(_warnings_summary_sql(kept=plan is not None)).df()
    result = CheckResult(summary, rejects, warnings, problems, fp, 0.0, examples, checked_at=now.isoformat(),
                         notes=_read_notes(settings, infos, plan, summary))
    target = checked_path or workspace.private_path(settings, workspace.CHECKED)
    with timings.step("writing checked tables") as step:
        try:
            con.execute("ATTACH ? AS out", [str(target)])
            for name in PERSISTED:
                con.execute(f"CREATE TABLE out.{q(name)} AS SELECT * FROM {q('accepted_' + name)}")
            step.rows = _write_rejects(con, kept=plan is not None)
            _write_file_counts(con, kept=plan is not None)
            con.execute("CREATE TABLE out.check_summary AS SELECT * FROM summary_df")
            _write_meta(con, result)
            con.execute("DETACH out")
        except BaseException:
            workspace.discard(target)
            raise
    if checked_path is None:
        workspace.publish(settings, target, workspace.CHECKED)
    result.steps = timings.records()[first_step:]
    result.seconds = time.perf_counter() - started
    return result


# --- reusing a fresh check -------------------------------------------------------------------------

# A build reuses the published check when it was made from the same export, mappings, check
# settings, rules and code (the check fingerprint) this long ago at most: the horizon and
# future-timestamp rules are relative to the moment a check runs, so an older check is run again.
REUSE_SECONDS = 3600
META_TABLE = "meta.check"


def _write_meta(con, result: CheckResult) -> None:
    """``meta.check`` in the checked file: what a later build needs to reuse this check."""
    if not isinstance(con, duckdb.DuckDBPyConnection):
        return  # the Spark engine checks again at every build (no reuse there)
    examples = result.examples if result.examples is not None else pd.DataFrame()
    meta = {"fingerprint": result.fingerprint, "checked_at": result.checked_at, "usable": result.usable,
            "problems": result.problems, "examples": {"columns": list(examples.columns),
                                                      "rows": examples.astype(object).values.tolist()}}
    con.execute("CREATE SCHEMA out.meta")
    con.execute(f"CREATE TABLE out.{META_TABLE} (fingerprint VARCHAR, record VARCHAR)")
    con.execute(f"INSERT INTO out.{META_TABLE} VALUES (?, ?)", [result.fingerprint, json.dumps(meta, default=str)])


def reusable(settings: Settings, fingerprint: str, now: dt.datetime | None = None) -> dict | None:
    """The published check's record when a build may use it instead of checking again: made
    from the same inputs and settings (``fingerprint``), usable, and at most ``REUSE_SECONDS`` old.
    None otherwise."""
    path = workspace.path(settings, workspace.CHECKED)
    if not path.exists():
        return None
    try:
        con = duckdb.connect(str(path), read_only=True)
    except duckdb.Error:
        return None
    try:
        rows = con.execute(f"SELECT record FROM {META_TABLE} WHERE fingerprint = ?", [fingerprint]).fetchall()
    except duckdb.Error:
        return None  # a checked file written before meta.check existed
    finally:
        con.close()
    if not rows:
        return None
    meta = json.loads(rows[0][0])
    try:
        age = ((now or dt.datetime.now(dt.timezone.utc).replace(tzinfo=None))
               - dt.datetime.fromisoformat(meta["checked_at"])).total_seconds()
    except (KeyError, TypeError, ValueError):
        return None
    if not meta.get("usable") or not 0 <= age <= REUSE_SECONDS:
        return None
    return {**meta, "path": str(path)}


def reuse(con, settings: Settings, meta: dict, timings: Timings | None = None) -> CheckResult | None:
    """Take a fresh check's results instead of running the rules again (see ``reusable``).

    Stages the export on ``con`` and defines ``accepted_<table>`` as ``validate`` does: the order
    lines from the export less the rows the check rejected (matched by file and row), the other
    tables from the checked file, which stays attached as ``chk``. Returns None (and attaches
    nothing) when the export read now does not have the rows the check read.
    """
    started = time.perf_counter()
    timings = timings or Timings()
    first_step = len(timings.steps)
    infos = sources.register(con, settings, timings=timings)
    with timings.step("accepted rows from the check") as step:
        con.execute("ATTACH ? AS chk (READ_ONLY)", [meta["path"]])
        summary = con.execute("SELECT * FROM chk.check_summary").df()
        summary = summary.set_index("table").loc[[t for t in INPUT_TABLES if t in set(summary["table"])]].reset_index()
        read = dict(zip(summary["table"], summary["rows_read"]))
        if any(int(read.get(name, -1)) != info.rows for name, info in infos.items()):
            con.execute("DETACH chk")
            return None
        for name in PERSISTED:
            con.execute(f"CREATE OR REPLACE TEMP VIEW {q('accepted_' + name)} AS SELECT * FROM chk.main.{q(name)}")
        none_rejected = int(summary.loc[summary["table"] == "transactions", "rejected"].iloc[0]) == 0
        con.execute(
            "CREATE OR REPLACE TEMP VIEW accepted_transactions AS " + _accepted_select(
                con, "transactions", "" if none_rejected else (
                    "ANTI JOIN chk.main.rejected_rows AS r ON r.table_name = 'transactions' "
                    "AND r.row_id = s._file_row AND r.source_file = s._source_file")))
        # accepted + rejected = read, verified again on the rows read now.
        kept = scalar(con, "SELECT count(*) FROM accepted_transactions")
        expected = int(summary.loc[summary["table"] == "transactions", "accepted"].iloc[0])
        if kept != expected:
            con.execute("DETACH chk")
            return None
        step.rows = int(kept)
    rejects = con.execute("SELECT * FROM chk.rejects_summary ORDER BY 1, 2").df()
    warnings = con.execute("SELECT * FROM chk.warnings_summary ORDER BY 1, 2").df()
    examples = pd.DataFrame(meta["examples"]["rows"], columns=meta["examples"]["columns"])
    result = CheckResult(summary, rejects, warnings, list(meta["problems"]), meta["fingerprint"],
                         time.perf_counter() - started, examples, timings.records()[first_step:],
                         checked_at=meta["checked_at"], reused_from=meta["checked_at"])
    return result


def _examples(con) -> pd.DataFrame:
    """Up to 3 rejected rows per table and reason, with their file and original values."""
    return con.execute(
        "SELECT table_name AS \"table\", reason, row_id, source_file, detail, raw_values FROM ("
        "SELECT r.table_name, r.reason, s._file_row AS row_id, s._source_file AS source_file, r.detail, s._raw_values AS raw_values, "
        "row_number() OVER (PARTITION BY r.table_name, r.reason ORDER BY r._row_id) AS n "
        "FROM rejected AS r INNER JOIN staged_all_sources AS s ON r.table_name = s.table_name AND r._row_id = s._row_id"
        ") WHERE n <= 3 ORDER BY 1, 2, 3"
    ).df()


def _inserted(result) -> int | None:
    """The row count an INSERT reports (None when the engine reports none)."""
    try:
        rows = result.fetchall()
    except Exception:  # noqa: BLE001 - an engine without a count
        return None
    if rows and len(rows[0]) == 1 and isinstance(rows[0][0], int):
        return int(rows[0][0])
    return None


def _summary(con, infos: dict) -> pd.DataFrame:
    rows = []
    for name in INPUT_TABLES:
        read = infos[name].rows if name in infos else 0
        rejected = scalar(con, "SELECT count(*) FROM rejected WHERE table_name = ?", [name])
        warned = scalar(con, "SELECT count(DISTINCT _row_id) FROM warned WHERE table_name = ?", [name])
        rows.append({"table": name, "configured": name in infos, "rows_read": read,
                     "accepted": read - rejected, "rejected": rejected, "warnings": warned})
    summary = pd.DataFrame(rows)
    # accepted + rejected = read: verify against the staged rows themselves, not by subtraction.
    for name in infos:
        kept = scalar(
            con,
            f"SELECT count(*) FROM {q('staged_' + name)} AS s ANTI JOIN rejected AS r "
            f"ON r.table_name = ? AND r._row_id = s._row_id",
            [name],
        )
        expected = int(summary.loc[summary["table"] == name, "accepted"].iloc[0])
        if kept != expected:
            raise DataError(f"table {name}: internal count mismatch, {kept} rows kept but {expected} expected")
    con.register("summary_df", summary)
    rejects = con.execute(
        "SELECT table_name AS \"table\", reason, count(*) AS rows FROM rejected GROUP BY ALL ORDER BY 1, 2"
    ).df()
    con.register("rejects_summary_df", rejects)
    return summary


def _write_rejects(con, kept: bool = False) -> int:
    """Write the rejected and warned rows and their summaries to ``out``; returns the rejected rows.

    ``kept``: an incremental build; the earlier files' rejected rows, warning counts and examples
    (``_merge_kept``) are written with the new ones."""
    parts = []
    for name in INPUT_TABLES:
        parts.append(
            f"SELECT r.table_name, s._file_row AS row_id, s._source_file AS source_file, r.reason, r.detail, "
            f"r.all_reasons, s._raw_values AS raw_values FROM rejected AS r "
            f"INNER JOIN {q('staged_' + name)} AS s ON r._row_id = s._row_id WHERE r.table_name = '{name}'"
        )
    if kept:
        parts.append("SELECT * FROM kept_rejected")
    con.execute("CREATE TABLE out.rejected_rows AS " + " UNION ALL ".join(parts))
    con.execute("CREATE TABLE out.rejects_summary AS SELECT * FROM rejects_summary_df")
    con.execute("CREATE TABLE out.warnings_summary AS " + _warnings_summary_sql(kept))
    examples = ("SELECT w.table_name, s._file_row AS row_id, s._source_file AS source_file, w.rule, w.detail, "
                "0 AS part, w._row_id AS place FROM warned AS w INNER JOIN staged_all_sources AS s "
                "ON w.table_name = s.table_name AND w._row_id = s._row_id")
    if kept:
        examples += (" UNION ALL SELECT table_name, row_id, source_file, rule, detail, 1 AS part, row_id AS place "
                     "FROM kept_warning_rows")
    con.execute(
        "CREATE TABLE out.warning_rows AS SELECT table_name, row_id, source_file, rule, detail FROM ("
        "SELECT *, row_number() OVER (PARTITION BY table_name, rule ORDER BY part, place) AS n "
        f"FROM ({examples})) WHERE n <= {WARNING_EXAMPLES}"
    )
    return int(scalar(con, "SELECT count(*) FROM out.rejected_rows"))


def _warnings_summary_sql(kept: bool = False) -> str:
    """Rows warned about per table and rule (with the earlier files' counts in a ``--since`` build)."""
    counts = "SELECT table_name, rule, count(*) AS rows FROM warned GROUP BY 1, 2"
    if kept:
        counts += (" UNION ALL SELECT table_name, rule, rows FROM kept_counts "
                   "WHERE NOT starts_with(rule, '_') AND severity = 'warn'")
    return (f"SELECT table_name AS \"table\", rule, CAST(sum(rows) AS BIGINT) AS rows FROM ({counts}) "
            f"GROUP BY 1, 2 ORDER BY 1, 2")


def _read_notes(settings: Settings, infos: dict, plan, summary: pd.DataFrame) -> list[str]:
    """What the check read, when a [period] or ``--since`` narrowed it (printed under its table)."""
    notes = []
    table = settings.tables["transactions"]
    if settings.period.bounded:
        p = settings.period
        listed = sources.listed_files(settings, table)
        read = infos["transactions"].files
        how = (f"{len(listed) - len(read)} of {len(listed)} files skipped by their {'/'.join(table.date_partition)} "
               f"folders" if table.date_partition else
               f"all {len(listed)} files read and filtered (tables.transactions.date_partition would skip files)")
        notes.append(f"[period] {p.first_day or 'the first line'} to {p.last_day or 'the last line'}: order lines "
                     f"dated outside it are not read; {how}")
    if plan is not None:
        new = infos["transactions"].rows
        total = int(summary.loc[summary["table"] == "transactions", "rows_read"].iloc[0])
        notes.append(f"build --since {plan.since}: {new:,} order lines of {len(plan.new_files)} file(s) checked now; "
                     f"{total - new:,} order lines of {len(plan.kept_files)} earlier file(s) keep the last build's verdicts")
    return notes


def _write_file_counts(con, kept: bool = False) -> None:
    """``file_counts``: per order-line file, the lines read (rule ``_read``), the lines warned about
    (``_warned``), and the lines each rule rejected or warned about: what a later ``build --since``
    keeps for the files it does not check again."""
    per_file = ("FROM {hits} AS h INNER JOIN staged_transactions AS s ON h._row_id = s._row_id "
                "WHERE h.table_name = 'transactions'")
    parts = [
        "SELECT 'transactions' AS table_name, _source_file AS source_file, '_read' AS rule, '' AS severity, "
        "count(*) AS rows FROM staged_transactions GROUP BY 1, 2, 3, 4",
        "SELECT 'transactions', s._source_file, '_warned', '', count(DISTINCT h._row_id) "
        + per_file.format(hits="warned") + " GROUP BY 1, 2, 3, 4",
        "SELECT 'transactions', s._source_file, h.rule, 'warn', count(*) " + per_file.format(hits="warned")
        + " GROUP BY 1, 2, 3, 4",
        "SELECT 'transactions', s._source_file, h.reason, 'reject', count(*) " + per_file.format(hits="rejected")
        + " GROUP BY 1, 2, 3, 4",
    ]
    if kept:
        parts.append("SELECT table_name, source_file, rule, severity, rows FROM kept_counts")
    con.execute("CREATE TABLE out.file_counts AS SELECT table_name, source_file, rule, severity, "
                "CAST(rows AS BIGINT) AS rows FROM (" + " UNION ALL ".join(parts) + ")")


# --- a build --since: the earlier files keep their verdicts ------------------------------------------


class NotIncremental(Exception):
    """An incremental build found it is not sound after all; the caller builds in full."""


def _merge_kept(con, settings: Settings, plan, summary: pd.DataFrame) -> pd.DataFrame:
    """Add the earlier files' lines to the check, with the verdicts of the last build.

    Reads the earlier files again through the source layer (no rule runs), drops the lines the
    last build rejected (by file and row), and makes ``accepted_transactions`` the new accepted
    lines and these. Verifies per file that the lines read now are the lines counted then, and
    that the promotions those lines were checked against are unchanged. Returns the summary with
    the earlier files' counts added.
    """
    con.execute("ATTACH ? AS prev (READ_ONLY)", [str(plan.previous)])
    con.register("kept_files_df", pd.DataFrame({"source_file": list(plan.kept_files)}, dtype=object))
    con.execute("CREATE OR REPLACE TEMP TABLE kept_files AS SELECT CAST(source_file AS VARCHAR) AS source_file "
                "FROM kept_files_df")
    con.unregister("kept_files_df")
    con.execute("CREATE OR REPLACE TEMP TABLE kept_counts AS SELECT c.* FROM prev.checked.file_counts AS c "
                "SEMI JOIN kept_files AS k ON c.source_file = k.source_file")
    con.execute("CREATE OR REPLACE TEMP TABLE kept_rejected AS SELECT r.* FROM prev.checked.rejected_rows AS r "
                "SEMI JOIN kept_files AS k ON r.source_file = k.source_file WHERE r.table_name = 'transactions'")
    con.execute("CREATE OR REPLACE TEMP TABLE kept_warning_rows AS SELECT w.* FROM prev.checked.warning_rows AS w "
                "SEMI JOIN kept_files AS k ON w.source_file = k.source_file WHERE w.table_name = 'transactions'")
    if plan.kept_files:
        sources.register(con, settings, only_files={"transactions": plan.kept_files}, tables=("transactions",),
                         suffix="_kept")
        read_now = dict(con.execute("SELECT _source_file, count(*) FROM staged_transactions_kept GROUP BY 1").fetchall())
    else:
        read_now = {}
    read_then = dict(con.execute("SELECT source_file, rows FROM kept_counts WHERE rule = '_read'").fetchall())
    if read_now != read_then:
        differ = sorted(set(read_now.items()) ^ set(read_then.items()))
        raise NotIncremental(f"the earlier file {differ[0][0]} does not hold the lines the last build counted")
    if not _promotions_unchanged(con):
        raise NotIncremental("a promotion that earlier order lines were checked against changed or was rejected")
    kept_read = sum(read_then.values())
    kept_rejected = int(scalar(con, "SELECT count(*) FROM kept_rejected"))
    kept_warned = int(scalar(con, "SELECT coalesce(sum(rows), 0) FROM kept_counts WHERE rule = '_warned'"))
    new_accepted = _accepted_select(con, "transactions", None if scalar(
        con, "SELECT count(*) FROM rejected WHERE table_name = 'transactions'") else "")
    kept_accepted = _accepted_select(con, "transactions", (
        "ANTI JOIN kept_rejected AS r ON r.row_id = s._file_row AND r.source_file = s._source_file"),
        staged="staged_transactions_kept") if plan.kept_files else None
    con.execute("CREATE OR REPLACE TEMP VIEW accepted_transactions AS " + new_accepted
                + (f" UNION ALL {kept_accepted}" if kept_accepted else ""))
    summary = summary.copy()
    row = summary["table"] == "transactions"
    summary.loc[row, "rows_read"] += kept_read
    summary.loc[row, "rejected"] += kept_rejected
    summary.loc[row, "accepted"] += kept_read - kept_rejected
    summary.loc[row, "warnings"] += kept_warned
    accepted = int(scalar(con, "SELECT count(*) FROM accepted_transactions"))
    if accepted != int(summary.loc[row, "accepted"].iloc[0]):
        raise DataError(f"table transactions: internal count mismatch, {accepted} lines kept but "
                        f"{int(summary.loc[row, 'accepted'].iloc[0])} expected")
    con.register("summary_df", summary)
    rejects = con.execute(
        "SELECT \"table\", reason, CAST(sum(rows) AS BIGINT) AS rows FROM (SELECT table_name AS \"table\", reason, "
        "count(*) AS rows FROM rejected GROUP BY 1, 2 UNION ALL SELECT table_name, reason, count(*) FROM kept_rejected "
        "GROUP BY 1, 2) GROUP BY 1, 2 ORDER BY 1, 2").df()
    con.register("rejects_summary_df", rejects)
    con.execute("DETACH prev")
    return summary


def _promotions_unchanged(con) -> bool:
    """Every promotion the last build accepted is accepted now with the same values, and no earlier
    line was rejected for naming a promotion then unknown (it might be known now)."""
    cols = "promotion_id, starts_at, ends_at, mechanic, depth, audience"
    gone = scalar(con, f"SELECT count(*) FROM (SELECT {cols} FROM prev.checked.promotions "
                       f"EXCEPT SELECT {cols} FROM accepted_promotions)")
    unknown = scalar(con, "SELECT count(*) FROM kept_rejected WHERE all_reasons LIKE '%unknown_promotion%'")
    return gone == 0 and unknown == 0


# A configured table with rows but none accepted makes the export unusable. Assignments are
# optional (a shop without targeted campaigns configures none), but a configured assignments file
# whose every row is rejected is a broken export, not a shop without campaigns.
ALL_REJECTED_IS_FATAL = ("transactions", "promotions", "assignments")


def _problems(summary: pd.DataFrame, con) -> list[str]:
    problems = []
    for row in summary.itertuples():
        if not row.configured:
            continue
        if row.rows_read == 0:
            # A header-only promotions or assignments file is a shop without campaigns in the
            # export: usable (for the timing and dependence panels). No order lines is not.
            if row.table == "transactions":
                problems.append(f"table {row.table}: no rows read; the export is empty")
        elif row.accepted == 0 and row.table in ALL_REJECTED_IS_FATAL:
            problems.append(f"table {row.table}: all {row.rows_read} rows rejected; see the rejects summary")
    inverted = con.execute(
        "SELECT detail FROM rejected WHERE table_name = 'promotions' AND reason = 'ends_before_starts' ORDER BY _row_id"
    ).fetchall()
    for (detail,) in inverted:
        problems.append(f"table promotions: {detail}; fix its dates (ends_at is the last day the promotion runs)")
    return problems
