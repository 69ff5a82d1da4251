"""The source layer: the only code that reads export files.

Each configured table is read once into a temporary table ``src_<table>`` (one row per export
row, numbered ``_row_id``, columns renamed to the contract's names and kept as read). A view
``staged_<table>`` on top of it gives every contract column its type (TRY_CAST / TRY_STRPTIME, so
an unparseable value becomes a rejected row, never a crash or a silent NULL), applies the value
mappings, and adds the row-level facts the checks need: ``_missing`` and ``_unparseable`` (the
names of the offending columns, comma-separated, empty when none), ``_row_hash`` and
``_raw_values`` (the original values as text, for exact-duplicate checks and the rejects file).
Tables that are optional and not configured get an empty staged view of the same shape.
"""

from __future__ import annotations

import difflib
import glob
from dataclasses import dataclass
from pathlib import Path

import duckdb

from .config import Settings, TableSettings
from .contract import INPUT_TABLES, InputTable
from .engine.duckdb import quote_ident as q
from .engine.duckdb import scalar
from .errors import ConfigError, DataError


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
    """The files a table's ``path`` names; raises DataError naming the key when there are none."""
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
        raise DataError(
            f"{settings.config_path}: tables.{table.name}.path = {table.path!r} matches no file "
            f"(looked for {full}); check the path, which is relative to the config's folder"
        )
    empty = [f for f in files if Path(f).stat().st_size == 0]
    if empty:
        raise DataError(f"table {table.name}: file {empty[0]} is empty (0 bytes); export it again or remove it from tables.{table.name}.path")
    return files


def _reader(con: duckdb.DuckDBPyConnection, table: TableSettings, files: list[str]) -> str:
    """A FROM clause reading the files; the file list is bound through a DuckDB variable."""
    var = f"liftlag_files_{table.name}"
    con.execute(f"SET VARIABLE {var} = ?", [files])
    files_expr = f"getvariable('{var}')"
    if table.format == "parquet":
        hive = "" if table.hive_partitioning is None else f", hive_partitioning = {str(table.hive_partitioning).lower()}"
        return f"read_parquet({files_expr}, union_by_name = true, filename = '_source_file'{hive})"
    if table.format == "csv":
        opts = ["all_varchar = true", f"header = {str(table.header).lower()}", "filename = '_source_file'", "union_by_name = true"]
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
        first = str(exc).strip().splitlines()[0]
        raise DataError(f"table {table.name}: cannot read {files[0]}{' (and others)' if len(files) > 1 else ''}: {first}") from None
    return [(r[0], r[1]) for r in rows]


def _check_columns(settings: Settings, table: TableSettings, contract: InputTable, found: list[str], files: list[str]) -> None:
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
    single = len([c for c in found if c != "_source_file"]) == 1
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


def _typed_expression(table: TableSettings, column_name: str, column_type: str, con: duckdb.DuckDBPyConnection) -> tuple[str, str]:
    """(typed expression, raw-text expression) for one contract column of ``src_<table>``."""
    raw = q(f"r_{column_name}")
    text = f"CAST({raw} AS VARCHAR)"
    blank = f"({raw} IS NULL OR trim({text}) = '')"
    if table.formats.get(column_name):
        var = f"liftlag_fmt_{table.name}_{column_name}"
        con.execute(f"SET VARIABLE {var} = ?", [table.formats[column_name]])
        typed = f"TRY_STRPTIME(trim({text}), getvariable('{var}'))"
    elif column_type == "VARCHAR":
        typed = text
        if column_name in table.values:
            var = f"liftlag_map_{table.name}_{column_name}"
            mapping = table.values[column_name]
            con.execute(f"SET VARIABLE {var} = map(?, ?)", [list(mapping.values()), list(mapping.keys())])
            typed = f"coalesce(getvariable('{var}')[{text}], {text})"
    elif column_type == "TIMESTAMP":
        typed = f"TRY_CAST({raw} AS TIMESTAMP)"
    else:
        typed = f"TRY_CAST({raw} AS {column_type})"
    return f"CASE WHEN {blank} THEN NULL ELSE {typed} END", text


def _empty_staged(con: duckdb.DuckDBPyConnection, contract: InputTable) -> None:
    cols = ", ".join(f"CAST(NULL AS {c.type}) AS {q(c.name)}" for c in contract.columns)
    con.execute(
        f"CREATE OR REPLACE TEMP VIEW {q('staged_' + contract.name)} AS SELECT CAST(NULL AS BIGINT) AS _row_id, "
        f"CAST(NULL AS VARCHAR) AS _source_file, {cols}, '' AS _missing, '' AS _unparseable, "
        f"CAST(NULL AS UBIGINT) AS _row_hash, CAST(NULL AS VARCHAR) AS _raw_values WHERE false"
    )


def register(con: duckdb.DuckDBPyConnection, settings: Settings, progress=None) -> dict[str, SourceInfo]:
    """Read every configured table into ``src_<table>`` and define its ``staged_<table>`` view.

    Raises
    ------
    DataError
        A file is missing or empty, cannot be read, or lacks a required column.
    """
    infos: dict[str, SourceInfo] = {}
    for name, contract in INPUT_TABLES.items():
        table = settings.tables.get(name)
        if table is None:
            _empty_staged(con, contract)
            continue
        files = resolve_files(settings, table)
        reader = _reader(con, table, files)
        found = [c for c, _ in _describe(con, reader, table, files)]
        _check_columns(settings, table, contract, found, files)
        present = [c for c in contract.columns if table.export_column(c.name) in found]
        mapped = {table.export_column(c.name) for c in present}
        extras = [c for c in found if c not in mapped and c != "_source_file"] if contract.extra_columns else []
        select = [f"{q(table.export_column(c.name))} AS {q('r_' + c.name)}" for c in present]
        select += [f"{q(c)} AS {q('x_' + c)}" for c in extras]
        if progress:
            progress(f"reading {name}")
        try:
            con.execute(
                f"CREATE OR REPLACE TEMP TABLE {q('src_' + name)} AS "
                f"SELECT row_number() OVER () AS _row_id, _source_file, {', '.join(select)} FROM {reader}"
            )
        except duckdb.Error as exc:
            first = str(exc).strip().splitlines()[0]
            raise DataError(f"table {name}: cannot read {files[0]}: {first}") from None
        rows = scalar(con, f"SELECT count(*) FROM {q('src_' + name)}")
        _define_staged(con, table, contract, present_names={c.name for c in present}, extras=extras)
        infos[name] = SourceInfo(name, tuple(files), int(rows), tuple(found), tuple(extras))
    return infos


def _define_staged(con, table: TableSettings, contract: InputTable, present_names: set[str], extras: list[str]) -> None:
    typed_cols, missing_parts, unparseable_parts, raw_texts = [], [], [], []
    for c in contract.columns:
        if c.name not in present_names:
            typed_cols.append(f"CAST(NULL AS {c.type}) AS {q(c.name)}")
            continue
        typed, text = _typed_expression(table, c.name, c.type, con)
        typed_cols.append(f"{typed} AS {q(c.name)}")
        raw = q(f"r_{c.name}")
        blank = f"({raw} IS NULL OR trim({text}) = '')"
        raw_texts.append(f"{q(c.name)} := {text}")
        if c.required:
            missing_parts.append(f"CASE WHEN {blank} THEN '{c.name}' END")
        # A value that is present but does not parse (or maps to nothing allowed) is unparseable.
        unparseable_parts.append(f"CASE WHEN NOT {blank} AND ({typed}) IS NULL THEN '{c.name}' END")
    extra_cols = [f"{q('x_' + e)} AS {q(e)}" for e in extras]
    missing = f"concat_ws(', ', {', '.join(missing_parts)})" if missing_parts else "''"
    unparseable = f"concat_ws(', ', {', '.join(unparseable_parts)})" if unparseable_parts else "''"
    raw_struct = f"struct_pack({', '.join(raw_texts)})"
    con.execute(
        f"CREATE OR REPLACE TEMP VIEW {q('staged_' + contract.name)} AS SELECT _row_id, _source_file, "
        f"{', '.join(typed_cols + extra_cols)}, {missing} AS _missing, {unparseable} AS _unparseable, "
        f"hash({raw_struct}) AS _row_hash, CAST({raw_struct} AS VARCHAR) AS _raw_values "
        f"FROM {q('src_' + contract.name)}"
    )


def staged_union_sql() -> str:
    """The ``staged_all`` view: the row-level facts of every table, for table-independent rules."""
    parts = [
        f"SELECT '{name}' AS table_name, _row_id, _missing, _unparseable, _row_hash, _raw_values FROM {q('staged_' + name)}"
        for name in INPUT_TABLES
    ]
    return "CREATE OR REPLACE TEMP VIEW staged_all AS " + " UNION ALL ".join(parts)


def fingerprint_files(files) -> list[dict]:
    """Cheap, stable fingerprints of input files: path, size and modification time."""
    out = []
    for f in files:
        st = Path(f).stat()
        out.append({"path": str(f), "bytes": st.st_size, "modified_ns": st.st_mtime_ns})
    return out


def require_tables(settings: Settings) -> None:
    for name in ("transactions", "promotions", "assignments"):
        if name not in settings.tables:
            raise ConfigError(f"{settings.config_path}: [tables.{name}] is missing; it is required")
