"""The project's SQL, written once in DuckDB's dialect, transpiled with sqlglot for other engines.

``transpile`` serves ``liftlag sql``; ``to_spark`` is what the Spark engine runs. Both bind
``getvariable('name')`` as literals and apply the few rewrites that keep one SQL text valid on
DuckDB and Spark (see ``spark_rewrites``); everything else is sqlglot's own translation.
"""

from __future__ import annotations

import datetime as dt
import decimal

import sqlglot
from sqlglot import exp
from sqlglot.errors import ErrorLevel

DIALECTS = ("spark", "postgres", "snowflake", "bigquery")


def _literal(value) -> exp.Expression:
    if value is None:
        return exp.Null()
    if isinstance(value, bool):
        return exp.Boolean(this=value)
    if isinstance(value, (int, float, decimal.Decimal)):
        return exp.Literal.number(value)
    if isinstance(value, dt.datetime):
        return exp.cast(exp.Literal.string(value.isoformat(sep=" ")), exp.DataType.build("TIMESTAMP", dialect="duckdb"))
    if isinstance(value, dt.date):
        return exp.cast(exp.Literal.string(value.isoformat()), exp.DataType.build("DATE"))
    if isinstance(value, (list, tuple)):
        # A list is bound as an array, never as its text (list_contains needs an array).
        return exp.Array(expressions=[_literal(v) for v in value])
    if isinstance(value, dict):
        # A value map (export value -> contract value): map(keys, values).
        return exp.Map(keys=_literal(list(value)), values=_literal(list(value.values())))
    return exp.Literal.string(str(value))


def bind_parameters(tree: exp.Expression, parameters: dict[str, object]) -> exp.Expression:
    """Replace DuckDB's ``getvariable('name')`` by the value of ``name`` as a SQL literal.

    Values come from typed settings or the contract (numbers, text, lists, maps, times), never
    from the data.
    """
    def replace(node: exp.Expression) -> exp.Expression:
        if isinstance(node, exp.Anonymous) and str(node.this).lower() == "getvariable":
            name = node.expressions[0].this if node.expressions else None
            if name not in parameters:
                raise KeyError(f"the SQL reads getvariable('{name}'), which has no value")
            return _literal(parameters[name])
        return node

    return tree.transform(replace)



_STRPTIME_TO_SPARK = {
    "%Y": "yyyy", "%y": "yy", "%m": "MM", "%-m": "M", "%d": "dd", "%-d": "d", "%H": "HH", "%-H": "H",
    "%I": "hh", "%M": "mm", "%S": "ss", "%f": "SSSSSS", "%p": "a", "%b": "MMM", "%B": "MMMM",
    "%a": "EEE", "%A": "EEEE", "%j": "DDD", "%z": "xx", "%Z": "z", "%%": "%",
}


def _convert_format(fmt: str) -> str:
    out, i = [], 0
    while i < len(fmt):
        for width in (3, 2):
            token = fmt[i:i + width]
            if token in _STRPTIME_TO_SPARK:
                out.append(_STRPTIME_TO_SPARK[token])
                i += width
                break
        else:
            ch = fmt[i]
            # Letters are pattern symbols in Spark: quote literal ones.
            out.append(f"'{ch}'" if ch.isalpha() else ch)
            i += 1
    return "".join(out)


def _folded(node: exp.Expression) -> exp.Expression:
    """A constant expression (no column) evaluated once, as a literal: Spark's percentile needs
    its quantiles as a constant, and a bound ``list_transform(range(1, k), ...)`` is one."""
    if node.find(exp.Column) is not None or isinstance(node, exp.Literal) or (
            isinstance(node, exp.Array) and all(isinstance(e, exp.Literal) for e in node.expressions)):
        return node
    import duckdb

    value = duckdb.sql("SELECT " + node.sql(dialect="duckdb")).fetchall()[0][0]
    return _literal(value)


def spark_rewrites(tree: exp.Expression) -> exp.Expression:
    """The constructs sqlglot does not carry over to Spark, rewritten to Spark's equivalents.

    - ``TRY_STRPTIME(x, '%Y-%m-%d')`` -> ``TRY_TO_TIMESTAMP(x, 'yyyy-MM-dd')``
    - ``quantile_cont(x, q)`` -> ``percentile(x, q)`` (both exact, linear interpolation; q may be a
      list, and a constant list expression is evaluated to its literal)
    - ``CAST('0x' || h AS BIGINT)`` (hex text to a number, as in the project's hash
      ``CAST('0x' || substr(md5(text), 1, 15) AS BIGINT)``) -> ``CAST(conv(h, 16, 10) AS BIGINT)``
    - ``regexp_full_match(x, p)`` -> ``x RLIKE '^(?:p)$'``
    - ``TIMESTAMPTZ`` -> ``TIMESTAMP_LTZ`` (the session's ``TIMESTAMP`` is zone-less)
    - ``UBIGINT`` -> ``BIGINT`` (Spark has no unsigned types; only DuckDB's hash() returns one)
    - ``approx_quantile(x, q)`` -> ``percentile_approx(x, q)`` (approximate on both engines, by
      different algorithms; it also takes timestamps)
    - ``nfc_normalize(x)`` -> ``liftlag_nfc(x)``, a Python UDF the Spark engine registers (Spark has no
      Unicode normalisation function)
    """
    def replace(node: exp.Expression) -> exp.Expression:
        if isinstance(node, exp.Anonymous):
            name = str(node.this).lower()
            args = node.expressions
            if name == "try_strptime" and len(args) == 2 and isinstance(args[1], exp.Literal):
                fmt = exp.Literal.string(_convert_format(args[1].this))
                return exp.Anonymous(this="TRY_TO_TIMESTAMP", expressions=[args[0], fmt])
        if isinstance(node, exp.RegexpFullMatch) and isinstance(node.expression, exp.Literal):
            return exp.RegexpLike(this=node.this, expression=exp.Literal.string(f"^(?:{node.expression.this})$"))
        if isinstance(node, exp.DataType) and node.this == exp.DataType.Type.TIMESTAMPTZ:
            # Spark's TIMESTAMP is zone-less in this session (TIMESTAMP_NTZ): a time with an offset
            # is read as an instant (TIMESTAMP_LTZ), as DuckDB's TIMESTAMPTZ, then shown in UTC.
            return exp.DataType(this=exp.DataType.Type.TIMESTAMPLTZ)
        if isinstance(node, exp.DataType) and node.this == exp.DataType.Type.UBIGINT:
            return exp.DataType.build("BIGINT")  # Spark has no unsigned types
        if isinstance(node, exp.Anonymous) and str(node.this).lower() == "nfc_normalize":
            return exp.Anonymous(this="liftlag_nfc", expressions=node.expressions)  # a UDF of the session
        if isinstance(node, exp.ApproxQuantile):
            # Approximate on both engines (by different algorithms): only for thresholds with a margin.
            return exp.Anonymous(this="PERCENTILE_APPROX", expressions=[node.this, _folded(node.args["quantile"])])
        if isinstance(node, (exp.PercentileCont, exp.Quantile)) or (
                isinstance(node, exp.Anonymous) and str(node.this).lower() == "quantile_cont"):
            value = node.this if not isinstance(node, exp.Anonymous) else node.expressions[0]
            q = node.args.get("expression") if not isinstance(node, exp.Anonymous) else node.expressions[1]
            if q is None:
                q = node.args.get("quantile")
            return exp.Anonymous(this="PERCENTILE", expressions=[value, _folded(q)])
        if isinstance(node, exp.Cast) and node.to.this == exp.DataType.Type.BIGINT:
            inner = node.this.unnest() if isinstance(node.this, exp.Paren) else node.this
            if isinstance(inner, exp.DPipe) and isinstance(inner.this, exp.Literal) and inner.this.this == "0x":
                conv = exp.Anonymous(this="conv", expressions=[inner.expression, exp.Literal.number(16), exp.Literal.number(10)])
                return exp.cast(conv, exp.DataType.build("BIGINT"))
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
    if dialect == "spark":
        trees = [spark_rewrites(t) if t is not None else None for t in trees]
    out = [t.sql(dialect=dialect, pretty=True, unsupported_level=ErrorLevel.RAISE) for t in trees if t is not None]
    return ";\n".join(out)


def parse_duckdb(sql: str) -> list[exp.Expression]:
    """The statements of a DuckDB SQL text (comments dropped)."""
    return [t for t in sqlglot.parse(sql, read="duckdb") if t is not None]


def to_spark(tree: exp.Expression | str, parameters: dict[str, object] | None = None) -> str:
    """One DuckDB statement (text or parsed) as Spark SQL, parameters bound as literals."""
    if isinstance(tree, str):
        trees = parse_duckdb(tree)
        if len(trees) != 1:
            raise ValueError(f"expected one SQL statement, found {len(trees)}")
        tree = trees[0]
    if parameters is not None:
        tree = bind_parameters(tree, parameters)
    return spark_rewrites(tree).sql(dialect="spark", unsupported_level=ErrorLevel.RAISE)
