"""Engines that run the project's SQL: DuckDB (embedded, default) or Spark; other dialects via sqlglot."""

from .duckdb import connect, quote_ident
from .transpile import DIALECTS, transpile

__all__ = ["connect", "quote_ident", "transpile", "DIALECTS", "open_engine", "open_workspace_sql"]


def open_engine(settings):
    """The connection check and build run on: DuckDB, or Spark when ``[engine] kind = "spark"``."""
    if settings is not None and getattr(settings.engine, "kind", "duckdb") == "spark":
        from .spark import SparkConnection

        return SparkConnection(settings)
    return connect(settings)


def open_workspace_sql(settings, tables):
    """The connection an analysis's SQL runs on, reading the published workspace.

    DuckDB (the default): the workspace's read-only connection (``workspace.connect``), as it is.
    With ``[engine] kind = "spark"``: a Spark connection whose views are the workspace ``tables``
    it names (``purchase_gaps``, ``checked.promotions``; a list, or a function that returns it, called
    only on Spark), copied out of that same freshness-checked
    connection as Parquet (``toolkit.engine.spark.open_workspace``); the DuckDB connection is then
    closed. Raises ``AnalysisError`` on a missing or stale workspace, ``ConfigError`` when pyspark
    or Java is missing.
    """
    from .. import workspace

    con = workspace.connect(settings)
    if getattr(settings.engine, "kind", "duckdb") != "spark":
        return con
    try:
        from .spark import open_workspace

        return open_workspace(settings, tables=tables() if callable(tables) else tables, source=con)
    finally:
        con.close()
