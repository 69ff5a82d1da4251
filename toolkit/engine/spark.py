"""The Spark engine: check and build run their SQL on a SparkSession.

``SparkConnection`` offers the few calls of a DuckDB connection that the check, the build and the
timing SQL make (``execute(sql, params)`` with ``.fetchall()`` / ``.df()``, ``register``,
``cursor``, ``close``), and runs each statement on Spark: the DuckDB SQL is transpiled by
``toolkit.engine.transpile.to_spark`` with the bound values as literals, so the same SQL files
serve both engines. What is DuckDB-only in those calls is handled here:

- ``SET VARIABLE name = ?`` keeps the value; ``getvariable('name')`` becomes its literal.
- ``CREATE [OR REPLACE] TEMP TABLE`` is computed once (a local checkpoint: rows kept in memory and on
  local disk, the plan cut to a scan) and registered as a temporary view; ``INSERT INTO t SELECT``
  materializes the inserted rows the same way and makes ``t`` the union of its parts.
- ``ATTACH 'x.duckdb' AS out`` / ``CREATE TABLE out.name AS ...`` / ``DETACH out``: Spark writes each
  table as Parquet into a staging folder of its own (``<workspace>/spark/<file name of x>/<name>/``),
  and on DETACH the tables are loaded from that Parquet into ``x.duckdb`` (by DuckDB) and the staging
  folder is removed. So a Spark build leaves the same self-contained database files as a DuckDB
  build (the private file that ``panels.build`` publishes by one rename), and the analyses open
  the workspace as they do after a DuckDB build.
- The export is read by Spark itself (``read_files``): Parquet (with hive partitions), CSV and
  gzipped CSV, each row keyed by its file's place in the sorted file list and its row in the
  file, as the DuckDB source layer keys it.

``open_workspace`` gives the analyses' SQL (``liftlag timing``) the published tables as views, and
makes its cursors private as DuckDB's are (a cursor's temporary tables are its own).

The session is pinned to UTC, reads timestamps without a zone as ``TIMESTAMP_NTZ`` and runs with
ANSI mode off (a failed cast is null, as DuckDB's TRY_CAST). One session serves the process.
"""

from __future__ import annotations

import os
import re
import sys
import unicodedata
import shutil
from pathlib import Path

import pandas as pd
import sqlglot
from sqlglot import exp

from ..errors import ConfigError, DataError
from .transpile import parse_duckdb, to_spark

_SESSION = None
_CURSORS = 0  # private cursors made so far (their views' names are numbered)
STARTUP_SECONDS: float | None = None  # how long the process's session took to start

# Spark settings the engine relies on; [engine.spark_conf] may add others but not change these.
PINNED_CONF = {
    "spark.sql.session.timeZone": "UTC",
    "spark.sql.timestampType": "TIMESTAMP_NTZ",
    "spark.sql.parquet.inferTimestampNTZ.enabled": "true",
    "spark.sql.parquet.outputTimestampType": "TIMESTAMP_MICROS",
    "spark.sql.ansi.enabled": "false",
    "spark.sql.legacy.sizeOfNull": "false",
}
DEFAULT_CONF = {
    "spark.ui.enabled": "false",
    "spark.ui.showConsoleProgress": "false",
    "spark.sql.shuffle.partitions": "8",
    "spark.driver.extraJavaOptions": "-Duser.timezone=UTC",
    "spark.executor.extraJavaOptions": "-Duser.timezone=UTC",
}

_SPARK_TO_DUCKDB = {
    "string": "VARCHAR", "bigint": "BIGINT", "int": "INTEGER", "smallint": "SMALLINT", "tinyint": "TINYINT",
    "double": "DOUBLE", "float": "FLOAT", "boolean": "BOOLEAN", "date": "DATE", "timestamp": "TIMESTAMP WITH TIME ZONE",
    "timestamp_ntz": "TIMESTAMP", "binary": "BLOB",
}


def session(master: str = "local[*]", conf: dict | None = None):
    """The process's SparkSession (created on first use; start-up takes several seconds)."""
    global _SESSION
    try:
        from pyspark.sql import SparkSession
    except ImportError:
        raise ConfigError("[engine] kind = \"spark\" needs pyspark: pip install 'liftlag[spark]'") from None
    if _SESSION is not None:
        return _SESSION
    java_home = os.environ.get("JAVA_HOME")
    if not (java_home and os.path.isfile(os.path.join(java_home, "bin", "java"))) and shutil.which("java") is None:
        raise ConfigError("[engine] kind = \"spark\" needs a Java runtime (Java 17) on PATH or in JAVA_HOME, "
                          "e.g. apt-get install openjdk-17-jre-headless; or set [engine] kind = \"duckdb\"")
    os.environ.setdefault("PYSPARK_PYTHON", sys.executable)  # Python UDFs run in this interpreter
    import time

    started = time.perf_counter()
    builder = SparkSession.builder.master(master).appName("liftlag")
    for key, value in {**DEFAULT_CONF, **(conf or {}), **PINNED_CONF}.items():
        builder = builder.config(key, str(value))
    _SESSION = builder.getOrCreate()
    _SESSION.sparkContext.setLogLevel("ERROR")
    from pyspark.sql.types import StringType

    # DuckDB's nfc_normalize (the gates compare ids with case and Unicode form set aside).
    _SESSION.udf.register("liftlag_nfc", _nfc, StringType())
    for key, value in PINNED_CONF.items():
        _SESSION.conf.set(key, value)
    global STARTUP_SECONDS
    STARTUP_SECONDS = time.perf_counter() - started
    # The fixed cost apart from the work (benchmarks read it from the log).
    print(f"liftlag: Spark session ({master}) started in {STARTUP_SECONDS:.1f} s", file=sys.stderr, flush=True)
    return _SESSION


_JAVA_CHARSETS = {"utf-8": "UTF-8", "utf-16": "UTF-16", "latin-1": "ISO-8859-1"}  # config.ENCODINGS


def _nfc(text):
    return None if text is None else unicodedata.normalize("NFC", text)


def duckdb_type(spark_type: str) -> str:
    """A Spark type name as the DuckDB type the source layer expects."""
    name = spark_type.lower()
    if name.startswith("decimal"):
        return "DECIMAL"
    return _SPARK_TO_DUCKDB.get(name, name.upper())


class _Result:
    def __init__(self, frame=None, rows=None):
        self._frame = frame
        self._rows = rows

    def fetchall(self) -> list[tuple]:
        if self._rows is not None:
            return self._rows
        if self._frame is None:
            return []
        return [tuple(r) for r in self._frame.collect()]

    def df(self) -> pd.DataFrame:
        if self._frame is None:
            return pd.DataFrame()
        out = self._frame.toPandas()
        return out


def _placeholders(tree: exp.Expression, params: list) -> exp.Expression:
    """Positional ``?`` parameters as literals (in the order they appear)."""
    from .transpile import _literal

    values = iter(params)

    def replace(node):
        if isinstance(node, exp.Placeholder):
            return _literal(next(values))
        return node

    return tree.transform(replace)


class SparkConnection:
    """A SparkSession behind the calls of a DuckDB connection that check, build and timing make."""

    def __init__(self, settings=None, spark=None) -> None:
        engine = settings.engine if settings is not None else None
        master = getattr(engine, "master", None) or "local[*]"
        conf = dict(getattr(engine, "spark_conf", None) or {})
        if engine is not None and getattr(engine, "threads", None) and master == "local[*]":
            master = f"local[{int(engine.threads)}]"
        self.spark = spark or session(master, conf)
        self.settings = settings
        self.variables: dict[str, object] = {}
        self._views: set[str] = set()
        self._cached: dict[str, object] = {}
        self._attached: dict[str, Path] = {}
        self._written: dict[str, list[tuple[str, Path]]] = {}
        self._appended: dict[str, list] = {}  # INSERT INTO: the table's first frame, then each insert
        self._parent = None
        self._read_copy: Path | None = None  # open_workspace: the published tables as Parquet
        # With private_cursors (open_workspace), each cursor's temporary tables and registered
        # frames are its own, as a DuckDB cursor's: kept under a private name (``_own``) that
        # only this cursor's statements read; the connection's own views are shared by all.
        self.private_cursors = False
        self._own: dict[str, str] | None = None

    # -- the DuckDB-like surface ----------------------------------------------------------------
    def cursor(self) -> "SparkConnection":
        """Another handle on the same session and temporary views (Spark has one catalog); with
        ``private_cursors``, the temporary tables it makes are its own (dropped by its ``close()``)."""
        global _CURSORS
        other = SparkConnection.__new__(SparkConnection)
        other.__dict__.update(self.__dict__)
        other.variables = dict(self.variables)
        other._parent = self
        if self.private_cursors:
            _CURSORS += 1
            other._own = {}
            other._tag = _CURSORS
        return other

    def _target(self, name: str) -> str:
        """The view name a temporary table ``name`` made on this handle goes under."""
        if self._own is None:
            return name
        private = self._own.setdefault(name, f"{name}__cursor{self._tag}")
        return private

    def register(self, name: str, frame: pd.DataFrame) -> None:
        sdf = self.spark.createDataFrame(frame) if len(frame) else self._empty_like(frame)
        name = self._target(name)
        sdf.createOrReplaceTempView(name)
        self._views.add(name)

    def unregister(self, name: str) -> None:
        if self._own is not None and name in self._own:
            self._drop(self._own.pop(name))
            return
        self._drop(name)

    def close(self) -> None:
        if self._parent is not None:
            for private in (self._own or {}).values():
                self._drop(private)
            if self._own:
                self._own.clear()
            return
        for name in list(self._views):
            self._drop(name)
        for target in self._attached.values():  # a build that failed before DETACH
            shutil.rmtree(staging_folder(target), ignore_errors=True)
        self._attached.clear()
        if self._read_copy is not None:
            shutil.rmtree(self._read_copy, ignore_errors=True)
            self._read_copy = None

    def sql(self, text: str):
        """A Spark DataFrame of one DuckDB SELECT (values bound)."""
        if self._own:
            trees = parse_duckdb(text)
            return self.spark.sql(to_spark(self._unqualify(trees[0]), self.variables))
        return self.spark.sql(to_spark(text, self.variables))

    def execute(self, sql: str, params: list | None = None) -> _Result:
        stripped = sql.strip().rstrip(";")
        head = " ".join(stripped.split()[:3]).upper()
        if head.startswith("SET VARIABLE"):
            return self._set_variable(stripped, params or [])
        if head.startswith("SET "):
            return _Result(rows=[])  # DuckDB session settings (threads, search_path, ...)
        if head.startswith("ATTACH"):
            m = re.match(r"ATTACH\s+\?\s+AS\s+(\w+)$", stripped, re.I)
            if not m:
                raise ValueError(f"Spark engine: unsupported ATTACH (only ATTACH ? AS name): {stripped[:80]}")
            self._attached[m.group(1)] = Path(params[0])
            self._written[m.group(1)] = []
            return _Result(rows=[])
        if head.startswith("DETACH"):
            self._detach(stripped.split()[1])
            return _Result(rows=[])
        if head.startswith("DESCRIBE"):
            target = stripped[len("DESCRIBE"):].strip()
            query = target if target.upper().startswith("SELECT") else f"SELECT * FROM {target}"
            frame = self.sql(query)
            return _Result(rows=[(f.name, duckdb_type(f.dataType.simpleString())) for f in frame.schema.fields])
        trees = parse_duckdb(stripped)
        if len(trees) != 1:
            raise ValueError(f"Spark engine: one statement at a time, found {len(trees)}")
        tree = trees[0]
        if params:
            tree = _placeholders(tree, params)
        if isinstance(tree, exp.Create):
            return self._create(tree)
        if isinstance(tree, exp.Insert):
            return self._insert(tree)
        frame = self.spark.sql(to_spark(self._unqualify(tree), self.variables))
        return _Result(frame=frame)

    # -- statements -----------------------------------------------------------------------------
    def _set_variable(self, sql: str, params: list) -> _Result:
        m = re.match(r"SET\s+VARIABLE\s+(\w+)\s*=\s*(.+)$", sql, re.I | re.S)
        if not m:
            raise ValueError(f"Spark engine: unsupported SET VARIABLE: {sql[:80]}")
        name, value = m.group(1), m.group(2).strip()
        if value == "?":
            self.variables[name] = params[0]
        elif re.fullmatch(r"map\(\s*\?\s*,\s*\?\s*\)", value, re.I):
            self.variables[name] = dict(zip(params[0], params[1]))
        else:
            raise ValueError(f"Spark engine: SET VARIABLE {name} takes a bound value (?), found {value[:60]}")
        return _Result(rows=[])

    def _unqualify(self, tree: exp.Expression) -> exp.Expression:
        """``out.name`` / ``out.main.name`` (an attached output) read the table written there; a
        name this cursor made privately reads its private view."""
        own = self._own or {}
        ctes = {cte.alias for cte in tree.find_all(exp.CTE)} if own else set()

        def replace(node):
            if (own and isinstance(node, exp.Table) and node.args.get("db") is None and node.name in own
                    and node.name not in ctes):
                node = node.copy()
                node.set("this", exp.to_identifier(own[node.name]))
                return node
            if isinstance(node, exp.Table) and node.args.get("db") is not None:
                parts = [p.name for p in (node.args.get("catalog"), node.args.get("db")) if p is not None]
                if parts and (parts[0] in self._attached or parts[0] in ("memory", "checked")):
                    node = node.copy()
                    node.set("db", None)
                    node.set("catalog", None)
            return node

        return tree.transform(replace)

    def _create(self, tree: exp.Create) -> _Result:
        kind = str(tree.args.get("kind") or "").upper()
        target = tree.this
        schema_cols = None
        if isinstance(target, exp.Schema):
            schema_cols = target.expressions
            target = target.this
        table = target if isinstance(target, exp.Table) else target.find(exp.Table)
        name = table.name
        qualifier = [p.name for p in (table.args.get("catalog"), table.args.get("db")) if p is not None]
        query = tree.expression
        if schema_cols is not None and query is None:
            cols = ", ".join(f"CAST(NULL AS {c.args['kind'].sql('duckdb')}) AS {c.name}" for c in schema_cols)
            query = sqlglot.parse_one(f"SELECT {cols} WHERE false", read="duckdb")
        frame = self.spark.sql(to_spark(self._unqualify(query), self.variables))
        if qualifier and qualifier[0] in self._attached:
            self._write(qualifier[0], name, frame)
            return _Result(rows=[])
        name = self._target(name)
        self._appended.pop(name, None)
        if kind == "TABLE":
            frame = _materialize(frame)
            self._cached.pop(name, None)
            frame.createOrReplaceTempView(name)
            self._cached[name] = frame
        else:
            frame.createOrReplaceTempView(name)
        self._views.add(name)
        return _Result(rows=[])

    def _insert(self, tree: exp.Insert) -> _Result:
        target = tree.this
        table = target if isinstance(target, exp.Table) else target.find(exp.Table)
        name = (self._own or {}).get(table.name, table.name)
        new = _materialize(self.spark.sql(to_spark(self._unqualify(tree.expression), self.variables)))
        parts = self._appended.setdefault(name, [self.spark.table(name)])
        parts.append(new.toDF(*parts[0].columns))
        # One flat union of the materialized parts: each insert's query runs once, and the
        # table's plan stays a union of scans however many inserts there are.
        combined = parts[0]
        for part in parts[1:]:
            combined = combined.unionByName(part)
        combined.createOrReplaceTempView(name)
        return _Result(rows=[])

    def _write(self, alias: str, name: str, frame) -> None:
        folder = staging_folder(self._attached[alias]) / name
        if folder.exists():
            shutil.rmtree(folder)
        frame.write.parquet(str(folder))
        # Later statements of the build read the table by its name (a panel reads earlier ones).
        self.spark.read.parquet(str(folder)).createOrReplaceTempView(name)
        self._views.add(name)
        self._written[alias].append((name, folder))

    def _detach(self, alias: str) -> None:
        """Load the tables written under ``alias`` from their Parquet into the attached DuckDB file."""
        import duckdb

        target = self._attached.pop(alias)
        written = self._written.pop(alias, [])
        try:
            con = duckdb.connect(str(target))
            try:
                con.execute("SET TimeZone = 'UTC'")
                if self.settings is not None and self.settings.engine.threads:
                    con.execute(f"SET threads = {int(self.settings.engine.threads)}")
                for name, folder in written:
                    con.execute(f'CREATE TABLE "{name}" AS SELECT * FROM read_parquet(?)', [str(folder / "*.parquet")])
                con.execute("CHECKPOINT")
            finally:
                con.close()
        finally:
            for name, _ in written:
                if name in self._views and name not in self._cached:
                    self.spark.catalog.dropTempView(name)  # its Parquet goes now
                    self._views.discard(name)
            shutil.rmtree(staging_folder(target), ignore_errors=True)

    def _drop(self, name: str) -> None:
        self._cached.pop(name, None)
        self.spark.catalog.dropTempView(name)
        self._views.discard(name)

    def _empty_like(self, frame: pd.DataFrame):
        from pyspark.sql import types as T

        mapping = {"int32": T.IntegerType(), "int64": T.LongType(), "float64": T.DoubleType(), "bool": T.BooleanType()}
        fields = [T.StructField(c, mapping.get(str(frame[c].dtype), T.StringType()), True) for c in frame.columns]
        return self.spark.createDataFrame([], T.StructType(fields))

    # -- reading the export ---------------------------------------------------------------------
    def _csv_reader(self, table, header: bool):
        return (self.spark.read.option("header", str(header).lower()).option("inferSchema", "false")
                .option("sep", table.delimiter or ",").option("quote", '"').option("escape", '"')
                .option("multiLine", "false").option("mode", "PERMISSIVE")
                .option("encoding", _JAVA_CHARSETS.get(table.encoding or "utf-8", table.encoding)))

    def header_row(self, table, file: str) -> list[tuple]:
        """The first line of a CSV file as it is written (its header), as ``[(name, ...)]``."""
        rows = self._csv_reader(table, header=False).csv(str(Path(file).resolve())).limit(1).collect()
        return [tuple(rows[0])] if rows else []

    def read_files(self, table, files: list[str]) -> str:
        """Register the export files of ``table`` as a view; return the view's name.

        Columns: the file's own (all text for CSV), ``_source_file`` (the path as listed),
        ``file_index`` (0-based place in the sorted file list) and ``file_row_number`` (0-based: the row in
        its file for Parquet; for CSV the row over all files in file order, as DuckDB's rowid).
        """
        from pyspark.sql import Window
        from pyspark.sql import functions as F

        spark = self.spark
        view = f"liftlag_read_{table.name}"
        paths = [str(Path(f).resolve()) for f in files]
        numbered = spark.createDataFrame(
            pd.DataFrame({"_path": paths, "_source_file": list(files), "file_index": list(range(len(files)))}))
        if table.format == "parquet":
            reader = spark.read  # parts share one schema (mergeSchema would cost a job per read)
            base = _hive_base(self.settings, table) if table.hive_partitioning is not False else None
            if base is not None:
                reader = reader.option("basePath", str(base))
            frame = reader.parquet(*paths)
            frame = frame.select("*", F.col("_metadata.file_path").alias("_uri"),
                                 F.col("_metadata.row_index").alias("file_row_number"))
        elif table.format == "csv":
            frame = self._csv_reader(table, header=table.header).csv(paths)
            frame = frame.select("*", F.col("_metadata.file_path").alias("_uri"),
                                 F.monotonically_increasing_id().alias("_read_order"))
        else:
            raise ConfigError(f"tables.{table.name}.format = {table.format!r} cannot be read by the Spark engine; "
                              "export the table as Parquet or CSV")
        frame = frame.withColumn("_path", F.url_decode(F.regexp_replace("_uri", r"^file:(//)?", ""))).drop("_uri")
        # Spark reports each file as a URI; every one is in the list (Spark read only those).
        frame = frame.join(F.broadcast(numbered), on="_path", how="inner")
        if table.format == "csv":
            # Rows within a file keep the order they were read in (one file's splits are read in
            # offset order); CSV rows are numbered over all files in file order, as DuckDB numbers them.
            in_file = Window.partitionBy("file_index").orderBy("_read_order")
            frame = frame.withColumn("_in_file", F.row_number().over(in_file) - 1)
            counts = frame.groupBy("file_index").agg(F.count(F.lit(1)).alias("_n"))
            offsets = counts.withColumn(
                "_offset", F.coalesce(F.sum("_n").over(Window.orderBy("file_index").rowsBetween(Window.unboundedPreceding, -1)), F.lit(0)))
            frame = (frame.join(F.broadcast(offsets.select("file_index", "_offset")), on="file_index")
                     .withColumn("file_row_number", F.col("_offset") + F.col("_in_file"))
                     .withColumn("file_index", F.lit(0))
                     .drop("_read_order", "_in_file", "_offset"))
        frame = frame.drop("_path")
        frame.createOrReplaceTempView(view)
        self._views.add(view)
        return view


STAGING = "spark"


def _materialize(frame):
    """The frame computed once and kept (memory, then local disk) with its plan cut to a scan.

    Spark analyses a query's whole plan each time a view is read; the staged export's plan (the
    typed columns, the original text, the row hash) read by every check rule made the analysis
    itself the cost (minutes on a small export). A local checkpoint keeps the rows in the
    executors' block stores and truncates the plan, as a DuckDB temporary table does.
    """
    from pyspark import StorageLevel

    return frame.localCheckpoint(eager=True, storageLevel=StorageLevel.MEMORY_AND_DISK)


def staging_folder(database: Path) -> Path:
    """Where Spark writes the tables bound for a database file: ``<its folder>/spark/<its name>/``
    (the private file's name, so no two processes share one; ``workspace.remove_leftovers``
    removes those of processes that ended without cleaning up)."""
    return database.parent / STAGING / database.name


def _hive_base(settings, table) -> Path | None:
    """The folder above the partition folders: the table's path up to its first wildcard."""
    if settings is None:
        return None
    full = str(settings.resolve(table.path))
    parts = Path(full).parts
    fixed = []
    for part in parts:
        if any(ch in part for ch in "*?["):
            break
        fixed.append(part)
    base = Path(*fixed) if fixed else None
    if base is not None and base.is_file():
        base = base.parent
    return base


def open_workspace(settings, tables: list[str] | None = None, source=None) -> SparkConnection:
    """A Spark connection on the published workspace (whichever engine built it): the panels and
    checked inputs as temporary views (``checked.promotions`` reads ``promotions``), for running
    the analyses' SQL (``sql/timing``) on Spark.

    ``tables`` names the ones to make (``purchase_gaps``, ``checked.promotions``; default: all),
    ``source`` is an open read-only DuckDB connection on ``panels.duckdb`` to copy them from (one
    already checked for freshness, ``workspace.connect``; default: the file opened here). Each table is
    copied out as Parquet into a temporary folder (removed by ``close()``) and read by Spark; in
    local mode that is on this machine, on a cluster it must be a folder every executor can read
    (``TMPDIR``).
    """
    import tempfile

    import duckdb

    from .. import workspace

    local = source
    if local is None:
        panels_file = workspace.path(settings, workspace.PANELS)
        if not panels_file.exists():
            raise DataError(f"no built workspace in {settings.workspace_dir}; "
                            f"run `liftlag build -c {settings.config_path}` first")
    con = SparkConnection(settings)
    con.private_cursors = True  # DuckDB's cursors: temporary tables private to the cursor
    con._read_copy = Path(tempfile.mkdtemp(prefix="liftlag-spark-read-"))
    try:
        if local is None:
            local = duckdb.connect(str(panels_file), read_only=True)
        found = local.execute(
            "SELECT schema_name, table_name FROM duckdb_tables() WHERE database_name = current_database() "
            "AND schema_name IN ('main', 'checked') ORDER BY 1, 2").fetchall()
        wanted = None if tables is None else set(tables)
        chosen = [(schema, name) for schema, name in found
                  if wanted is None or (name if schema == "main" else f"{schema}.{name}") in wanted]
        if wanted is not None:
            missing = wanted - {name if schema == "main" else f"{schema}.{name}" for schema, name in chosen}
            if missing:
                raise DataError(f"the workspace in {settings.workspace_dir} has no table {', '.join(sorted(missing))}; "
                                f"run `liftlag build -c {settings.config_path}`")
        for schema, name in chosen:
            out = con._read_copy / f"{schema}.{name}.parquet"
            target = str(out).replace("'", "''")
            local.execute(f"COPY (SELECT * FROM \"{schema}\".\"{name}\") TO '{target}' (FORMAT parquet)")
            con.spark.read.parquet(str(out)).createOrReplaceTempView(name)
            con._views.add(name)
    except BaseException:
        con.close()
        raise
    finally:
        if source is None and local is not None:
            local.close()
    return con
