"""``liftlag build --since DAY``: check only the order-line files from that day on.

An export partitioned by order date (``tables.transactions.date_partition``) grows by new folders;
the files of earlier days stay as they were. A build with ``--since DAY`` then

- checks the order lines of the files whose days start on or after DAY (every rule, on every row
  of those files), and the small tables (promotions, assignments, customers, products) in full;
- takes the earlier files' verdicts (accepted, rejected and why, warnings) from the last build,
  whose checked tables travel inside ``panels.duckdb``, after making sure those files are the same
  files (size, time and content fingerprint) that it checked;
- builds every panel again from all the accepted lines. The panels are not built piecewise:
  gaps between purchases, the campaign windows' pre-period features and the quarters' behaviour
  read each customer's whole history, so a line from DAY on changes rows dated before it.

When that is not sound, a full build runs instead and says why (``Plan.reasons``): no date
partition configured, no earlier build, another config, rules or code, a table added or removed,
a file before DAY changed, added or removed, a file with no days in its folder names, an earlier
build without per-file counts, or a promotion that earlier lines were checked against changed
(checked after the rules, ``checks._promotions_unchanged``). The small tables may otherwise change
(new campaigns bring new promotions and assignments): they are checked in full, and of them only
the promotions bear on an order line's verdict. A file whose days straddle DAY is checked again, with DAY moved back to
its first day. The Spark engine always builds in full (its check is not reused either).

What a kept verdict does not see: the rules relative to the moment of the check run on the lines
as they were checked (a line does not cross ``checks.past_years`` between two builds in practice,
and a line warned as ``future_timestamp`` then stays warned), and a new line that copies a
line of an earlier file exactly is not a duplicate (a duplicate has the same order date, so it
lies in the same folder unless that folder is misfiled, which ``date_outside_partition`` rejects).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from pathlib import Path

import duckdb

from . import freshness, partitions, sources, workspace
from .config import Settings


@dataclass
class Plan:
    """What a ``--since`` build reads: ``new_files`` are checked, ``kept_files`` keep their verdicts."""

    since: dt.date
    asked: dt.date
    new_files: list[str] = field(default_factory=list)
    kept_files: list[str] = field(default_factory=list)
    previous: Path | None = None  # the published panels.duckdb holding the earlier check
    reasons: list[str] = field(default_factory=list)  # why it cannot be incremental (then a full build)

    @property
    def sound(self) -> bool:
        return not self.reasons

    def describe(self) -> str:
        moved = f" (moved back from {self.asked} to the first day of a folder that holds it)" if self.since != self.asked else ""
        return (f"--since {self.since}{moved}: checking {len(self.new_files)} order-line file(s) from that day on; "
                f"{len(self.kept_files)} earlier file(s) keep their verdicts from the last build")


def plan(settings: Settings, since: dt.date, record: dict) -> Plan:
    """Decide which files a ``--since`` build checks; ``record`` is ``freshness.current(settings)``."""
    result = Plan(since=since, asked=since)
    table = settings.tables["transactions"]
    if getattr(settings.engine, "kind", "duckdb") == "spark":
        result.reasons.append("the Spark engine builds in full (--since is for the DuckDB engine)")
        return result
    if not table.date_partition:
        result.reasons.append("tables.transactions.date_partition is not set, so liftlag cannot tell which files "
                              "hold only earlier lines")
        return result
    published = workspace.published_build(settings)
    if published is None or "record" not in published:
        result.reasons.append("there is no earlier build to take the earlier files' verdicts from")
        return result
    old = published["record"]
    for key, what in (("version", "liftlag's version"), ("tables", "the table settings"),
                      ("check_settings", "the settings"), ("check_code", "the rules or the code"),
                      ("panels", "the panel SQL or its settings")):
        if old.get(key) != record.get(key):
            result.reasons.append(f"{what} changed since the last build")
    # The small tables (promotions, assignments, customers, products) may change: they are checked
    # again in full, and of them only the promotions bear on an order line's verdict (checked in
    # checks._promotions_unchanged). Whether a table is configured at all must not change.
    for name in sorted(set(old.get("inputs", {})) ^ set(record["inputs"])):
        result.reasons.append(f"tables.{name} was {'added' if name in record['inputs'] else 'removed'} since the last build")
    if result.reasons:
        return result
    files = sources.resolve_files(settings, table)
    days = {f: partitions.file_days(f, table.date_partition) for f in files}
    undated = [f for f, d in days.items() if d is None]
    if undated:
        result.reasons.append(f"{undated[0]} lies in no {'/'.join(table.date_partition)} folder")
        return result
    straddling = [d.first for d in days.values() if d.first < since <= d.last]
    result.since = min([since, *straddling])
    named = {f: freshness.recorded_name(settings, table, f) for f in files}
    before = {named[f]: f for f, d in days.items() if d.last < result.since}
    old_entries = {e["path"]: e for e in old["inputs"].get("transactions", [])}
    new_entries = {e["path"]: e for e in record["inputs"]["transactions"]}
    for rel in sorted(before):
        if old_entries.get(rel) != new_entries.get(rel):
            state = "is new" if rel not in old_entries else "changed"
            result.reasons.append(f"{rel}, dated before {result.since}, {state} since the last build")
    old_dated = {rel for rel in old_entries
                 if (d := partitions.file_days(rel, table.date_partition)) is not None and d.last < result.since}
    gone = sorted(old_dated - set(before))
    if gone:
        result.reasons.append(f"{gone[0]}, dated before {result.since}, is no longer in the export")
    if result.reasons:
        return result
    previous = workspace.path(settings, workspace.PANELS)
    if not _has_file_counts(previous):
        result.reasons.append("the last build has no per-file counts (it was made by an older liftlag)")
        return result
    result.previous = previous
    result.kept_files = [before[rel] for rel in sorted(before)]
    result.new_files = [f for f in files if days[f].last >= result.since]
    return result


def _has_file_counts(panels: Path) -> bool:
    try:
        con = duckdb.connect(str(panels), read_only=True)
    except duckdb.Error:
        return False
    try:
        con.execute("SELECT count(*) FROM checked.file_counts").fetchall()
        return True
    except duckdb.Error:
        return False
    finally:
        con.close()
