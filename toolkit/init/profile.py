"""What a sample of each column's values says: numbers, whole numbers, dates (and their format),
distinct values, whether the column is a key.

The sample is read as text, as the source layer reads CSV, from up to three of a candidate's files
(the first, a middle one and the last), so that dates and codes from across the export are seen.
Dates are tested with the same DuckDB functions the source layer uses, so a format guessed here
reads the same way in ``liftlag check``.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import duckdb
import pandas as pd

from .files import Candidate

SAMPLE_ROWS = 20_000
# Date formats tried when a value is not ISO text; day-first before month-first.
DATE_FORMATS = (
    "%Y%m%d", "%d/%m/%Y", "%m/%d/%Y", "%d.%m.%Y", "%d-%m-%Y", "%Y/%m/%d",
    "%d/%m/%Y %H:%M", "%d/%m/%Y %H:%M:%S", "%m/%d/%Y %H:%M", "%m/%d/%Y %H:%M:%S",
    "%d.%m.%Y %H:%M", "%d.%m.%Y %H:%M:%S", "%Y%m%d%H%M%S", "%Y/%m/%d %H:%M:%S",
)
PARSED = 0.98  # share of present values that must parse for a type to fit


@dataclass
class ColumnProfile:
    name: str
    duck_type: str
    present: int  # non-blank values in the sample
    rows: int
    distinct: set[str] = field(default_factory=set)
    numeric_share: float = 0.0
    integer_share: float = 0.0
    date_share: float = 0.0
    date_format: str | None = None  # None: ISO text or a typed date
    date_note: str = ""  # e.g. both day-first and month-first fit
    numbers: pd.Series | None = None  # the sample as numbers (NaN where not a number)

    @property
    def is_date(self) -> bool:
        return self.present > 0 and self.date_share >= PARSED

    @property
    def is_number(self) -> bool:
        return self.present > 0 and self.numeric_share >= PARSED and not self.is_date

    @property
    def is_key(self) -> bool:
        """Every sampled value differs (and there are some)."""
        return self.present > 0 and len(self.distinct) == self.present


def normalise(name: str) -> str:
    """camelCase, spaces and punctuation -> snake_case (``OrderNumber`` -> ``order_number``)."""
    snake = re.sub(r"(?<=[a-z0-9])(?=[A-Z])", "_", name.strip())
    return re.sub(r"[^0-9a-z]+", "_", snake.lower()).strip("_")


def _reader(cand: Candidate) -> str:
    if cand.format == "parquet":
        return "read_parquet(?, union_by_name = true)"
    return "read_csv(?, all_varchar = true, union_by_name = true)"


def sample(cand: Candidate, rows: int = SAMPLE_ROWS) -> pd.DataFrame:
    """Up to ``rows`` rows as text, from the first, a middle and the last file."""
    files = cand.files
    picks = sorted({0, len(files) // 2, len(files) - 1})
    per_file = max(1, rows // len(picks))
    con = duckdb.connect()
    parts = []
    try:
        for i in picks:
            frame = con.execute(f"SELECT * FROM {_reader(cand)} LIMIT {int(per_file)}", [[files[i]]]).df()
            parts.append(frame.astype("string"))
    finally:
        con.close()
    return pd.concat(parts, ignore_index=True) if len(parts) > 1 else parts[0]


def _date_fit(con, values: list[str]) -> tuple[float, str | None, str]:
    """(share parsed, format or None for ISO, note) for the distinct text values of a column."""
    if not values:
        return 0.0, None, ""
    con.execute("CREATE OR REPLACE TEMP TABLE v AS SELECT unnest(?) AS v", [values])
    n = len(values)
    iso = con.execute("SELECT count(TRY_CAST(v AS TIMESTAMPTZ)) FROM v").fetchall()[0][0]
    if iso / n >= PARSED:
        return iso / n, None, ""
    fits = []
    for fmt in DATE_FORMATS:
        ok = con.execute(
            "SELECT count(*) FROM v WHERE year(TRY_STRPTIME(trim(v), ?)) BETWEEN 1970 AND 2100", [fmt]
        ).fetchall()[0][0]
        if ok / n >= PARSED:
            fits.append((ok / n, fmt))
    if not fits:
        return iso / n, None, ""
    share, fmt = fits[0]
    note = f"also reads as {fits[1][1]!r}: check the order of day and month" if len(fits) > 1 else ""
    return share, fmt, note


def profile(frame: pd.DataFrame, types: dict[str, str]) -> dict[str, ColumnProfile]:
    """A profile per column of a sample read as text."""
    con = duckdb.connect()
    out: dict[str, ColumnProfile] = {}
    try:
        for name in frame.columns:
            text = frame[name].dropna().str.strip()
            text = text[text != ""]
            prof = ColumnProfile(name, types.get(name, "VARCHAR"), present=len(text), rows=len(frame))
            if len(text):
                prof.distinct = set(text.unique()[:50_000])
                numbers = pd.to_numeric(text, errors="coerce")
                prof.numbers = pd.Series(pd.to_numeric(frame[name].str.strip(), errors="coerce")
                                         .to_numpy(dtype="float64", na_value=float("nan")), index=frame.index)
                prof.numeric_share = float(numbers.notna().mean())
                whole = numbers.dropna()
                prof.integer_share = float((whole == whole.round()).mean()) if len(whole) else 0.0
                distinct = sorted(prof.distinct)[:5000]
                looks_numeric = prof.numeric_share >= PARSED and not all(len(v) == 8 for v in distinct)
                if not looks_numeric:  # 20250117 may be a date; 3.5 and 12 are not
                    prof.date_share, prof.date_format, prof.date_note = _date_fit(con, distinct)
            out[name] = prof
    finally:
        con.close()
    return out
