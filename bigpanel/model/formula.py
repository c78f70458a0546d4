"""The formula language: which regressors a model formula asks for, each as SQL over source columns.

Terms combine by the operators of Wilkinson and Rogers (1973, "Symbolic description
of factorial models for analysis of variance", Applied Statistics 22, 392-399). A
term is a set of factors:

* ``a + b`` is the union of the terms of a and b;
* ``a:b`` is every product of a term of a with a term of b (the interaction);
* ``a*b`` is ``a + b + a:b``;
* ``a - b`` removes the terms of b;
* parentheses group, so ``(a + b):c`` is ``a:c + b:c`` and ``(a + b)*c`` is
  ``a + b + c + a:c + b:c``. ``:`` binds tighter than ``*``, which binds tighter
  than ``+`` and ``-``.

A factor is a numeric column (a name, or any name in backticks), a transform
evaluated in the engine (``log(...)`` natural logarithm, ``exp(...)``,
``sqrt(...)``, and ``x^p`` for a number p), an SQL expression of columns in braces
(``{price / shelf_m2}``), or a categorical control ``levels(col)``: one indicator
column per level of ``col`` but the first in text order (the base). The argument of a
transform is itself an SQL expression of columns (``log(units + 1)``). SQL text may
use only column references, literals, operators, CASE, CAST and the deterministic
scalar functions in :data:`SQL_FUNCTIONS` (no subqueries, no table, aggregate,
window or random functions); it is parsed with sqlglot and rendered again with every
column quoted. A value that is not finite (log of zero, sqrt of a negative) makes
the row incomplete, and the row is dropped and counted under the term's name.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from ..errors import BigPanelError
from ..sql.text import ident

# each transform's SQL and the condition on its argument a under which it is defined; outside
# it the value is NULL (the row is dropped and counted), the same on every engine (PostgreSQL
# raises an error where DuckDB returns NaN or infinity); 709 keeps exp below DOUBLE's maximum
TRANSFORMS = {"log": ("ln", "{a} > 0"), "exp": ("exp", "{a} < 709"), "sqrt": ("sqrt", "{a} >= 0")}
SQL_FUNCTIONS = frozenset({
    "abs", "ln", "log", "log10", "log2", "exp", "sqrt", "cbrt", "pow", "power", "round", "floor", "ceil",
    "ceiling", "sign", "greatest", "least", "coalesce", "nullif", "sin", "cos", "tan", "asin", "acos", "atan",
    "atan2", "mod", "if", "isnan", "isfinite",
})
SUPPORTED = (
    "column names (`odd name` in backticks), log(), exp(), sqrt(), x^p, {SQL expression}, levels(column), "
    "and the operators + - : * ( )"
)
_TOKEN = re.compile(
    r"\s*(?:(?P<name>[A-Za-z_][A-Za-z0-9_.]*)|`(?P<quoted>[^`]+)`|(?P<number>\d+(?:\.\d*)?(?:[eE][-+]?\d+)?|\.\d+)"
    r"|(?P<op>[-+*:^()~{}]))"
)


@dataclass(frozen=True)
class Factor:
    """One factor of a term: ``kind`` is ``column``, ``transform``, ``power``, ``sql`` or ``levels``.

    ``arg`` is the column name (column, levels) or the SQL text of the argument;
    ``func`` the transform's name, ``power`` the exponent of ``x^p``.
    """

    kind: str
    arg: str
    func: str = ""
    power: float = 1.0

    @property
    def label(self) -> str:
        """The factor as written in a formula (parsing the label gives the factor back)."""
        if self.kind == "column":
            return self.arg if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_.]*", self.arg) else f"`{self.arg}`"
        if self.kind == "transform":
            return f"{self.func}({self.arg})"
        if self.kind == "power":
            return f"{self.arg}^{self.power:g}"
        if self.kind == "sql":
            return "{" + self.arg + "}"
        return f"levels({self.arg})"


Term = tuple[Factor, ...]


def term_label(term: Term) -> str:
    """``a:b`` for the term with factors a and b."""
    return ":".join(f.label for f in term)


class _Parser:
    """Recursive descent over the right-hand side (grammar in the module docstring)."""

    def __init__(self, text: str) -> None:
        self.text, self.pos = text, 0

    def fail(self, what: str) -> BigPanelError:
        return BigPanelError(f"formula {self.text.strip()!r}: {what}; supported: {SUPPORTED}")

    def peek(self) -> tuple[str, str] | None:
        m = _TOKEN.match(self.text, self.pos)
        if m is None:
            rest = self.text[self.pos:].strip()
            if not rest:
                return None
            raise self.fail(f"term {rest.split()[0]!r} is not understood")
        kind = m.lastgroup or ""
        return kind, m.group(kind)

    def take(self) -> tuple[str, str] | None:
        tok = self.peek()
        if tok is not None:
            self.pos = _TOKEN.match(self.text, self.pos).end()  # type: ignore[union-attr]
        return tok

    def balanced(self, close: str) -> str:
        """Raw text up to the ``close`` that matches the bracket just taken."""
        opening = {")": "(", "}": "{"}[close]
        depth, start = 1, self.pos
        for i in range(self.pos, len(self.text)):
            ch = self.text[i]
            depth += (ch == opening) - (ch == close)
            if depth == 0:
                self.pos = i + 1
                return self.text[start:i].strip()
        raise self.fail(f"a {opening!r} is never closed")

    def sum(self) -> list[Term]:
        terms = _union([], self.product())
        while (tok := self.peek()) in (("op", "+"), ("op", "-")):
            self.take()
            right = self.product()
            terms = _union(terms, right) if tok[1] == "+" else [t for t in terms if not _contains(right, t)]
        return terms

    def product(self) -> list[Term]:
        terms = self.interaction()
        while self.peek() == ("op", "*"):
            self.take()
            right = self.interaction()
            terms = _union(_union(terms, right), _cross(terms, right))
        return terms

    def interaction(self) -> list[Term]:
        terms = self.atom()
        while self.peek() == ("op", ":"):
            self.take()
            terms = _cross(terms, self.atom())
        return terms

    def atom(self) -> list[Term]:
        tok = self.take()
        if tok is None:
            raise self.fail("a term is missing")
        kind, value = tok
        if tok == ("op", "("):
            inner = self.sum()
            if self.take() != ("op", ")"):
                raise self.fail("a '(' is never closed")
            return inner
        if tok == ("op", "{"):
            factor = Factor("sql", self.balanced("}"))
        elif kind == "name" and self.peek() == ("op", "("):
            self.take()
            factor = self.call(value, self.balanced(")"))
        elif kind in ("name", "quoted"):
            factor = Factor("column", value)
        elif kind == "number":
            raise self.fail(
                f"term {value!r}: the intercept is absorbed by the fixed effects (the other estimators add "
                "it); leave it out"
            )
        else:
            raise self.fail(f"{value!r} where a term should be")
        if self.peek() == ("op", "^"):
            self.take()
            sign = -1.0 if self.peek() == ("op", "-") and self.take() else 1.0
            exponent = self.take()
            if exponent is None or exponent[0] != "number" or factor.kind == "levels":
                raise self.fail("^ raises one numeric factor to a number, as in x^2 or x^-1")
            factor = Factor("power", factor.label, power=sign * float(exponent[1]))
        return [(factor,)]

    def call(self, name: str, arg: str) -> Factor:
        if name == "levels":
            if not arg or "(" in arg or "," in arg:
                raise self.fail(f"levels({arg}) takes one column")
            return Factor("levels", arg.strip("`"))
        if name in TRANSFORMS:
            if not arg:
                raise self.fail(f"{name}() needs an argument")
            return Factor("transform", arg, func=name)
        raise self.fail(f"function {name}() is not a formula term")


def _contains(terms: list[Term], term: Term) -> bool:
    return any(set(t) == set(term) for t in terms)


def _union(left: list[Term], right: list[Term]) -> list[Term]:
    return left + [t for t in right if not _contains(left, t)]


def _cross(left: list[Term], right: list[Term]) -> list[Term]:
    out: list[Term] = []
    for a in left:
        for b in right:
            out = _union(out, [a + tuple(f for f in b if f not in a)])
    return out


def parse_rhs(rhs: str) -> list[Term]:
    """The terms of a right-hand side, in the order they first appear."""
    parser = _Parser(rhs)
    terms = parser.sum()
    if parser.peek() is not None:
        raise parser.fail(f"{parser.text[parser.pos:].strip()!r} is left over")
    if not terms:
        raise parser.fail("no term is left")
    return terms


def parse_term(text: str) -> Term:
    """One term given by its label (``a:log(b)``); a sum of several terms is an error."""
    terms = parse_rhs(text)
    if len(terms) != 1:
        raise BigPanelError(f"{text!r} is {len(terms)} terms, not one")
    return terms[0]


def parse_outcome(lhs: str) -> Factor:
    """The left-hand side: one numeric factor (a column, a transform, a power or an SQL expression)."""
    term = parse_term(lhs)
    if len(term) != 1 or term[0].kind == "levels":
        raise BigPanelError(f"the outcome {lhs!r} must be one numeric column or expression, not {term_label(term)!r}")
    return term[0]


def sql_expression(text: str, columns: dict[str, str]) -> tuple[str, list[str]]:
    """Check SQL text against the allowed node types and render it with every column quoted.

    Returns the rendering and the columns it reads; raises a one-line error naming
    the first thing that is not allowed.
    """
    try:
        import sqlglot
        from sqlglot import exp
    except ImportError:  # pragma: no cover - sqlglot is a dependency
        raise BigPanelError("SQL terms need the package sqlglot: pip install sqlglot") from None
    allowed = (
        exp.Column, exp.Identifier, exp.Literal, exp.Boolean, exp.Null, exp.Paren, exp.Neg, exp.Not,
        exp.Add, exp.Sub, exp.Mul, exp.Div, exp.Mod, exp.IntDiv, exp.Pow, exp.EQ, exp.NEQ, exp.GT, exp.GTE,
        exp.LT, exp.LTE, exp.And, exp.Or, exp.Is, exp.Between, exp.In, exp.Case, exp.If, exp.Cast,
        exp.TryCast, exp.DataType, exp.Tuple,
    )
    try:
        tree = sqlglot.parse_one(text, read="duckdb")
    except sqlglot.errors.ParseError as exc:
        detail = str(exc).strip().splitlines()[0]
        raise BigPanelError(f"{{{text}}} is not one SQL expression ({detail})") from None
    used = []
    for node in tree.walk():
        if isinstance(node, exp.Column):
            if node.table:
                raise BigPanelError(f"{{{text}}}: name columns without a table ({node.sql()})")
            used.append(node.name)
        elif isinstance(node, exp.Func) and not isinstance(node, (exp.Case, exp.If, exp.Cast, exp.TryCast)):
            name = (node.name if isinstance(node, exp.Anonymous) else node.sql_name()).lower()
            if name not in SQL_FUNCTIONS or isinstance(node, exp.AggFunc):
                raise BigPanelError(
                    f"{{{text}}}: function {name}() is not allowed (deterministic scalar functions only: "
                    f"{', '.join(sorted(SQL_FUNCTIONS))})"
                )
        elif not isinstance(node, allowed):
            raise BigPanelError(
                f"{{{text}}}: {node.key} is not allowed in a term (only columns, literals, operators, CASE, "
                "CAST and scalar functions)"
            )
    for name in used:
        if name not in columns:
            raise BigPanelError(f"{{{text}}}: column {name!r} not found")
    return tree.sql(dialect="duckdb", identify=True), used


def factor_sql(factor: Factor, columns: dict[str, str]) -> str:
    """The SQL of a numeric factor over quoted source columns."""
    if factor.kind == "column":
        return ident(factor.arg)
    if factor.kind == "sql":
        return f"({sql_expression(factor.arg, columns)[0]})"
    if factor.kind == "power":
        base = f"CAST({factor_sql(parse_term(factor.arg)[0], columns)} AS DOUBLE)"
        p = factor.power
        defined = f"{base} > 0" if p != int(p) else f"{base} <> 0" if p < 0 else "TRUE"
        return f"CASE WHEN {defined} THEN pow({base}, {p!r}) END"
    inner = ident(factor.arg) if factor.arg in columns else sql_expression(factor.arg, columns)[0]
    func, defined = TRANSFORMS[factor.func]
    arg = f"CAST(({inner}) AS DOUBLE)"
    return f"CASE WHEN {defined.format(a=arg)} THEN {func}({arg}) END"
