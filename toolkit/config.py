"""``liftlag.toml`` -> typed settings.

Every error names the file and the key, shows what was found and says what was expected.
Unknown keys are errors, with the nearest valid key suggested.
"""

from __future__ import annotations

import datetime as dt
import difflib
import re
import tomllib
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

from .contract import INPUT_TABLES, REQUIRED_TABLES
from .errors import ConfigError

FORMATS = ("parquet", "csv", "duckdb")


@dataclass(frozen=True)
class TableSettings:
    """Where one input table lives and how its columns map onto the contract."""

    name: str
    path: str
    format: str
    columns: dict[str, str] = field(default_factory=dict)  # contract name -> export column
    values: dict[str, dict[str, str]] = field(default_factory=dict)  # column -> contract value -> export value
    formats: dict[str, str] = field(default_factory=dict)  # column -> strptime format
    delimiter: str | None = None
    header: bool = True
    table: str | None = None  # for format = "duckdb": the table inside the database file
    hive_partitioning: bool | None = None
    encoding: str | None = None  # CSV only: utf-8 (default), utf-16 or latin-1
    # transactions only: the hive partition key(s) that hold each line's order date ("order_date",
    # or ["year", "month"] / ["year", "month", "day"]); files are then skipped by date
    date_partition: tuple[str, ...] = ()

    def export_column(self, contract_name: str) -> str:
        return self.columns.get(contract_name, contract_name)


@dataclass(frozen=True)
class EconomicsSettings:
    margin_rate: float | None = None
    currency: str = "EUR"


@dataclass(frozen=True)
class WindowSettings:
    pre_period_days: int = 365
    after_days: int = 28


@dataclass(frozen=True)
class CampaignSettings:
    holdout_share: float | None = None
    holdout_share_by_promotion: dict[str, float] = field(default_factory=dict)
    untargeted_share: float = 0.2
    folds: int = 5
    seed: int = 20261201
    min_arm_size: int = 50
    alpha: float = 0.05
    uplift_threshold: float = 0.02
    baseline_threshold: float | None = None
    target_lift: float | None = None
    exclude_features: tuple[str, ...] = ()


@dataclass(frozen=True)
class TimingSettings:
    dip_days: int = 21
    anticipation_days: int = 7
    anticipation_min_coupons: int = 2
    horizon_days: int = 90
    cox_sample_customers: int = 20000
    bootstrap_rounds: int = 50
    seed: int = 20261201
    alpha: float = 0.05
    n_blocks: int = 64
    coupons_cap: int = 10
    dip_after: str = "targeted"
    calendar_adjustment: bool = True
    rate_adjustment: bool = True
    rate_classes: int = 8
    expected_starts: str = "cadence"
    cadence_tolerance_days: int = 2
    min_regular_share: float = 0.75
    late_period_days: int = 14
    anticipation_min_exposed_customers: int = 100
    anticipation_min_starts: int = 3
    min_arm_customers: int = 30


@dataclass(frozen=True)
class LongrunSettings:
    """``[longrun]``: the long-run analyses (``liftlag longrun``). Each setting is documented in README."""

    seed: int = 20261201
    alpha: float = 0.05
    bootstrap_rounds: int = 200
    n_blocks: int = 64
    reference_depth: float = 0.2
    dependent_threshold: float = 0.5
    responsiveness_sample_customers: int = 20000
    coupons_cap: int = 20
    drift_sample_customers: int = 5000
    drift_folds: int = 5
    drift_permutation_repeats: int = 3
    drift_adjacent: bool = True
    min_cohort_customers: int = 50
    cohort_burn_in_days: int = 90
    lapse_days: int = 180
    retention_step_days: int = 30
    cohort_sample_customers: int = 50000
    broadcast_pre_days: int = 365
    broadcast_min_pre_days: int = 28
    broadcast_mask_after_days: int = 14
    broadcast_mask_before_days: int = 7
    broadcast_parameter_draws: int = 100
    broadcast_controls: bool = True


# Settings that take one of a few words.
CHOICES = {
    "timing.dip_after": ("targeted", "any"),
    "timing.expected_starts": ("cadence", "observed"),
    "engine.kind": ("duckdb", "spark"),
    "workspace.on_failed_build": ("refuse", "use_last_good"),
}


@dataclass(frozen=True)
class CheckSettings:
    """The horizon of the ``timestamp_beyond_horizon`` rule: no single row may stretch the timeline."""

    future_days: int = 1  # order lines and assignments later than the check's time + this: rejected
    past_years: int = 30  # any timestamp earlier than the check's time - this: rejected
    promotion_future_days: int = 731  # a promotion starting or ending later than the check's time + this: rejected


@dataclass(frozen=True)
class GateSettings:
    """Sanity gates between the check and any analysis (``toolkit.gates``): below a threshold, exit 3."""

    min_lines_accepted_share: float = 0.9  # of order lines (and of assignments) read
    min_assigned_found_share: float = 0.5  # of assigned customers who appear in the accepted order lines
    min_promotions_kept_share: float = 1.0  # of promotions named by order lines that keep some of their lines
    date_margin_days: int = 366  # how far outside the central 98% of order dates a line may lie
    max_outlying_date_share: float = 0.0  # of order lines allowed beyond that margin


@dataclass(frozen=True)
class ReportSettings:
    small_cell: int = 10
    # The quarterly report (`liftlag quarter`): cells describing fewer customers are suppressed.
    min_cell_customers: int = 10
    # The overall call's rule (healthy / watch / act), written out in the report's methods section.
    act_min_adverse: int = 2
    watch_min_adverse: int = 1
    act_on_negative_margin: bool = True
    watch_on_groups_against: bool = True
    # Weeks around each campaign's start in the event-study chart.
    event_weeks_before: int = 8
    event_weeks_after: int = 8


@dataclass(frozen=True)
class WorkspaceSettings:
    path: Path = Path(".liftlag")
    lock_wait_seconds: int = 600  # how long a build waits for another one before exit 2 (0: not at all)
    auto_build: bool = True  # analyses build the panels first when they are missing or stale
    on_failed_build: str = "refuse"  # or "use_last_good": read the last good panels, saying so


@dataclass(frozen=True)
class PeriodSettings:
    """``[period]``: only order lines dated from ``first_day`` to ``last_day`` (inclusive) are read."""

    first_day: dt.date | None = None
    last_day: dt.date | None = None

    @property
    def bounded(self) -> bool:
        return self.first_day is not None or self.last_day is not None


@dataclass(frozen=True)
class EngineSettings:
    threads: int | None = None
    memory_limit: str | None = None
    temp_directory: Path | None = None
    kind: str = "duckdb"  # "spark": check and build run on a SparkSession (pip install 'liftlag[spark]')
    master: str = "local[*]"  # Spark master URL (kind = "spark")
    spark_conf: dict[str, str] = field(default_factory=dict)  # [engine.spark_conf]: any Spark setting


@dataclass(frozen=True)
class Settings:
    """All of a ``liftlag.toml``, typed. Relative paths are resolved against the file's folder."""

    config_path: Path
    tables: dict[str, TableSettings]
    economics: EconomicsSettings = EconomicsSettings()
    windows: WindowSettings = WindowSettings()
    campaign: CampaignSettings = CampaignSettings()
    timing: TimingSettings = TimingSettings()
    longrun: LongrunSettings = LongrunSettings()
    report: ReportSettings = ReportSettings()
    checks: CheckSettings = CheckSettings()
    gates: GateSettings = GateSettings()
    workspace: WorkspaceSettings = WorkspaceSettings()
    engine: EngineSettings = EngineSettings()
    period: PeriodSettings = PeriodSettings()
    raw: dict[str, Any] = field(default_factory=dict, repr=False)

    @property
    def base_dir(self) -> Path:
        return self.config_path.parent

    def resolve(self, path: str | Path) -> Path:
        p = Path(path).expanduser()
        return p if p.is_absolute() else (self.base_dir / p)

    @property
    def workspace_dir(self) -> Path:
        return self.resolve(self.workspace.path)


_SECTIONS = {
    "economics": EconomicsSettings,
    "windows": WindowSettings,
    "campaign": CampaignSettings,
    "timing": TimingSettings,
    "longrun": LongrunSettings,
    "report": ReportSettings,
    "checks": CheckSettings,
    "gates": GateSettings,
    "workspace": WorkspaceSettings,
    "engine": EngineSettings,
    "period": PeriodSettings,
}
_TOP_KEYS = ("tables", *_SECTIONS)
_TABLE_KEYS = ("path", "format", "columns", "values", "formats", "delimiter", "header", "table", "hive_partitioning",
               "encoding", "date_partition")
ENCODINGS = ("utf-8", "utf-16", "latin-1")
_MEMORY = re.compile(r"^\s*\d+(\.\d+)?\s*(B|KB|MB|GB|TB|KiB|MiB|GiB|TiB)\s*$", re.I)


def _suggest(key: str, valid: list[str] | tuple[str, ...]) -> str:
    close = difflib.get_close_matches(key, list(valid), n=1, cutoff=0.5)
    if close:
        return f"did you mean '{close[0]}'?"
    return "valid keys: " + ", ".join(sorted(valid))


def _unknown(path: Path, where: str, key: str, valid) -> ConfigError:
    return ConfigError(f"{path}: unknown key '{where}{key}'; {_suggest(key, valid)}")


def _expect(path: Path, key: str, value: Any, kind: type | tuple[type, ...], what: str) -> Any:
    if isinstance(value, bool) and kind in (int, float, (int, float)):
        raise ConfigError(f"{path}: key '{key}' must be {what}, found {value!r}")
    if not isinstance(value, kind):
        raise ConfigError(f"{path}: key '{key}' must be {what}, found {value!r}")
    return value


def guess_format(path: str) -> str:
    lower = path.lower()
    if lower.endswith((".parquet", ".pq")) or "parquet" in lower.rsplit("/", 1)[-1]:
        return "parquet"
    if lower.endswith((".duckdb", ".db")):
        return "duckdb"
    if lower.endswith((".csv", ".csv.gz", ".tsv", ".tsv.gz", ".txt", ".txt.gz")):
        return "csv"
    raise ValueError(path)


def _parse_table(path: Path, name: str, body: Any) -> TableSettings:
    where = f"tables.{name}"
    if name not in INPUT_TABLES:
        raise _unknown(path, "tables.", name, tuple(INPUT_TABLES))
    _expect(path, where, body, dict, "a table of settings (path = ..., columns = {...})")
    for key in body:
        if key not in _TABLE_KEYS:
            raise _unknown(path, where + ".", key, _TABLE_KEYS)
    if "path" not in body:
        raise ConfigError(f"{path}: key '{where}.path' is missing; say where the {name} files are, e.g. path = \"export/{name}.parquet\"")
    file_path = _expect(path, f"{where}.path", body["path"], str, "a file path or glob (text)")
    fmt = body.get("format")
    if fmt is None:
        try:
            fmt = guess_format(file_path)
        except ValueError:
            raise ConfigError(
                f"{path}: cannot tell the format of '{where}.path' = {file_path!r} from its name; "
                f"add {where}.format = one of {', '.join(FORMATS)}"
            ) from None
    elif fmt not in FORMATS:
        raise ConfigError(f"{path}: key '{where}.format' must be one of {', '.join(FORMATS)}, found {fmt!r}")
    contract = INPUT_TABLES[name]
    names = [c.name for c in contract.columns]
    columns = _expect(path, f"{where}.columns", body.get("columns", {}), dict, "a table of contract_name = \"export column\"")
    for key, value in columns.items():
        if key not in names and not contract.extra_columns:
            raise _unknown(path, f"{where}.columns.", key, names)
        _expect(path, f"{where}.columns.{key}", value, str, "the export's column name (text)")
    values = _expect(path, f"{where}.values", body.get("values", {}), dict, "a table per column of contract value = \"export value\"")
    for column, mapping in values.items():
        allowed = contract.allowed_values.get(column)
        if allowed is None:
            raise _unknown(path, f"{where}.values.", column, tuple(contract.allowed_values) or ("(no mappable columns)",))
        _expect(path, f"{where}.values.{column}", mapping, dict, f"a table of {' / '.join(allowed)} = \"export value\"")
        for key, value in mapping.items():
            if key not in allowed:
                raise _unknown(path, f"{where}.values.{column}.", key, allowed)
            _expect(path, f"{where}.values.{column}.{key}", value, str, "the export's value (text)")
        codes = list(mapping.values())
        repeated = sorted({v for v in codes if codes.count(v) > 1})
        if repeated:
            keys = [k for k, v in mapping.items() if v == repeated[0]]
            raise ConfigError(
                f"{path}: keys '{where}.values.{column}.{keys[0]}' and '.{keys[1]}' both map the export value "
                f"{repeated[0]!r}; each {column} value needs its own code"
            )
    formats = _expect(path, f"{where}.formats", body.get("formats", {}), dict, "a table of column = \"strptime format\"")
    timestamp_columns = [c.name for c in contract.columns if c.type == "TIMESTAMP"]
    for key, value in formats.items():
        if key not in timestamp_columns:
            raise _unknown(path, f"{where}.formats.", key, timestamp_columns)
        _expect(path, f"{where}.formats.{key}", value, str, "a strptime format such as \"%Y%m%d\"")
    delimiter = body.get("delimiter")
    if delimiter is not None:
        _expect(path, f"{where}.delimiter", delimiter, str, "a one-character text such as \";\"")
    header = _expect(path, f"{where}.header", body.get("header", True), bool, "true or false")
    table = body.get("table")
    if fmt == "duckdb" and not table:
        raise ConfigError(f"{path}: key '{where}.table' is missing; with format = \"duckdb\" name the table inside {file_path!r}")
    hive = body.get("hive_partitioning")
    if hive is not None:
        _expect(path, f"{where}.hive_partitioning", hive, bool, "true or false")
    encoding = body.get("encoding")
    if encoding is not None:
        _expect(path, f"{where}.encoding", encoding, str, f"one of {', '.join(ENCODINGS)}")
        if encoding.lower() not in ENCODINGS:
            raise ConfigError(f"{path}: key '{where}.encoding' must be one of {', '.join(ENCODINGS)}, found {encoding!r}")
        encoding = encoding.lower()
    date_partition = _date_partition(path, name, fmt, body.get("date_partition"))
    return TableSettings(
        name=name, path=file_path, format=fmt, columns=dict(columns),
        values={k: dict(v) for k, v in values.items()}, formats=dict(formats),
        delimiter=delimiter, header=header, table=table, hive_partitioning=hive, encoding=encoding,
        date_partition=date_partition,
    )


def _date_partition(path: Path, table: str, fmt: str, value: Any) -> tuple[str, ...]:
    """``tables.transactions.date_partition``: one key holding a date, or year, month (and day) keys."""
    key = f"tables.{table}.date_partition"
    if value is None:
        return ()
    if table != "transactions":
        raise ConfigError(f"{path}: key '{key}' is only for tables.transactions (the order lines' date partitions)")
    if fmt == "duckdb":
        raise ConfigError(f"{path}: key '{key}' needs files in folders such as order_date=2026-01-31/; "
                          f"a DuckDB table has none")
    what = ("the hive key holding each line's order date, e.g. \"order_date\", or the keys "
            "[\"year\", \"month\"] or [\"year\", \"month\", \"day\"]")
    keys = [value] if isinstance(value, str) else _expect(path, key, value, list, what)
    if not 1 <= len(keys) <= 3:
        raise ConfigError(f"{path}: key '{key}' must be {what}, found {value!r}")
    for k in keys:
        if not isinstance(k, str) or not k.strip():
            raise ConfigError(f"{path}: key '{key}' must be {what}, found {value!r}")
    if len(set(keys)) != len(keys):
        raise ConfigError(f"{path}: key '{key}' names a key twice: {value!r}")
    return tuple(keys)


def _parse_section(path: Path, name: str, body: Any):
    cls = _SECTIONS[name]
    _expect(path, name, body, dict, "a table of settings")
    valid = [f.name for f in fields(cls)]
    kwargs: dict[str, Any] = {}
    for key, value in body.items():
        if key not in valid:
            raise _unknown(path, f"{name}.", key, valid)
        default = getattr(cls(), key)
        full = f"{name}.{key}"
        if key in ("path", "temp_directory"):
            kwargs[key] = Path(_expect(path, full, value, str, "a folder path (text)"))
        elif key == "memory_limit":
            _expect(path, full, value, str, "a size such as \"4GB\"")
            if not _MEMORY.match(value):
                raise ConfigError(f"{path}: key '{full}' must be a size such as \"4GB\" or \"512MB\", found {value!r}")
            kwargs[key] = value.strip()
        elif key == "holdout_share_by_promotion":
            _expect(path, full, value, dict, "a table of promotion_id = share")
            for pid, share in value.items():
                _share(path, f"{full}.{pid}", share)
            kwargs[key] = {str(k): float(v) for k, v in value.items()}
        elif isinstance(default, bool):
            kwargs[key] = _expect(path, full, value, bool, "true or false")
        elif full in CHOICES:
            if value not in CHOICES[full]:
                raise ConfigError(f"{path}: key '{full}' must be one of {', '.join(CHOICES[full])}, found {value!r}")
            kwargs[key] = value
        elif key in ("holdout_share", "untargeted_share", "margin_rate", "uplift_threshold",
                     "baseline_threshold", "target_lift", "min_regular_share",
                     "reference_depth", "dependent_threshold",
                     "min_lines_accepted_share", "min_assigned_found_share", "min_promotions_kept_share",
                     "max_outlying_date_share"):
            kwargs[key] = _share(path, full, value)
        elif name == "period":
            kwargs[key] = _day(path, full, value)
        elif key == "spark_conf":
            _expect(path, full, value, dict, "a table of Spark settings, e.g. \"spark.driver.memory\" = \"4g\"")
            kwargs[key] = _flat_conf(value)
        elif key == "exclude_features":
            _expect(path, full, value, list, "a list of column names, e.g. [\"region\"]")
            for item in value:
                _expect(path, full, item, str, "a list of column names (text)")
            kwargs[key] = tuple(value)
        elif key == "alpha":
            a = _expect(path, full, value, (int, float), "a significance level between 0 and 1, e.g. 0.05")
            if not 0 < a < 1:
                raise ConfigError(f"{path}: key '{full}' must be between 0 and 1, found {value!r}")
            kwargs[key] = float(a)
        elif isinstance(default, int) or key == "threads":
            v = _expect(path, full, value, int, "a whole number")
            if v < 0 or (v == 0 and key not in ("seed", "future_days", "lock_wait_seconds")):
                raise ConfigError(f"{path}: key '{full}' must be a positive whole number, found {value!r}")
            kwargs[key] = v
        else:
            kwargs[key] = _expect(path, full, value, str, "text")
    return cls(**kwargs)


def _day(path: Path, key: str, value: Any) -> dt.date:
    """A day: a TOML date (2026-01-31) or the same as text."""
    if isinstance(value, dt.datetime):
        raise ConfigError(f"{path}: key '{key}' must be a day such as 2026-01-31, found a time {value!r}")
    if isinstance(value, dt.date):
        return value
    if isinstance(value, str):
        try:
            return dt.date.fromisoformat(value.strip())
        except ValueError:
            pass
    raise ConfigError(f"{path}: key '{key}' must be a day such as 2026-01-31, found {value!r}")


def _flat_conf(value: dict, prefix: str = "") -> dict[str, str]:
    """Spark settings as flat "a.b.c" = "text" (an unquoted dotted TOML key arrives nested)."""
    out: dict[str, str] = {}
    for k, v in value.items():
        key = f"{prefix}{k}"
        if isinstance(v, dict):
            out.update(_flat_conf(v, key + "."))
        else:
            out[key] = str(v).lower() if isinstance(v, bool) else str(v)
    return out


def _share(path: Path, key: str, value: Any) -> float:
    v = _expect(path, key, value, (int, float), "a share between 0 and 1, e.g. 0.2")
    if not 0 <= v <= 1:
        raise ConfigError(f"{path}: key '{key}' must be a share between 0 and 1, found {value!r}")
    return float(v)


def parse(data: dict[str, Any], config_path: Path) -> Settings:
    """Build typed settings from the parsed TOML of ``config_path``."""
    path = config_path
    for key in data:
        if key not in _TOP_KEYS:
            raise _unknown(path, "", key, _TOP_KEYS)
    tables_body = data.get("tables")
    if not isinstance(tables_body, dict) or not tables_body:
        raise ConfigError(
            f"{path}: no [tables.*] sections; name at least the transactions and promotions files "
            f"(and the assignments of targeted campaigns, if any), e.g. [tables.transactions] path = \"export/order_lines/*.parquet\""
        )
    tables = {name: _parse_table(path, name, body) for name, body in tables_body.items()}
    for required in REQUIRED_TABLES:  # assignments, customers and products are optional
        if required not in tables:
            raise ConfigError(f"{path}: section [tables.{required}] is missing; it is required (give its path)")
    sections = {name: _parse_section(path, name, data[name]) for name in _SECTIONS if name in data}
    period = sections.get("period")
    if period is not None and period.first_day and period.last_day and period.first_day > period.last_day:
        raise ConfigError(f"{path}: period.first_day {period.first_day} is after period.last_day {period.last_day}")
    return Settings(config_path=path, tables=tables, raw=data, **sections)


def load(config_path: str | Path) -> Settings:
    """Read and check a ``liftlag.toml``.

    Parameters
    ----------
    config_path : str or Path
        The config file.

    Raises
    ------
    ConfigError
        When the file is missing, is not TOML, or any key is unknown or has the wrong type.
    """
    path = Path(config_path).expanduser().resolve()
    if not path.exists():
        raise ConfigError(f"config file {path} does not exist; write one with `liftlag init EXPORT_DIR`")
    if path.is_dir():
        hint = " (it holds a liftlag.toml: give that file)" if (path / "liftlag.toml").is_file() else ""
        raise ConfigError(f"-c {path} is a folder, not a config file{hint}; give the liftlag.toml file itself")
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise ConfigError(f"config file {path} cannot be read: {exc.strerror or exc}; check its permissions") from None
    try:
        # utf-8-sig: a byte-order mark written by some editors is accepted and dropped.
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        column = exc.start - (raw.rfind(b"\n", 0, exc.start) + 1) + 1
        raise ConfigError(
            f"{path}: line {line}, column {column}: byte 0x{raw[exc.start]:02x} is not UTF-8 (the file was saved in "
            f"another encoding, such as Latin-1); save it as UTF-8"
        ) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}; fix that line (strings need double quotes, "
                          f"sections [brackets])") from None
    return parse(data, path)
