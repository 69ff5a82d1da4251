"""The panel SQL, written once in DuckDB's dialect, transpiled with sqlglot for other engines."""

from __future__ import annotations

import sqlglot
from sqlglot import exp
from sqlglot.errors import ErrorLevel

DIALECTS = ("spark", "postgres", "snowflake", "bigquery")


def _literal(value) -> exp.Expression:
    if value is None:
        return exp.Null()
    if isinstance(value, bool):
        return exp.Boolean(this=value)
    if isinstance(value, (int, float)):
        return exp.Literal.number(value)
    return exp.Literal.string(str(value))


def bind_parameters(tree: exp.Expression, parameters: dict[str, object]) -> exp.Expression:
    """Replace DuckDB's ``getvariable('name')`` by the value of ``name`` as a SQL literal.

    Values come from typed settings (numbers or null), never from the data.
    """
    def replace(node: exp.Expression) -> exp.Expression:
        if isinstance(node, exp.Anonymous) and str(node.this).lower() == "getvariable":
            name = node.expressions[0].this if node.expressions else None
            if name not in parameters:
                raise KeyError(f"the SQL reads getvariable('{name}'), which has no value")
            return _literal(parameters[name])
        return node

    return tree.transform(replace)


def transpile(sql: str, dialect: str, parameters: dict[str, object] | None = None) -> str:
    """Transpile DuckDB SQL to ``dialect``; raises ``sqlglot.errors.ParseError`` / ``UnsupportedError``.

    With ``parameters``, each ``getvariable('name')`` (how liftlag binds values in DuckDB) becomes
    the literal value, so that the output runs as it is on the other engine.
    """
    trees = sqlglot.parse(sql, read="duckdb")
    if parameters is not None:
        trees = [bind_parameters(t, parameters) for t in trees]
    out = [t.sql(dialect=dialect, pretty=True, unsupported_level=ErrorLevel.RAISE) for t in trees if t is not None]
    return ";\n".join(out)
