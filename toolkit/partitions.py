"""Date partitions of the order lines: which days each file may hold, read off its folder names.

An export partitioned by order date keeps its files in folders such as ``order_date=2026-01-31/``
or ``year=2026/month=01/`` (hive layout). When ``tables.transactions.date_partition`` names those
keys, each file's first and last possible day are known from its path alone, so that

- a ``[period]`` skips the files that lie wholly outside it without opening them (partition
  pruning, the same on every engine, since the file list is pruned before any engine reads it);
- ``liftlag build --since DAY`` can tell the files that hold only lines from before that day
  (``toolkit.incremental``).

The layout is a promise of the export, not a fact: the check rule ``date_outside_partition``
rejects every line whose order date lies outside its file's days, so a file placed in the wrong
folder is seen, and nothing pruned on the strength of a wrong folder name goes unnoticed among the
files that are read.
"""

from __future__ import annotations

import calendar
import datetime as dt
import re
from dataclasses import dataclass
from pathlib import PurePath

import pandas as pd

_DAY = re.compile(r"^(\d{4})-?(\d{2})-?(\d{2})$")
_MONTH = re.compile(r"^(\d{4})-?(\d{2})$")
_YEAR = re.compile(r"^(\d{4})$")


@dataclass(frozen=True)
class Days:
    """The days one file may hold (inclusive)."""

    first: dt.date
    last: dt.date

    def overlaps(self, first: dt.date | None, last: dt.date | None) -> bool:
        return (first is None or self.last >= first) and (last is None or self.first <= last)


def hive_values(path: str) -> dict[str, str]:
    """The ``key=value`` folder names of a path (the last one wins when a key repeats)."""
    out = {}
    for part in PurePath(path).parts[:-1]:
        key, sep, value = part.partition("=")
        if sep and key:
            out[key] = value
    return out


def _month(year: int, month: int) -> Days:
    return Days(dt.date(year, month, 1), dt.date(year, month, calendar.monthrange(year, month)[1]))


def _one_key(value: str) -> Days | None:
    text = value.strip()
    try:
        if m := _DAY.match(text):
            day = dt.date(int(m[1]), int(m[2]), int(m[3]))
            return Days(day, day)
        if m := _MONTH.match(text):
            return _month(int(m[1]), int(m[2]))
        if m := _YEAR.match(text):
            return Days(dt.date(int(m[1]), 1, 1), dt.date(int(m[1]), 12, 31))
    except ValueError:  # month 13, day 31 of a short month
        return None
    return None


def file_days(path: str, keys: tuple[str, ...]) -> Days | None:
    """The days a file may hold, from its folder names; None when the keys are absent or not dates.

    One key holds a day (2026-01-31 or 20260131), a month (2026-01) or a year (2026); two or three
    keys are the year, the month and the day as numbers.
    """
    values = hive_values(path)
    if not keys or any(k not in values for k in keys):
        return None
    if len(keys) == 1:
        return _one_key(values[keys[0]])
    try:
        numbers = [int(values[k]) for k in keys]
        if len(numbers) == 2:
            return _month(numbers[0], numbers[1])
        day = dt.date(numbers[0], numbers[1], numbers[2])
        return Days(day, day)
    except ValueError:
        return None


@dataclass(frozen=True)
class Pruned:
    """The files of a table left after the period, and what was skipped."""

    files: list[str]
    skipped: list[str]
    undated: list[str]  # files whose folders give no days (always read)


def prune(files: list[str], keys: tuple[str, ...], first: dt.date | None, last: dt.date | None) -> Pruned:
    """The files that may hold a line dated from ``first`` to ``last``; files with no days are kept."""
    kept, skipped, undated = [], [], []
    for f in files:
        days = file_days(f, keys)
        if days is None:
            undated.append(f)
            kept.append(f)
        elif days.overlaps(first, last):
            kept.append(f)
        else:
            skipped.append(f)
    return Pruned(kept, skipped, undated)


def bounds_frame(files: list[str], keys: tuple[str, ...]) -> pd.DataFrame:
    """One row per dated file: ``_source_file``, ``first_day``, ``last_day`` (for the check rule)."""
    rows = [(f, d.first, d.last) for f in files if (d := file_days(f, keys)) is not None]
    frame = pd.DataFrame(rows, columns=["_source_file", "first_day", "last_day"])
    for col in ("first_day", "last_day"):
        frame[col] = pd.to_datetime(frame[col])
    return frame


def guess_keys(files: list[str]) -> tuple[str, ...]:
    """The hive key(s) of the files' folders that give every file its days (for ``liftlag init``),
    or () when none does. A key named like a date wins over others; year, month (and day) keys are
    taken together. Whether the key is the order date, not a load date, only the export's owner
    knows: the guess is marked NOT SURE, and the rule ``date_outside_partition`` tells."""
    if not files:
        return ()
    values = [hive_values(f) for f in files]
    common = [k for k in values[0] if all(k in v for v in values)]
    lowered = {k.lower(): k for k in common}
    for combo in (("year", "month", "day"), ("year", "month")):
        if all(c in lowered for c in combo):
            keys = tuple(lowered[c] for c in combo)
            if all(file_days(f, keys) is not None for f in files):
                return keys
    dated = [k for k in common if all(_one_key(v[k]) is not None for v in values)]
    dated.sort(key=lambda k: (not any(w in k.lower() for w in ("date", "day", "month")), common.index(k)))
    return (dated[0],) if dated else ()
