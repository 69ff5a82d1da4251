"""What the peers read from a generated export's ``liftlag.toml``: the files of each table, the
column mapping, value maps and the settings the check and the panels use.

Only the keys the benchmark exports use are understood (``path`` as a file, folder or glob,
Parquet or CSV by extension; ``[tables.X.columns]``; ``[tables.X.values.col]``; ``[economics]``,
``[windows]`` and ``[checks]``); anything else is an error rather than a silent difference.
"""

from __future__ import annotations

import datetime as dt
import glob
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

# The contract as the peers see it: (column, kind, required) per table; kind is text, time or number.
CONTRACT: dict[str, tuple[tuple[str, str, bool], ...]] = {
    "transactions": (
        ("order_id", "text", True), ("customer_id", "text", True), ("ordered_at", "time", True),
        ("product_id", "text", True), ("quantity", "number", True), ("net_amount", "number", True),
        ("list_amount", "number", False), ("discount_amount", "number", False),
        ("promotion_id", "text", False), ("channel", "text", False), ("store_id", "text", False),
    ),
    "promotions": (
        ("promotion_id", "text", True), ("starts_at", "time", True), ("ends_at", "time", True),
        ("mechanic", "text", True), ("depth", "number", False), ("audience", "text", True),
        ("cost_per_redemption", "number", False), ("name", "text", False),
    ),
    "assignments": (
        ("promotion_id", "text", True), ("customer_id", "text", True), ("arm", "text", True),
        ("assigned_at", "time", True),
    ),
}
ALLOWED = {("assignments", "arm"): ("treatment", "holdout"),
           ("promotions", "mechanic"): ("percent_off", "amount_off", "bundle", "free_shipping", "other"),
           ("promotions", "audience"): ("targeted", "broadcast")}
# The order in which liftlag runs its rejection rules (a rejected row's reason is the first).
REJECT_RULES = ("missing_required", "unparseable_value", "timestamp_beyond_horizon", "duplicate_row",
                "duplicate_key", "value_not_allowed", "ends_before_starts", "unknown_promotion")
PANEL_KEYS = {
    "campaign_assignments": ("promotion_id", "customer_id"),
    "orders": ("customer_id", "order_id"),
    "customer_periods": ("customer_id", "week_on"),
    "purchase_gaps": ("customer_id", "order_id"),
    "campaign_windows": ("promotion_id", "customer_id"),
    "customer_quarters": ("customer_id", "quarter_on"),
    "customer_quarter_behaviour": ("customer_id", "quarter_on"),
    "segment_days": ("day_on", "segment_kind", "segment"),
}


@dataclass
class Table:
    name: str
    files: list[str]
    format: str  # parquet or csv
    columns: dict[str, str] = field(default_factory=dict)  # contract name -> export name
    values: dict[str, dict[str, str]] = field(default_factory=dict)  # column -> {code: value}

    def export_column(self, name: str) -> str:
        return self.columns.get(name, name)


@dataclass
class Export:
    tables: dict[str, Table]
    margin_rate: float | None
    pre_period_days: int
    after_days: int
    now: dt.datetime  # the check's moment, UTC without zone
    horizon_earliest: dt.datetime
    horizon_latest: dt.datetime
    horizon_promotion_latest: dt.datetime


def load(export_dir: Path) -> Export:
    config_path = export_dir / "liftlag.toml"
    raw = tomllib.loads(config_path.read_text(encoding="utf-8"))
    tables = {}
    for name, spec in raw.get("tables", {}).items():
        if name not in CONTRACT:
            raise SystemExit(f"{config_path}: table {name} is not handled by the peers")
        pattern = str(export_dir / spec["path"])
        if any(ch in pattern for ch in "*?["):
            files = sorted(glob.glob(pattern, recursive=True))
        elif Path(pattern).is_dir():
            files = sorted(str(p) for p in Path(pattern).glob("**/*.parquet"))
        else:
            files = [pattern]
        fmt = spec.get("format") or ("parquet" if files[0].endswith(".parquet") else "csv")
        if fmt not in ("parquet", "csv") or not files:
            raise SystemExit(f"{config_path}: tables.{name}: format {fmt} or no files ({pattern})")
        values = {col: {str(code): value for value, code in mapping.items()}
                  for col, mapping in spec.get("values", {}).items()}
        tables[name] = Table(name, files, fmt, dict(spec.get("columns", {})), values)
    checks = raw.get("checks", {})
    windows = raw.get("windows", {})
    now = dt.datetime.now(dt.timezone.utc).replace(tzinfo=None)
    return Export(
        tables=tables,
        margin_rate=raw.get("economics", {}).get("margin_rate"),
        pre_period_days=int(windows.get("pre_period_days", 365)),
        after_days=int(windows.get("after_days", 28)),
        now=now,
        horizon_earliest=now - dt.timedelta(days=round(365.2425 * checks.get("past_years", 30))),
        horizon_latest=now + dt.timedelta(days=checks.get("future_days", 1)),
        horizon_promotion_latest=now + dt.timedelta(days=checks.get("promotion_future_days", 731)),
    )
