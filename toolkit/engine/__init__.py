"""Engines that run the project's SQL: DuckDB (embedded, default); other dialects via sqlglot."""

from .duckdb import connect, quote_ident
from .transpile import DIALECTS, transpile

__all__ = ["connect", "quote_ident", "transpile", "DIALECTS"]
