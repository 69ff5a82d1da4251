"""Numbers as the report shows them, each tied to the results-table cell it came from.

A :class:`Cell` carries the formatted text and where it came from (table, row position, column)
plus the formatter's name; the template writes these as ``data-*`` attributes, so a test (or a
reader) can map every number on the page back to its table and check that it shows that value.
A cell describing fewer than ``min_cell_customers`` customers is suppressed: its text is never
produced, only the mark.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

NA = "—"


def finite(value) -> bool:
    try:
        return value is not None and not pd.isna(value) and math.isfinite(float(value))
    except (TypeError, ValueError):
        return False


def _number(v: float) -> str:
    if v == 0:
        return "0"
    if abs(v) >= 1000:
        return f"{v:,.0f}"
    if abs(v) >= 100:
        return f"{v:,.1f}"
    if abs(v) < 0.0001:
        return f"{v:.2g}"
    if abs(v) < 0.001:
        return np.format_float_positional(v, precision=2, unique=False, fractional=False, trim="-")
    return f"{v:.3g}"


def _signed(v: float) -> str:
    text = _number(v)
    return text if v < 0 or text.startswith("-") else f"+{text}"


# name -> formatter; the test re-applies the named formatter to the table's value.
FORMATS = {
    "count": lambda v: f"{int(round(float(v))):,}",
    "whole": lambda v: f"{float(v):,.0f}",
    "number": lambda v: _number(float(v)),
    "signed": lambda v: _signed(float(v)),
    "percent": lambda v: f"{float(v) * 100:.1f}%",
    "percent0": lambda v: f"{float(v) * 100:.0f}%",
    "points": lambda v: f"{float(v) * 100:+.1f} pts",
    "money": lambda v: f"{float(v):,.0f}" if abs(float(v)) >= 100 else f"{float(v):,.2f}",
    "ratio": lambda v: f"{float(v):.2f}",
    "days": lambda v: f"{float(v):+.1f} d",
    "p": lambda v: f"{float(v):.3f}" if float(v) >= 0.001 else "<0.001",
}


def fmt(value, kind: str) -> str:
    return FORMATS[kind](value) if finite(value) else NA


@dataclass(frozen=True)
class Cell:
    """One number on the page."""

    text: str
    table: str = ""
    column: str = ""
    row: int = -1
    value: str = ""
    kind: str = ""
    suppressed: bool = False
    reason: str = ""

    @property
    def is_na(self) -> bool:
        return self.text == NA and not self.suppressed


def cell(frame: pd.DataFrame, table: str, row: int, column: str, kind: str, *, suppress: bool = False,
         k: int = 10) -> Cell:
    """The value at (row position, column) of ``frame`` (the table as written), formatted."""
    if suppress:
        return Cell(text="suppressed", table=table, column=column, row=int(row), suppressed=True,
                    reason=f"fewer than {k} customers")
    if column not in frame.columns:
        return Cell(text=NA)
    value = frame[column].loc[int(row)]  # row labels are positions in the table as written (RangeIndex)
    if not finite(value):
        return Cell(text=NA)
    return Cell(text=fmt(value, kind), table=table, column=column, row=int(row), value=repr(float(value)), kind=kind)


def interval(frame: pd.DataFrame, table: str, row: int, low: str, high: str, kind: str, *, suppress: bool = False,
             k: int = 10) -> tuple[Cell, Cell]:
    return (cell(frame, table, row, low, kind, suppress=suppress, k=k),
            cell(frame, table, row, high, kind, suppress=suppress, k=k))


def too_few(*counts, k: int) -> bool:
    """True when any of the counts (customers a cell describes) is below k, or unknown."""
    for c in counts:
        if not finite(c) or float(c) < k:
            return True
    return False


DESCRIPTORS = {"bin", "decile", "week", "period", "index_from", "index_to", "days", "day", "year", "quarter_no",
               "horizon_days", "cohort_index", "months_since", "quarters_since", "ci_level"}


LONG_TEXT = 40


def generic_rows(frame: pd.DataFrame, table: str, *, k: int, max_rows: int = 60,
                 columns: list[str] | None = None) -> tuple[list[str], list[list], int, list]:
    """A table of unknown shape, laid out as it is: text columns as text, numbers bound as cells.

    Numbers in a row whose customer count (``customers``, ``n_customers``, ``n``, ``n_treated``,
    ``n_holdout``) is below k are suppressed.
    """
    count_cols = [c for c in ("customers", "n_customers", "n", "n_treated", "n_holdout", "cohort_customers",
                              "customers_from", "customers_to", "at_risk", "customers_at_risk") if c in frame.columns]
    shown = columns
    columns = [c for c in (shown or frame.columns) if c != "customer_id" and c in frame.columns
               and c != "is_suppressed"]
    # long texts (a method, a note, a sentence) go under the table once, not in every row
    long_texts = [c for c in columns if frame[c].dtype == object
                  and frame[c].dropna().astype(str).str.len().max() > LONG_TEXT if frame[c].notna().any()]
    columns = [c for c in columns if c not in long_texts]
    rows = []
    for i in frame.index[:max_rows]:  # labels = positions in the table as written, also in a filtered view
        small = too_few(*[frame[c].loc[i] for c in count_cols], k=k) if count_cols else False
        if "is_suppressed" in frame.columns and bool(frame["is_suppressed"].loc[i]):
            small = True
        out = []
        for col in columns:
            value = frame[col].loc[i]
            if isinstance(value, (bool,)) or pd.api.types.is_bool_dtype(frame[col]):
                out.append({"text": "yes" if value else "no"})
            elif pd.api.types.is_numeric_dtype(frame[col]):
                values = frame[col].dropna()
                integral = len(values) > 0 and bool((values == values.round()).all()) and col not in DESCRIPTORS
                kind = ("p" if col == "p_value" else
                        "count" if col in count_cols or integral or pd.api.types.is_integer_dtype(frame[col])
                        else "percent" if ("share" in col or col.endswith("_rate") or "retention" in col) else "number")
                # a row's descriptors (its bin, week, band edges) describe no customer: never suppressed
                out.append(cell(frame, table, i, col, "number" if col in DESCRIPTORS else kind,
                                suppress=small and col not in DESCRIPTORS, k=k))
            else:
                out.append({"text": "" if value is None or (isinstance(value, float) and math.isnan(value)) else str(value)})
        rows.append(out)
    texts = []
    for col in long_texts:
        for value in frame[col].dropna().astype(str).unique()[:3]:
            if value.strip():
                texts.append((col, value))
    return columns, rows, len(frame), texts
