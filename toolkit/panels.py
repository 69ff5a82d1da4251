"""Build the panels: ``sql/panels/*.sql``, one table per file, in the order of ``PANEL_ORDER``.

Each file's stem is the table it builds; it reads only the accepted input rows (under the
contract's table names) and the panels before it. Parameters (window lengths, margin rate) are
bound as DuckDB variables, never formatted into the SQL. ``build`` checks the export and builds the
panels in one pass over the files, writes them to ``panels.duckdb.partial`` and moves that into
place when all are built; it skips the work when the inputs, the SQL and the settings it depends
on are unchanged.
"""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path

from . import checks, sqlfiles, workspace
from .config import Settings
from .contract import INPUT_TABLES, PANELS
from .engine import open_engine
from .engine.duckdb import quote_ident as q
from .engine.duckdb import scalar
from .errors import DataError, DataWarning

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


@dataclass
class BuildResult:
    skipped: bool
    rows: dict[str, int] = field(default_factory=dict)
    seconds: dict[str, float] = field(default_factory=dict)
    check: checks.CheckResult | None = None
    fingerprint: str = ""


def build_fingerprint(settings: Settings, check_fingerprint: str) -> str:
    sql = {name: panel_sql(name) for name in PANEL_ORDER}
    return workspace.fingerprint(check_fingerprint, sql, parameters(settings))


def build(settings: Settings, *, force: bool = False, progress=None) -> BuildResult:
    """Check the export and build every panel into ``panels.duckdb``, in one pass over the files.

    Parameters
    ----------
    settings : Settings
    force : bool, default=False
        Rebuild even when nothing has changed.
    progress : callable, optional
        Called with ``(step, detail)`` as work proceeds.

    Raises
    ------
    DataError
        The check found the export unusable (the message lists why).
    """
    say = progress or (lambda step, detail="": None)
    check_fp, _ = checks.input_fingerprint(settings)
    fp = build_fingerprint(settings, check_fp)
    state = workspace.read_state(settings)
    panels_path = workspace.path(settings, workspace.PANELS)
    if (not force and state.get("build", {}).get("fingerprint") == fp and panels_path.exists()
            and state.get("check", {}).get("fingerprint") == check_fp):
        return BuildResult(skipped=True, rows=state["build"].get("rows", {}), fingerprint=fp)
    if settings.economics.margin_rate is None and "products" not in settings.tables:
        warnings.warn(
            f"{settings.config_path}: no products table and no economics.margin_rate: margins "
            "(margin_amount, margin after discount) will be empty; set economics.margin_rate",
            DataWarning, stacklevel=2,
        )
    result = BuildResult(skipped=False, fingerprint=fp)
    con = open_engine(settings)
    try:
        result.check = checks.validate(con, settings, progress=lambda text: say("check", text))
        if not result.check.usable:
            raise DataError("the export cannot be used as it is:\n  - " + "\n  - ".join(result.check.problems))
        # The panels read the accepted rows under the contract's table names.
        for name in INPUT_TABLES:
            con.execute(f"CREATE OR REPLACE TEMP VIEW {q(name)} AS SELECT * FROM {q('accepted_' + name)}")
        for key, value in parameters(settings).items():
            con.execute(f"SET VARIABLE {key} = ?", [value])
        with workspace.atomic_database(settings, workspace.PANELS) as target:
            con.execute("ATTACH ? AS out", [str(target)])
            con.execute("SET search_path = 'out.main'")
            for name in PANEL_ORDER:
                say("panel", name)
                started = time.perf_counter()
                con.execute(f"CREATE TABLE out.main.{q(name)} AS {panel_sql(name)}")
                result.seconds[name] = round(time.perf_counter() - started, 3)
                result.rows[name] = int(scalar(con, f"SELECT count(*) FROM out.main.{q(name)}"))
            con.execute("SET search_path = 'memory.main'")
            con.execute("DETACH out")
    finally:
        con.close()
    state = workspace.read_state(settings)
    state["build"] = {"fingerprint": fp, "check_fingerprint": check_fp, "rows": result.rows, "seconds": result.seconds}
    workspace.write_state(settings, state)
    return result


def sql_files() -> list[Path]:
    return [PANELS_DIR / f"{name}.sql" for name in PANEL_ORDER]
