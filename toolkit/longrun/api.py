"""Long-run analyses: the entry point shared by ``liftlag longrun``, ``liftlag demo`` and the
quarterly report.

:func:`analyse_longrun` runs each module named in :data:`SECTIONS`, in order, on the workspace
connection. Every section module exposes::

    analyse(con, settings, through_end: datetime.date) -> tuple[dict[str, DataFrame], list[str]]

(``con`` from :func:`toolkit.workspace.connect`: the panels plus the checked inputs as
``checked.*``; ``through_end`` the last day analysed: nothing after it is read). A section that
cannot run on this data raises :class:`~toolkit.errors.AnalysisError`; the others still run and
the reason is kept in the readout's notes.
"""

from __future__ import annotations

import datetime as dt
import importlib
import re
import time
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from ..errors import AnalysisError, ConfigError

#: Section modules of ``toolkit.longrun``, run in this order.
SECTIONS: tuple[str, ...] = ("dependence", "responsiveness", "drift", "cohorts", "counterfactual")

_QUARTER = re.compile(r"^\s*(\d{4})\s*-?\s*Q([1-4])\s*$", re.I)


@dataclass
class LongrunReadout:
    """What :func:`analyse_longrun` found.

    Attributes
    ----------
    tables : dict of str -> DataFrame
        Every section's result tables, by name.
    notes : list of str
        What to read with care, and the sections that could not run (with the reason).
    through_end : datetime.date
        The last day analysed.
    quarters : list of str
        The quarters analysed (``2026Q2``), oldest first.
    seconds : dict of str -> float
        Wall time of each section.
    """

    tables: dict[str, pd.DataFrame]
    notes: list[str]
    through_end: dt.date
    quarters: list[str]
    seconds: dict[str, float] = field(default_factory=dict)


def parse_quarter(text: str) -> tuple[int, int]:
    """``"2026Q2"`` -> ``(2026, 2)``; a :class:`ConfigError` (exit 2) otherwise."""
    match = _QUARTER.match(str(text))
    if not match:
        raise ConfigError(f"--through: expected a quarter such as 2026Q2, found {text!r}")
    return int(match.group(1)), int(match.group(2))


def quarter_end(year: int, quarter: int) -> dt.date:
    """The last day of a calendar quarter."""
    if quarter == 4:
        return dt.date(year, 12, 31)
    return dt.date(year, 3 * quarter + 1, 1) - dt.timedelta(days=1)


def quarter_label(day: dt.date) -> str:
    return f"{day.year}Q{(day.month - 1) // 3 + 1}"


def data_quarters(con) -> tuple[list[str], dt.date | None]:
    """The quarters with orders in the workspace, oldest first, and the last order day."""
    quarters = [row[0] for row in con.cursor().execute(
        "SELECT DISTINCT quarter, quarter_on FROM customer_quarters ORDER BY quarter_on").fetchall()]
    last = con.cursor().execute("SELECT max(ordered_on) FROM orders").fetchall()[0][0]
    return quarters, last


def resolve_through(con, through: str | None) -> tuple[dt.date, list[str]]:
    """The last day to analyse and the quarters up to it.

    Raises
    ------
    ConfigError
        When ``through`` is not a quarter, or a quarter the data does not reach (exit 2); the
        message lists the quarters present.
    AnalysisError
        When the workspace has no orders at all.
    """
    quarters, last = data_quarters(con)
    if not quarters or last is None:
        raise AnalysisError("panel orders: no orders in the workspace; nothing to analyse over the long run")
    if through is None:
        return last, quarters
    year, number = parse_quarter(through)
    label = f"{year}Q{number}"
    if label not in quarters:
        raise ConfigError(
            f"--through {through}: the data has no orders in {label}; quarters present: {', '.join(quarters)}")
    end = min(quarter_end(year, number), last)
    return end, quarters[: quarters.index(label) + 1]


def analyse_longrun(con, settings, through: str | None = None) -> LongrunReadout:
    """Run every long-run section on a workspace.

    Parameters
    ----------
    con : duckdb.DuckDBPyConnection
        Workspace connection (:func:`toolkit.workspace.connect`).
    settings : toolkit.config.Settings
        Uses ``settings.longrun`` and ``settings.report.small_cell``.
    through : str, optional
        The last quarter to analyse (``"2026Q2"``); by default everything the data holds.

    Returns
    -------
    LongrunReadout

    Examples
    --------
    >>> from toolkit import config, workspace                              # doctest: +SKIP
    >>> settings = config.load("demo_data/liftlag.toml")                    # doctest: +SKIP
    >>> readout = analyse_longrun(workspace.connect(settings), settings)    # doctest: +SKIP
    >>> readout.tables["dependence_by_quarter"]                             # doctest: +SKIP
    """
    through_end, quarters = resolve_through(con, through)
    notes: list[str] = []
    if through_end < quarter_end(*parse_quarter(quarters[-1])):
        notes.append(f"the last quarter, {quarters[-1]}, is partial: the data ends on {through_end}")
    tables: dict[str, pd.DataFrame] = {}
    seconds: dict[str, float] = {}
    for name in SECTIONS:
        module = importlib.import_module(f"{__package__}.{name}")
        started = time.perf_counter()
        try:
            section_tables, section_notes = module.analyse(con, settings, through_end)
        except AnalysisError as exc:
            notes.append(f"{name}: not run: {exc}")
            continue
        finally:
            seconds[name] = round(time.perf_counter() - started, 2)
        tables.update(section_tables)
        notes.extend(f"{name}: {note}" for note in section_notes)
    tables["longrun_notes"] = pd.DataFrame({"note": notes}, dtype="object")
    return LongrunReadout(tables=tables, notes=notes, through_end=through_end, quarters=quarters, seconds=seconds)


def write_longrun(readout: LongrunReadout, out_dir: str | Path, **facts) -> list[Path]:
    """Write each table as ``<out_dir>/<name>.parquet`` (atomically) and ``manifest.json``.

    ``facts`` are added to the manifest (config path, seconds, ...).
    """
    from ..results import write_manifest, write_tables

    out = Path(out_dir)
    written = write_tables(out, readout.tables)
    write_manifest(
        out, analysis="longrun", through_end=readout.through_end.isoformat(), quarters=readout.quarters,
        row_counts={name: len(frame) for name, frame in readout.tables.items()}, seconds=readout.seconds,
        notes=readout.notes, **facts)
    return written


def run_longrun(settings, out_dir: str | Path, console=None) -> dict:
    """The runner for ``liftlag demo``: every long-run table into ``out_dir``.

    Returns facts for the manifest (tables written, seconds, notes).
    """
    from .. import workspace

    started = time.perf_counter()
    con = workspace.connect(settings)
    try:
        readout = analyse_longrun(con, settings)
    finally:
        con.close()
    from ..results import write_tables

    write_tables(Path(out_dir), readout.tables)
    seconds = round(time.perf_counter() - started, 2)
    if console is not None:
        console.print(f"  longrun: {len(readout.tables)} tables over {len(readout.quarters)} quarters in {seconds:.1f} s")
    return {"tables": sorted(readout.tables), "seconds": seconds, "notes": list(readout.notes)}
