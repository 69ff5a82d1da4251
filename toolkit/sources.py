"""The source layer: the only code that reads export files.

Each configured table is read once, in one pass, into a temporary table ``stage_<table>``: every
contract column under its contract name and type (TRY_CAST / TRY_STRPTIME, so an unparseable value
becomes a rejected row, never a crash or a silent NULL), value mappings applied, and the row-level
facts the checks need: ``_missing`` (the names of required columns left empty), ``_unparseable``
(``column = 'text'`` for each required value that does not parse) and ``_unparseable_optional``
(the same for optional values, which are left NULL and only warned about) — comma-separated,
empty when none — and ``_raw_problem`` (the original text of the row, kept only for rows with
such a fault). The view ``staged_<table>`` adds ``_row_id`` (the stage's row
number), ``_row_hash`` (of all values, for the exact-duplicate rule) and ``_raw_values`` (the
original text, or the typed values as text where every value parsed). Tables that are optional
and not configured get an empty staged view of the same shape.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import difflib
import glob
import warnings
from dataclasses import dataclass
from pathlib import Path

import duckdb

from . import partitions
from .config import Settings, TableSettings
from .contract import INPUT_TABLES, InputTable
from .engine.duckdb import quote_ident as q
from .engine.duckdb import scalar
from .errors import ConfigError, DataError, DataWarning
from .failures import duckdb_cause

# Columns the reader adds; never the export's own.
READER_COLUMNS = ("_source_file", "file_row_number", "file_index")  # file_index: the Spark reader's own


@dataclass(frozen=True)
class SourceInfo:
    """What was read for one table."""

    table: str
    files: tuple[str, ...]
    rows: int
    columns: tuple[str, ...]  # the export's columns as found
    extra_columns: tuple[str, ...] = ()  # kept as attributes (customers)


def _has_glob(path: str) -> bool:
    return any(ch in path for ch in "*?[")


def resolve_files(settings: Settings, table: TableSettings) -> list[str]:
    """The files a table's ``path`` names, less those a ``[period]`` skips by their date partition.

    Raises ConfigError naming the key when the path matches no file (or the period leaves none).
    """
    files = listed_files(settings, table)
    if not (table.date_partition and settings.period.bounded):
        return files
    kept = partitions.prune(files, table.date_partition, settings.period.first_day, settings.period.last_day).files
    if not kept:
        raise ConfigError(
            f"{settings.config_path}: no file of tables.{table.name}.path lies in the period "
            f"{_period_text(settings)} (by its {'/'.join(table.date_partition)} folders); widen [period] or check "
            f"tables.{table.name}.date_partition")
    return kept


def _period_text(settings: Settings) -> str:
    p = settings.period
    return f"{p.first_day or 'the first line'} to {p.last_day or 'the last line'}"


def listed_files(settings: Settings, table: TableSettings) -> list[str]:
    """Every file a table's ``path`` names; raises ConfigError naming the key when there are none."""
    full = str(settings.resolve(table.path))
    if _has_glob(full):
        files = sorted(glob.glob(full, recursive=True))
        files = [f for f in files if Path(f).is_file()]
    else:
        p = Path(full)
        if p.is_dir():
            pattern = "**/*.parquet" if table.format == "parquet" else "**/*.csv*"
            files = sorted(str(f) for f in p.glob(pattern) if f.is_file())
        else:
            files = [full] if p.is_file() else []
    if not files:
        # The config names the files: a path that matches nothing is a config mistake (exit 2).
        raise ConfigError(
            f"{settings.config_path}: tables.{table.name}.path = {table.path!r} matches no file "
            f"(looked for {full}); check the path, which is relative to the config's folder"
        )
    empty = [f for f in files if Path(f).stat().st_size == 0]
    if empty:
        raise DataError(f"table {table.name}: file {empty[0]} is empty (0 bytes); export it again or remove it from tables.{table.name}.path")
    return files


def _reader(con: duckdb.DuckDBPyConnection, table: TableSettings, files: list[str], suffix: str = "") -> str:
    """A FROM clause reading the files; the file list is bound through a DuckDB variable (one per
    staged table: a Parquet stage is a view, which reads the variable whenever it is queried)."""
    if hasattr(con, "read_files"):  # the Spark engine reads the export itself
        return con.read_files(table, files)
    var = f"liftlag_files_{table.name}{suffix}"
    con.execute(f"SET VARIABLE {var} = ?", [files])
    files_expr = f"getvariable('{var}')"
    if table.format == "parquet":
        hive = "" if table.hive_partitioning is None else f", hive_partitioning = {str(table.hive_partitioning).lower()}"
        return f"read_parquet({files_expr}, union_by_name = true, filename = '_source_file', file_row_number = true{hive})"
    if table.format == "csv":
        opts = ["all_varchar = true", f"header = {str(table.header).lower()}", "filename = '_source_file'", "union_by_name = true"]
        if table.encoding is not None:
            evar = f"liftlag_encoding_{table.name}"
            con.execute(f"SET VARIABLE {evar} = ?", [table.encoding])
            opts.append(f"encoding = getvariable('{evar}')")
        if table.delimiter is not None:
            dvar = f"liftlag_delim_{table.name}"
            con.execute(f"SET VARIABLE {dvar} = ?", [table.delimiter])
            opts.append(f"delim = getvariable('{dvar}')")
        return f"read_csv({files_expr}, {', '.join(opts)})"
    # duckdb database file
    alias = f"liftlag_src_{table.name}"
    con.execute(f"ATTACH {_literal(files[0])} AS {q(alias)} (READ_ONLY)")
    return f"(SELECT *, {_literal(files[0])} AS _source_file FROM {q(alias)}.{q(table.table)})"


def _literal(text: str) -> str:
    # Only used for ATTACH, whose target cannot be a bound parameter; quotes are doubled.
    return "'" + text.replace("'", "''") + "'"


def _describe(con: duckdb.DuckDBPyConnection, reader: str, table: TableSettings, files: list[str]) -> list[tuple[str, str]]:
    try:
        rows = con.execute(f"DESCRIBE SELECT * FROM {reader}").fetchall()
    except duckdb.Error as exc:
        raise DataError(f"table {table.name}: cannot read {files[0]}{' (and others)' if len(files) > 1 else ''}: "
                        f"{read_hint(exc, table)}") from None
    return [(r[0], r[1]) for r in rows]


def read_hint(exc: Exception, table: TableSettings) -> str:
    """DuckDB's full cause of a read failure, with what to do for the common ones."""
    cause = duckdb_cause(exc)
    lower = cause.lower()
    if "sniffing" in lower or "automatically detect" in lower:
        hint = (f"the file's layout (delimiter, quoting, line endings) could not be detected: check that every line "
                f"has the same number of fields and the same line ending; set tables.{table.name}.delimiter if it is "
                f"not a comma")
    elif "not utf-8" in lower or "invalid unicode" in lower:
        hint = f"set tables.{table.name}.encoding = \"latin-1\" (or utf-16), or export the file as UTF-8"
    elif "unterminated quote" in lower or "unterminated quoted" in lower:
        hint = "a quoted field is not closed (an unbalanced \" in a value); fix the quoting in the export"
    elif "maximum line size" in lower or "max_line_size" in lower:
        hint = "one field is longer than the reader allows (a broken line or an unclosed quote); fix the export"
    elif "parquet" in lower or "footer" in lower or "magic" in lower:
        hint = "the Parquet file is damaged or not Parquet; export it again"
    else:
        hint = "fix or export the file again"
    return f"{cause}; {hint}"


def _duplicate_header(con, table: TableSettings, contract: InputTable, reader: str, files: list[str]) -> None:
    """A CSV header naming one column twice: an error when it is a contract column, else a warning."""
    if table.format != "csv" or not table.header:
        return
    if hasattr(con, "header_row"):  # the Spark engine reads the files itself
        row = con.header_row(table, files[0])
    else:
        opts = reader.replace("header = true", "header = false").replace(", union_by_name = true", "")
        opts = opts.replace("getvariable('liftlag_files_" + table.name + "')", "getvariable('liftlag_first_file')")
        con.execute("SET VARIABLE liftlag_first_file = ?", [files[0]])
        try:
            row = con.execute(f"SELECT * EXCLUDE (_source_file) FROM {opts} LIMIT 1").fetchall()
        except duckdb.Error:
            return  # the full read reports the cause
    if not row:
        return
    names = [str(v).strip() for v in row[0] if v is not None]
    repeated = sorted({n for n in names if names.count(n) > 1})
    if not repeated:
        return
    wanted = {table.export_column(c.name) for c in contract.columns}
    clash = [n for n in repeated if n in wanted]
    if clash:
        raise DataError(
            f"table {table.name}: the header of {files[0]} names column '{clash[0]}' {names.count(clash[0])} times; "
            f"it is not clear which one to read: rename or drop the copies in the export"
        )
    warnings.warn(
        f"table {table.name}: the header of {files[0]} names {', '.join(repr(n) for n in repeated)} more than once; "
        f"the copies are read as {repeated[0]}_1, ... (not used by liftlag unless mapped)", DataWarning, stacklevel=2)


def _match_names_loosely(table: TableSettings, contract: InputTable, found: list[str]) -> TableSettings:
    """Accept a header that differs from the wanted name only in case or surrounding spaces."""
    loose: dict[str, list[str]] = {}
    for name in found:
        loose.setdefault(name.strip().lower(), []).append(name)
    columns = dict(table.columns)
    for c in contract.columns:
        wanted = table.export_column(c.name)
        candidates = loose.get(wanted.strip().lower(), [])
        if wanted not in found and len(candidates) == 1:
            columns[c.name] = candidates[0]
    return dataclasses.replace(table, columns=columns) if columns != table.columns else table


def _check_columns(settings: Settings, table: TableSettings, contract: InputTable, found: list[str], files: list[str]) -> None:
    found = [c for c in found if c not in READER_COLUMNS]
    for name, wanted in table.columns.items():
        # A mapping line names a column on purpose: one the export lacks is a mistake in the
        # config (exit 2), even for an optional column (otherwise, say, list_amount would be
        # silently derived instead).
        if wanted not in found:
            close = difflib.get_close_matches(wanted, found, n=3, cutoff=0.4)
            hint = f"closest columns: {', '.join(close)}" if close else f"columns found: {', '.join(found[:12])}"
            raise ConfigError(
                f"table {table.name}: tables.{table.name}.columns.{name} = {wanted!r} names a column that is not "
                f"in {files[0]}; {hint}; fix the name or remove the line"
            )
    missing = []
    for name in contract.required:
        if table.export_column(name) not in found:
            missing.append(name)
    if not missing:
        return
    name = missing[0]
    wanted = table.export_column(name)
    close = difflib.get_close_matches(wanted, found, n=3, cutoff=0.4)
    hint = f"closest columns: {', '.join(close)}" if close else f"columns found: {', '.join(found[:12])}"
    single = len(found) == 1
    delimiter_hint = (
        f"; only one column was found, so the file may use another delimiter: set tables.{table.name}.delimiter"
        if single and table.format == "csv" else ""
    )
    mapping = (
        f"map it with [tables.{table.name}.columns] {name} = \"<export column>\""
        if wanted == name else f"tables.{table.name}.columns.{name} = {wanted!r} names a column that is not there"
    )
    raise DataError(
        f"table {table.name}: required column '{wanted}' (contract column {name}) is missing in {files[0]}; "
        f"{hint}{delimiter_hint}; {mapping}"
    )


def blank_test(raw: str, is_text: bool) -> str:
    """SQL that is true when a value is missing: null, or text that is empty or only spaces.

    trim() is costly on tens of millions of values, so it runs only on text that starts with a
    space (CASE evaluates a branch only for the rows that reach it).
    """
    if not is_text:
        return f"({raw} IS NULL)"
    return (f"(CASE WHEN {raw} IS NULL OR {raw} = '' THEN true "
            f"WHEN starts_with({raw}, ' ') THEN trim({raw}) = '' ELSE false END)")


def _typed_expression(table: TableSettings, column_name: str, column_type: str, con: duckdb.DuckDBPyConnection,
                      raw_is_text: bool = True) -> tuple[str, str]:
    """(typed expression, raw-text expression) for one contract column, read as ``r_<column>``.

    Text is blank when empty or spaces; a value read with a type (Parquet) only when null.
    """
    raw = q(f"r_{column_name}")
    text = f"CAST({raw} AS VARCHAR)" if not raw_is_text else raw
    blank = blank_test(raw, raw_is_text)
    # Text files pad values with spaces; typed files (Parquet) keep values as they were written.
    trimmed = table.format == "csv" and raw_is_text

    if table.formats.get(column_name):
        var = f"liftlag_fmt_{table.name}_{column_name}"
        fmt = table.formats[column_name]
        try:
            con.execute("SELECT try_strptime('2000-01-01', ?)", [fmt]).fetchall()
        except duckdb.Error as exc:
            raise ConfigError(
                f"{table.name}: tables.{table.name}.formats.{column_name} = {fmt!r} is not a format DuckDB knows: "
                f"{duckdb_cause(exc)}; use strptime codes such as \"%Y-%m-%d %H:%M:%S\" or \"%d/%m/%Y\""
            ) from None
        con.execute(f"SET VARIABLE {var} = ?", [fmt])
        typed = f"TRY_STRPTIME(trim({text}), getvariable('{var}'))"
    elif column_type == "VARCHAR":
        # Ids and codes are compared exactly downstream: in text files, surrounding spaces are dropped.
        value = f"trim({text})" if trimmed else text
        typed = value
        if column_name in table.values:
            var = f"liftlag_map_{table.name}_{column_name}"
            mapping = table.values[column_name]
            con.execute(f"SET VARIABLE {var} = map(?, ?)", [list(mapping.values()), list(mapping.keys())])
            typed = f"coalesce(getvariable('{var}')[{value}], {value})"
    elif column_type == "TIMESTAMP":
        # A time with a UTC offset (text, or Parquet TIMESTAMPTZ) becomes UTC; a time without one
        # is kept as written. (The connection's time zone is UTC.)
        typed = f"CAST(TRY_CAST({raw} AS TIMESTAMPTZ) AS TIMESTAMP)" if raw_is_text else f"TRY_CAST({raw} AS TIMESTAMP)"
    elif column_type == "DOUBLE":
        # NaN and infinity parse as numbers but are no amount: they count as unparseable.
        typed = f"CASE WHEN abs(TRY_CAST({raw} AS DOUBLE)) < CAST('Infinity' AS DOUBLE) THEN TRY_CAST({raw} AS DOUBLE) END"
    else:
        typed = f"TRY_CAST({raw} AS {column_type})"
    return f"CASE WHEN {blank} THEN NULL ELSE {typed} END", text


def _empty_staged(con: duckdb.DuckDBPyConnection, contract: InputTable) -> None:
    cols = ", ".join(f"CAST(NULL AS {c.type}) AS {q(c.name)}" for c in contract.columns)
    con.execute(
        f"CREATE OR REPLACE TEMP VIEW {q('staged_' + contract.name)} AS SELECT CAST(NULL AS BIGINT) AS _row_id, "
        f"CAST(NULL AS BIGINT) AS _file_row, "
        f"CAST(NULL AS VARCHAR) AS _source_file, {cols}, '' AS _missing, '' AS _unparseable, '' AS _unparseable_optional, "
        f"CAST(NULL AS UBIGINT) AS _row_hash, CAST(NULL AS VARCHAR) AS _raw_values WHERE false"
    )


def register(con: duckdb.DuckDBPyConnection, settings: Settings, progress=None, timings=None,
             only_files: dict[str, list[str]] | None = None, tables: tuple[str, ...] | None = None,
             suffix: str = "") -> dict[str, SourceInfo]:
    """Read every configured table, in one pass, into ``stage_<table>``; define ``staged_<table>``.

    With a ``[period]``, only the order lines dated in it are read (lines whose date is missing or
    does not parse are read, to be rejected). For an incremental build (``toolkit.incremental``):
    ``only_files`` reads these files of a table instead of all of them, ``tables`` reads only these
    tables, and ``suffix`` names the results ``stage_<table><suffix>`` / ``staged_<table><suffix>``.

    ``progress`` is called with "reading <table>" before each table is read; ``timings``
    (``toolkit.steps.Timings``) records each read as step "read <table>", with its rows.

    Raises
    ------
    DataError
        A file is missing or empty, cannot be read, or lacks a required column.
    """
    infos: dict[str, SourceInfo] = {}
    _period_variables(con, settings)
    for name, contract in INPUT_TABLES.items():
        if tables is not None and name not in tables:
            continue
        table = settings.tables.get(name)
        if table is None:
            if name == "transactions":  # never: transactions are required
                raise ConfigError("[tables.transactions] is missing")
            _empty_staged(con, contract)
            continue
        files = resolve_files(settings, table) if only_files is None or name not in only_files else only_files[name]
        if name == "transactions" and not suffix:
            _register_partition_bounds(con, table, files)
        reader = _reader(con, table, files, suffix)
        described = _describe(con, reader, table, files)
        _duplicate_header(con, table, contract, reader, files)
        found = [c for c, _ in described]
        found_types = dict(described)
        table = _match_names_loosely(table, contract, found)
        _check_columns(settings, table, contract, found, files)
        present = [c for c in contract.columns if table.export_column(c.name) in found]
        mapped = {table.export_column(c.name) for c in present}
        extras = [c for c in found if c not in mapped and c not in READER_COLUMNS] if contract.extra_columns else []
        if progress:
            progress(f"reading {name}")
        step = timings.begin(f"read {name}") if timings is not None else None
        # Parquet is read again by each step that needs it (a scan costs less than holding tens
        # of millions of rows); its rows are keyed by file and row number. CSV and DuckDB tables
        # are read once into a temporary table, keyed by its row number; rows keep file order,
        # so row numbers in the rejects (and "the first copy") are the files'.
        lazy = table.format == "parquet" or hasattr(con, "read_files")  # Spark keys every read by file and row
        con.execute("SET preserve_insertion_order = true")
        try:
            read_types = {c.name: found_types[table.export_column(c.name)] for c in present}
            select = _stage_sql(con, table, contract, reader, read_types, extras, lazy=lazy,
                                dated=name == "transactions" and settings.period.bounded)
            # On Spark every stage is a table (computed once, its plan cut short): a view's plan is
            # analysed again by every rule that reads it.
            kind = "VIEW" if table.format == "parquet" and not hasattr(con, "read_files") else "TABLE"
            con.execute(f"CREATE OR REPLACE TEMP {kind} {q('stage_' + name + suffix)} AS {select}")
            rows = scalar(con, f"SELECT count(*) FROM {q('stage_' + name + suffix)}")
        except duckdb.Error as exc:
            if isinstance(exc, duckdb.InterruptException):
                raise
            where = files[0] if len(files) == 1 else f"{files[0]} (or another of its {len(files)} files)"
            raise DataError(f"table {name}: cannot read {where}: {read_hint(exc, table)}") from None
        finally:
            con.execute("SET preserve_insertion_order = false")
        _define_staged_view(con, contract, extras, lazy=lazy, suffix=suffix)
        if step is not None:
            timings.end(step, rows=int(rows))
        infos[name] = SourceInfo(name, tuple(files), int(rows), tuple(found), tuple(extras))
    return infos


def _period_variables(con, settings: Settings) -> None:
    """``liftlag_period_from`` / ``liftlag_period_before``: the period's first day and the day after
    its last (NULL when open), as timestamps."""
    p = settings.period
    con.execute("SET VARIABLE liftlag_period_from = ?", [_midnight(p.first_day)])
    con.execute("SET VARIABLE liftlag_period_before = ?",
                [_midnight(p.last_day + dt.timedelta(days=1)) if p.last_day else None])


def _midnight(day):
    return None if day is None else dt.datetime.combine(day, dt.time())


def _register_partition_bounds(con, table: TableSettings, files: list[str]) -> None:
    """``partition_bounds``: each dated file's first and last day (rule ``date_outside_partition``)."""
    frame = partitions.bounds_frame(files, table.date_partition) if table.date_partition else None
    if frame is None or frame.empty:
        con.execute("CREATE OR REPLACE TEMP TABLE partition_bounds AS SELECT CAST(NULL AS VARCHAR) AS _source_file, "
                    "CAST(NULL AS DATE) AS first_day, CAST(NULL AS DATE) AS last_day WHERE false")
        return
    con.register("partition_bounds_frame", frame)
    try:
        con.execute("CREATE OR REPLACE TEMP TABLE partition_bounds AS SELECT CAST(_source_file AS VARCHAR) AS _source_file, "
                    "CAST(first_day AS DATE) AS first_day, CAST(last_day AS DATE) AS last_day FROM partition_bounds_frame")
    finally:
        con.unregister("partition_bounds_frame")


def _stage_sql(con, table: TableSettings, contract: InputTable, reader: str, present: dict[str, str], extras: list[str],
               lazy: bool = False, dated: bool = False) -> str:
    """One pass over the files: typed columns plus the facts the checks need.

    ``present`` maps each contract column found to the DuckDB type it was read with. Text is
    blank when empty or spaces; a typed (Parquet) value only when null. ``_raw_problem`` keeps the
    original text of every column, but only for rows with a missing or unparseable value (the
    rows whose typed values cannot stand for what was read).
    """
    renamed, typed_cols, missing_parts, unparseable_parts, raw_texts = [], [], [], [], []
    optional_parts = []  # (condition, column, original text): an optional value that does not parse
    for c in contract.columns:
        if c.name not in present:
            typed_cols.append(f"CAST(NULL AS {c.type}) AS {q(c.name)}")
            continue
        raw = q(f"r_{c.name}")
        renamed.append(f"{q(table.export_column(c.name))} AS {raw}")
        is_text = present[c.name].upper() == "VARCHAR"
        typed, text = _typed_expression(table, c.name, c.type, con, raw_is_text=is_text)
        typed_cols.append(f"{typed} AS {q(c.name)}")
        blank = blank_test(raw, is_text)
        raw_texts.append(f"{q(c.name)} := {text}")
        if c.required:
            missing_parts.append((blank, c.name))
        # A value that is present but does not parse is unparseable: a required one rejects its
        # row; an optional one is left empty (NULL) and warned about, so it never drops the row
        # nor, through it, the rows that reference it.
        if c.required:
            unparseable_parts.append((f"NOT {blank} AND {q(c.name)} IS NULL", c.name, text))
        else:
            optional_parts.append((f"NOT {blank} AND {q(c.name)} IS NULL", c.name, text))
    renamed += [f"{q(e)} AS {q('x_' + e)}" for e in extras]
    raw_texts += [f"{q(e)} := CAST({q('x_' + e)} AS VARCHAR)" for e in extras]
    extra_cols = [f"{q('x_' + e)} AS {q(e)}" for e in extras]
    names = [q(c.name) for c in contract.columns] + [q(e) for e in extras]
    missing = _names_where(missing_parts)
    unparseable = _values_where(unparseable_parts)  # the value as written, so the reason shows it
    unparseable_optional = _values_where(optional_parts)
    raw_struct = f"CAST(struct_pack({', '.join(raw_texts)}) AS VARCHAR)"
    # The row key: the file's place in the sorted file list, then the row in the file; the
    # same numbers on every engine, so "the first copy" is the same row everywhere.
    key = ("(CAST(file_index AS BIGINT) * 1099511627776 + file_row_number) AS _row_key, "
           "file_row_number + 1 AS _file_row, ") if lazy else ""
    read = f"SELECT {key}_source_file, {', '.join(renamed)} FROM {reader}"
    typed = f"SELECT *, {', '.join(typed_cols + extra_cols)} FROM ({read})"
    if dated:
        # [period]: lines dated outside it are not read; a line whose date is missing
        # or does not parse is read, to be rejected for that.
        typed = (f"SELECT * FROM ({typed}) WHERE ordered_at IS NULL OR ("
                 f"(getvariable('liftlag_period_from') IS NULL OR ordered_at >= getvariable('liftlag_period_from')) AND "
                 f"(getvariable('liftlag_period_before') IS NULL OR ordered_at < getvariable('liftlag_period_before')))")
    facts = (f"SELECT *, {missing} AS _missing, {unparseable} AS _unparseable, "
             f"{unparseable_optional} AS _unparseable_optional FROM ({typed})")
    problem = (f"SELECT *, CASE WHEN _missing <> '' OR _unparseable <> '' OR _unparseable_optional <> '' "
               f"THEN {raw_struct} END AS _raw_problem FROM ({facts})")
    keys = "_row_key, _file_row, " if lazy else ""
    return (
        f"SELECT {keys}_source_file, {', '.join(names)}, _missing, _unparseable, _unparseable_optional, _raw_problem, "
        f"hash({', '.join(names)}, _raw_problem) AS _row_hash FROM ({problem})"
    )


def _names_where(conditions: list[tuple[str, str]]) -> str:
    """Comma-separated names of the columns whose condition holds ('' when none).

    CASE evaluates a branch only for the rows that reach it, so the text costs nothing on the
    (usual) rows where no condition holds.
    """
    if not conditions:
        return "''"
    any_holds = " OR ".join(f"({cond})" for cond, _ in conditions)
    parts = ", ".join(f"CASE WHEN {cond} THEN '{name}' END" for cond, name in conditions)
    return f"CASE WHEN {any_holds} THEN concat_ws(', ', {parts}) ELSE '' END"


def _values_where(conditions: list[tuple[str, str, str]]) -> str:
    """``column = 'original text'`` for each column whose value did not parse ('' when none)."""
    if not conditions:
        return "''"
    any_holds = " OR ".join(f"({cond})" for cond, _, _ in conditions)
    parts = ", ".join(
        "CASE WHEN " + cond + " THEN '" + name + " = ''' || left(" + text + ", 40) || '''' END"
        for cond, name, text in conditions
    )
    return f"CASE WHEN {any_holds} THEN concat_ws(', ', {parts}) ELSE '' END"


def _define_staged_view(con, contract: InputTable, extras: list[str], lazy: bool = False, suffix: str = "") -> None:
    """``staged_<table>``: the stage with its row key, its row in the file, a row hash and the
    values as text."""
    names = [c.name for c in contract.columns] + list(extras)
    cols = ", ".join(q(n) for n in names)
    as_text = f"CAST(struct_pack({', '.join(f'{q(n)} := {q(n)}' for n in names)}) AS VARCHAR)"
    keys = "_row_key AS _row_id, _file_row" if lazy else "CAST(rowid + 1 AS BIGINT) AS _row_id, rowid + 1 AS _file_row"
    con.execute(
        f"CREATE OR REPLACE TEMP VIEW {q('staged_' + contract.name + suffix)} AS SELECT {keys}, "
        f"_source_file, {cols}, _missing, _unparseable, _unparseable_optional, _row_hash, "
        f"coalesce(_raw_problem, {as_text}) AS _raw_values FROM {q('stage_' + contract.name + suffix)}"
    )


def staged_union_sql() -> list[str]:
    """``staged_all``: the row-level facts of every table, for table-independent rules; and
    ``staged_all_sources``: each row's file and original values, for the rejects."""
    parts = [
        f"SELECT '{name}' AS table_name, _row_id, _file_row, _missing, _unparseable, _unparseable_optional, _row_hash, "
        f"_raw_values FROM {q('staged_' + name)}"
        for name in INPUT_TABLES
    ]
    with_files = [
        f"SELECT '{name}' AS table_name, _row_id, _file_row, _source_file, _raw_values FROM {q('staged_' + name)}"
        for name in INPUT_TABLES
    ]
    return [
        "CREATE OR REPLACE TEMP VIEW staged_all AS " + " UNION ALL ".join(parts),
        "CREATE OR REPLACE TEMP VIEW staged_all_sources AS " + " UNION ALL ".join(with_files),
    ]


def fingerprint_files(files) -> list[dict]:
    """Cheap, stable fingerprints of input files: path, size and modification time."""
    out = []
    for f in files:
        st = Path(f).stat()
        out.append({"path": str(f), "bytes": st.st_size, "modified_ns": st.st_mtime_ns})
    return out


def locate_unreadable(settings: Settings) -> tuple[str, str, str] | None:
    """(table, file, cause) of the first export file that cannot be read through, or None.

    Only on the failure path: Parquet is read lazily, so a damaged data page surfaces in whatever
    query first decodes it, with a message that may not name the file. Each file is decoded in
    full here, one at a time, to name it.
    """
    from .engine.duckdb import connect as engine_connect

    con = engine_connect(settings)
    try:
        for name, table in settings.tables.items():
            if table.format != "parquet":
                continue
            try:
                files = resolve_files(settings, table)
            except (ConfigError, DataError):
                continue
            for f in files:
                try:
                    con.execute("SELECT max(hash(COLUMNS(*))) FROM read_parquet(?)", [f]).fetchall()
                except duckdb.InterruptException:
                    raise
                except duckdb.Error as exc:
                    return name, f, duckdb_cause(exc)
    finally:
        con.close()
    return None
