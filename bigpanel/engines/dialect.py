"""The DuckDB-dialect statements of ``sql/*.sql``, translated for PostgreSQL and Spark SQL.

sqlglot transpiles each statement; before it writes the target dialect, the
syntax tree is adjusted where the engines differ in meaning, not just spelling:

* ``isfinite(x)`` on doubles: PostgreSQL has none for float8 and counts NaN as
  equal to NaN, so it becomes ``x NOT IN (Infinity, -Infinity, NaN)``; Spark
  gets ``NOT isnan(x) AND abs(x) <> inf``. A NULL stays NULL (not finite) in both.
* ``GROUPING(a, b, ...)``: PostgreSQL's bitmask has the SQL-standard order (the
  first argument is the most significant bit), as DuckDB's; Spark's
  ``grouping`` takes one column, its ``grouping_id(a, b, ...)`` has that order.
* ``CREATE OR REPLACE TEMP TABLE t ...``: PostgreSQL runs ``DROP TABLE IF
  EXISTS t`` then ``CREATE TEMP TABLE t ...``; for ``... AS q`` on Spark the query ``q`` is
  returned alone with ``table="t"`` and the engine materialises it (a cached
  DataFrame registered as the temp view ``t``). Temp *views* exist in both.
* ``quantile_cont(x, p)`` (linear interpolation between order statistics):
  PostgreSQL's ``percentile_cont(p) WITHIN GROUP (ORDER BY x)`` as sqlglot spells
  it; Spark's exact ``percentile(x, p)``, which interpolates alike.
* DuckDB's compensated ``fsum`` has no counterpart: both add with plain ``sum``
  (the summands are demeaned, so the totals stay small; rounding then grows
  with the row count as in any plain sum).
* ``$name`` parameters become psycopg's ``%(name)s`` (every other ``%`` doubled)
  or Spark's named ``:name`` markers.

Everything else (``covar_pop`` and the other aggregates, ``row_number() OVER (ORDER BY ...)`` with DuckDB's
NULLS LAST default, ``LIMIT`` in subqueries, casts, quoted identifiers) is
spelled by sqlglot. Statements that differ in substance (where the source
table lives, how the schema is read) are template variants
``sql/<name>.<dialect>.sql``, chosen by :meth:`Engine.render`; they are written
in portable SQL with ``$name`` parameters and pass through the same translation.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from typing import Any, Iterator

from ..errors import BigPanelError
from .base import Engine, first_line

# isfinite(x) for doubles, written in the target dialect around the column bp_arg.
_FINITE = {
    "postgres": "bp_arg NOT IN (CAST('Infinity' AS DOUBLE PRECISION), "
    "CAST('-Infinity' AS DOUBLE PRECISION), CAST('NaN' AS DOUBLE PRECISION))",
    "spark": "NOT isnan(bp_arg) AND abs(bp_arg) <> CAST('inf' AS DOUBLE)",
}

# Stands for a psycopg parameter while '%' signs are doubled (NUL never occurs in SQL text).
_MARK = "\x00"


def _sqlglot() -> Any:
    try:
        import sqlglot
    except ImportError:
        raise BigPanelError(
            "PostgreSQL and Spark need the package sqlglot: pip install 'bigpanel[postgres]' or 'bigpanel[spark]'"
        ) from None
    return sqlglot


@dataclass(frozen=True)
class Step:
    """One statement for the target engine.

    ``table`` is set (Spark only) when ``sql`` is a query to materialise as the
    temporary table ``table``.
    """

    sql: str
    table: str | None = None


@lru_cache(maxsize=512)
def translate(sql: str, dialect: str) -> tuple[Step, ...]:
    """The steps that run the DuckDB-dialect statement ``sql`` on ``dialect``."""
    sqlglot = _sqlglot()
    from sqlglot import exp
    from sqlglot.errors import ErrorLevel

    trees = [t for t in sqlglot.parse(sql, read="duckdb") if t is not None]
    if len(trees) != 1:
        raise BigPanelError(f"expected one statement, found {len(trees)}")
    tree = trees[0].transform(lambda node: _rewrite(node, dialect, exp))

    def text(node: Any) -> str:
        out = node.sql(dialect=dialect, comments=False, unsupported_level=ErrorLevel.RAISE)
        if dialect == "postgres":
            out = out.replace("%", "%%")
            out = out.replace(f"{_MARK}(", "%(").replace(f"){_MARK}", ")s")
        return out

    if not (isinstance(tree, exp.Create) and tree.kind == "TABLE" and tree.args.get("replace")):
        return (Step(text(tree)),)
    table = tree.find(exp.Table)
    if dialect == "spark":
        if not isinstance(tree.expression, exp.Query):
            raise ValueError("Spark makes temporary tables only from a query")
        return (Step(text(tree.expression), table=table.name),)
    tree.set("replace", False)
    return (Step(f"DROP TABLE IF EXISTS {text(table)}"), Step(text(tree)))


def _call(node: Any, exp: Any) -> tuple[str, list]:
    """A function call's lower-case name and arguments, whether or not sqlglot knows the function."""
    if isinstance(node, exp.Anonymous):
        return node.name.lower(), list(node.expressions)
    if isinstance(node, exp.Func):
        return node.key, list(node.expressions) or [node.this]
    return "", []


def _rewrite(node: Any, dialect: str, exp: Any) -> Any:
    if isinstance(node, exp.Placeholder):
        return exp.Var(this=f"{_MARK}({node.name}){_MARK}") if dialect == "postgres" else node
    name, args = _call(node, exp)
    if name == "isfinite" and len(args) == 1:
        check = _sqlglot().parse_one(_FINITE[dialect], read=dialect)
        check = check.transform(lambda n: args[0].copy() if isinstance(n, exp.Column) and n.name == "bp_arg" else n)
        return exp.Paren(this=check)
    if name == "fsum" and len(args) == 1:
        return exp.Sum(this=args[0].copy())
    if isinstance(node, exp.PercentileCont) and dialect == "spark":
        return exp.Anonymous(this="percentile", expressions=[node.this.copy(), node.expression.copy()])
    if name == "grouping" and dialect == "spark":
        return exp.Anonymous(this="grouping_id", expressions=[a.copy() for a in args])
    return node


@dataclass
class TranslatingEngine(Engine):
    """An :class:`Engine` whose statements are translated to its ``dialect`` before they run.

    Subclasses implement the primitives on the steps of :func:`translate`; a
    statement sqlglot cannot translate fails like a driver error, in one line.
    """

    def steps(self, sql: str) -> tuple[Step, ...]:
        """The translated steps of one DuckDB-dialect statement."""
        return translate(sql, self.dialect)

    def _stream(self, sql: str, params: dict) -> Iterator[Any]:
        yield from self._fetch(sql, params).to_batches()

    def driver_errors(self) -> tuple[type[BaseException], ...]:
        """The driver's own exception types."""
        raise NotImplementedError

    def error_types(self) -> tuple[type[BaseException], ...]:
        from sqlglot.errors import SqlglotError

        return (SqlglotError, *self.driver_errors())

    def describe_error(self, exc: BaseException) -> str:
        from sqlglot.errors import SqlglotError

        if isinstance(exc, SqlglotError):
            return f"cannot translate for {self.title}: {first_line(exc)}"
        return first_line(exc)
