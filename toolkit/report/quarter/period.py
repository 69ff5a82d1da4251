"""Calendar quarters: parsing ``2026Q2``, their first and last days, the quarters an export covers."""

from __future__ import annotations

import re
from dataclasses import dataclass
from datetime import date, timedelta

from ...errors import ConfigError

_QUARTER = re.compile(r"^\s*(\d{4})\s*-?\s*[Qq]\s*([1-4])\s*$")


@dataclass(frozen=True, order=True)
class Quarter:
    """A calendar quarter (``Quarter(2026, 2)`` is April to June 2026)."""

    year: int
    number: int

    @classmethod
    def parse(cls, text: str) -> "Quarter":
        """``"2026Q2"`` (also ``2026-Q2``, ``2026q2``) -> ``Quarter(2026, 2)``.

        Raises
        ------
        ConfigError
            When the text is not a year followed by Q1 to Q4.
        """
        match = _QUARTER.match(str(text))
        if not match:
            raise ConfigError(f"quarter {text!r} is not a quarter; write the year and the quarter, e.g. 2026Q2")
        return cls(int(match.group(1)), int(match.group(2)))

    @property
    def label(self) -> str:
        return f"{self.year}Q{self.number}"

    @property
    def first_day(self) -> date:
        return date(self.year, 3 * self.number - 2, 1)

    @property
    def last_day(self) -> date:
        return self.next().first_day - timedelta(days=1)

    def next(self) -> "Quarter":
        return Quarter(self.year + 1, 1) if self.number == 4 else Quarter(self.year, self.number + 1)

    def previous(self) -> "Quarter":
        return Quarter(self.year - 1, 4) if self.number == 1 else Quarter(self.year, self.number - 1)

    def __str__(self) -> str:
        return self.label


def quarters_present(con) -> list[str]:
    """Quarters with at least one purchase in the ``orders`` panel, in order."""
    rows = con.execute(
        "SELECT DISTINCT year(ordered_on) AS y, quarter(ordered_on) AS q FROM orders WHERE NOT is_return ORDER BY 1, 2"
    ).fetchall()
    return [f"{y}Q{q}" for y, q in rows]


def export_days(con) -> tuple[date | None, date | None]:
    """First and last order day of the export."""
    row = con.execute("SELECT min(ordered_on), max(ordered_on) FROM orders").fetchall()[0]
    return row[0], row[1]


def require_quarter(con, text: str) -> Quarter:
    """The quarter asked for, if the export has purchases in it.

    Raises
    ------
    ConfigError
        (exit 2) when the text is not a quarter or the export has no purchases in it; the message
        lists the quarters present.
    """
    present = quarters_present(con)
    shown = ", ".join(present) if present else "(none: the orders panel is empty)"
    try:
        quarter = Quarter.parse(text)
    except ConfigError as exc:
        raise ConfigError(f"{exc}; quarters in this export: {shown}") from None
    if quarter.label not in present:
        raise ConfigError(f"quarter {quarter.label} has no purchases in this export; quarters in this export: {shown}")
    return quarter


def latest_complete_quarter(con) -> str | None:
    """The last quarter the export covers to its end (the last quarter present if none is complete)."""
    present = quarters_present(con)
    if not present:
        return None
    _, last = export_days(con)
    complete = [q for q in present if Quarter.parse(q).last_day <= last]
    return complete[-1] if complete else present[-1]
