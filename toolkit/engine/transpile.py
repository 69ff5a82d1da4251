"""The panel SQL, written once in DuckDB's dialect, transpiled with sqlglot for other engines."""

from __future__ import annotations

import sqlglot
from sqlglot.errors import ErrorLevel

DIALECTS = ("spark", "postgres", "snowflake", "bigquery")


def transpile(sql: str, dialect: str) -> str:
    """Transpile DuckDB SQL to ``dialect``; raises ``sqlglot.errors.ParseError`` / ``UnsupportedError``.

    ``getvariable('name')`` (DuckDB's session variables, how liftlag binds parameters) is kept as
    a function call; the engine that runs the transpiled SQL supplies those values.
    """
    statements = sqlglot.transpile(
        sql, read="duckdb", write=dialect, pretty=True, unsupported_level=ErrorLevel.RAISE
    )
    return ";\n".join(statements)
