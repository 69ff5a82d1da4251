"""Validation: every row read is accepted or rejected with its reason; odd rows are counted.

The rules are the files in ``sql/checks/``, one rule per file, run in the order of ``RULES``.
Each file selects ``(table_name, _row_id, detail)`` for the rows it trips. A rejected row's
``reason`` is the first rejection rule it trips (the others are kept in ``other_reasons``), so
accepted + rejected = read holds per table by construction, and is verified before anything is
written. Warnings never remove a row.
"""

from __future__ import annotations

import datetime as dt
import time
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from . import gates, sources, sqlfiles, workspace
from .config import Settings
from .contract import ARMS, AUDIENCES, INPUT_TABLES, MECHANICS
from .engine import open_engine
from .engine.duckdb import quote_ident as q
from .engine.duckdb import scalar
from .errors import DataError

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


def _accepted_select(con, name: str) -> str:
    """SELECT of one table's accepted rows, with the contract's derivations applied."""
    contract = INPUT_TABLES[name]
    cols = [c.name for c in contract.columns]
    extras = []
    if contract.extra_columns:
        described = [r[0] for r in con.execute(f"DESCRIBE {q('staged_' + name)}").fetchall()]
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
    return (
        f"SELECT {', '.join(exprs)} FROM {q('staged_' + name)} AS s "
        f"ANTI JOIN rejected AS r ON r.table_name = '{name}' AND r._row_id = s._row_id"
    )


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


def run(settings: Settings, progress=None, *, notify=None) -> CheckResult:
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

    Raises
    ------
    DataError
        A file is missing, empty or unreadable, or a required column is absent.
    """
    from .lock import hold

    with hold(settings.workspace_dir, wait=settings.workspace.lock_wait_seconds, notify=notify):
        workspace.remove_leftovers(settings)
        con = open_engine(settings)
        try:
            result = validate(con, settings, progress)
        finally:
            con.close()
        state = workspace.read_state(settings)
        state["check"] = state_entry(result)
        workspace.write_state(settings, state)
    return result


def validate(con, settings: Settings, progress=None, *, checked_path: Path | None = None,
             fingerprint: str | None = None) -> CheckResult:
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
    """
    started = time.perf_counter()
    say = progress or (lambda text: None)
    fp = fingerprint or input_fingerprint(settings)[0]
    infos = sources.register(con, settings, progress=say)
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
        say(f"rule {rule.name}")
        con.execute(
            f"INSERT INTO check_hits SELECT table_name, _row_id, ?, ?, ?, detail FROM ({rule.sql()})",
            [rule.name, rule.severity, order],
        )
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
    for name in INPUT_TABLES:
        con.execute(f"CREATE OR REPLACE TEMP VIEW {q('accepted_' + name)} AS {_accepted_select(con, name)}")
    summary = _summary(con, infos)
    problems = _problems(summary, con)
    if not problems:
        # The data can be read; can it answer the question? (toolkit.gates)
        say("sanity gates")
        problems = gates.evaluate(con, settings, summary)
    target = checked_path or workspace.private_path(settings, workspace.CHECKED)
    say("writing checked tables")
    try:
        con.execute("ATTACH ? AS out", [str(target)])
        for name in PERSISTED:
            con.execute(f"CREATE TABLE out.{q(name)} AS SELECT * FROM {q('accepted_' + name)}")
        _write_rejects(con)
        con.execute("CREATE TABLE out.check_summary AS SELECT * FROM summary_df")
        con.execute("DETACH out")
    except BaseException:
        workspace.discard(target)
        raise
    if checked_path is None:
        workspace.publish(settings, target, workspace.CHECKED)
    rejects = con.execute("SELECT * FROM rejects_summary_df").df()
    warnings = con.execute(
        "SELECT table_name AS \"table\", rule, count(*) AS rows FROM warned GROUP BY ALL ORDER BY 1, 2"
    ).df()
    examples = con.execute(
        "SELECT table_name AS \"table\", reason, row_id, source_file, detail, raw_values FROM ("
        "SELECT r.table_name, r.reason, s._file_row AS row_id, s._source_file AS source_file, r.detail, s._raw_values AS raw_values, "
        "row_number() OVER (PARTITION BY r.table_name, r.reason ORDER BY r._row_id) AS n "
        "FROM rejected AS r INNER JOIN staged_all_sources AS s ON r.table_name = s.table_name AND r._row_id = s._row_id"
        ") WHERE n <= 3 ORDER BY 1, 2, 3"
    ).df()
    return CheckResult(summary, rejects, warnings, problems, fp, time.perf_counter() - started, examples)


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


def _write_rejects(con) -> None:
    parts = []
    for name in INPUT_TABLES:
        parts.append(
            f"SELECT r.table_name, s._file_row AS row_id, s._source_file AS source_file, r.reason, r.detail, "
            f"r.all_reasons, s._raw_values AS raw_values FROM rejected AS r "
            f"INNER JOIN {q('staged_' + name)} AS s ON r._row_id = s._row_id WHERE r.table_name = '{name}'"
        )
    con.execute("CREATE TABLE out.rejected_rows AS " + " UNION ALL ".join(parts))
    con.execute("CREATE TABLE out.rejects_summary AS SELECT * FROM rejects_summary_df")
    con.execute(
        "CREATE TABLE out.warnings_summary AS SELECT table_name AS \"table\", rule, count(*) AS rows "
        "FROM warned GROUP BY ALL ORDER BY 1, 2"
    )
    con.execute(
        "CREATE TABLE out.warning_rows AS SELECT w.table_name, s._file_row AS row_id, s._source_file AS source_file, "
        "w.rule, w.detail FROM (SELECT *, row_number() OVER (PARTITION BY table_name, rule ORDER BY _row_id) AS n "
        f"FROM warned) AS w INNER JOIN staged_all_sources AS s ON w.table_name = s.table_name AND w._row_id = s._row_id "
        f"WHERE w.n <= {WARNING_EXAMPLES}"
    )


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
