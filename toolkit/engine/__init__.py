"""Engines that run the project's SQL: DuckDB (embedded, default) or Spark; other dialects via sqlglot."""

from .duckdb import connect, quote_ident
from .transpile import DIALECTS, transpile

__all__ = ["connect", "quote_ident", "transpile", "DIALECTS", "open_engine"]


def open_engine(settings):
    """The connection check and build run on: DuckDB, or Spark when ``[engine] kind = "spark"``."""
    if settings is not None and getattr(settings.engine, "kind", "duckdb") == "spark":
        from .spark import SparkConnection

        return SparkConnection(settings)
    return connect(settings)
