"""The model a user asks for, checked against the source's columns.

A spec maps every user column to a short internal name so that only one SQL
statement (the ``bp_filtered`` view) ever mentions user identifiers, quoted:
the outcome is ``v0``, regressor j is ``vj``, column j of effect d is ``fd_j``
and cluster column j is ``clj``.
"""

from __future__ import annotations

import difflib
import json
import re

import duckdb
import pyarrow as pa
from dataclasses import dataclass

from ..errors import BigPanelError
from ..engines.base import Engine, EngineError
from .formula import Factor, Term, factor_sql, parse_outcome, parse_rhs, parse_term, sql_expression, term_label
from ..engines.source import Source
from ..options import VARIANCE_TYPES
from ..sql.text import Fragment, ident, literal, render

_FLOAT = re.compile(r"^(FLOAT|DOUBLE|REAL)$")
MAX_LEVELS = 200  # a categorical regressor with more levels belongs in --fe
NUMERIC = re.compile(
    r"^(TINYINT|SMALLINT|INTEGER|BIGINT|HUGEINT|UTINYINT|USMALLINT|UINTEGER|UBIGINT|UHUGEINT"
    r"|FLOAT|DOUBLE|REAL|DECIMAL.*|BOOLEAN)$"
)
_FLOATS = ("FLOAT", "DOUBLE", "REAL")
# integer types whose values need not fit a double's 53-bit mantissa (DECIMAL keeps its fraction: cast directly)
_WIDE = re.compile(r"^(BIGINT|UBIGINT|HUGEINT|UHUGEINT)$")
_DECIMAL = re.compile(r"^DECIMAL\((\d+),\s*(\d+)\)$")
EXACT_DIGITS = 15  # a DECIMAL with more significant digits than this does not fit a double exactly


def wide_scale(kind: str) -> int | None:
    """The decimal scale of a column type wider than a double (0 for wide integers), else None."""
    if _WIDE.match(kind):
        return 0
    found = _DECIMAL.match(kind)
    if found and int(found.group(1)) > EXACT_DIGITS:
        return int(found.group(2))
    return None

# The filter is a row expression over the source's columns: these parser node classes, the
# functions below, and nothing else (no subquery, table function, parameter, lambda, star).
_NODE_CLASSES = {"COLUMN_REF", "CONSTANT", "COMPARISON", "CONJUNCTION", "BETWEEN", "OPERATOR", "CASE", "CAST",
                 "FUNCTION", "TYPE"}
_OPERATOR_TYPES = {"OPERATOR_NOT", "OPERATOR_IS_NULL", "OPERATOR_IS_NOT_NULL", "COMPARE_IN", "COMPARE_NOT_IN",
                   "OPERATOR_COALESCE", "OPERATOR_NULLIF"}
_BOOLEAN_FUNCTIONS = {"~~", "!~~", "~~*", "!~~*", "isfinite", "isnan", "isinf", "starts_with", "ends_with",
                      "contains", "prefix", "suffix", "regexp_matches"}
VOLATILE_FUNCTIONS = {"random", "now", "current_timestamp", "get_current_timestamp", "get_current_time",
                      "transaction_timestamp", "today", "uuid", "gen_random_uuid"}
DETERMINISTIC_FUNCTIONS = _BOOLEAN_FUNCTIONS | {
    "+", "-", "*", "/", "//", "%", "**", "^", "||", "abs", "round", "floor", "ceil", "ceiling", "trunc", "sign",
    "ln", "log", "log2", "log10", "exp", "sqrt", "cbrt", "power", "pow", "mod", "lower", "upper", "length",
    "strlen", "substr", "substring", "trim", "ltrim", "rtrim", "concat", "year", "month", "day", "dayofweek",
    "dayofyear", "week", "quarter", "hour", "minute", "second", "date_part", "datepart", "extract", "date_trunc",
    "datetrunc", "coalesce", "least", "greatest", "nullif", "ifnull",
}


@dataclass(frozen=True)
class Spec:
    """A checked model: ``y`` on ``x`` absorbing the effects ``fe``.

    ``fe`` holds one tuple of columns per effect; a tuple of two or more columns
    is an interaction with one level per distinct combination.
    """

    y: str
    x: tuple[str, ...]
    fe: tuple[tuple[str, ...], ...]
    cluster: tuple[str, ...]
    variance: str  # classical, hc1 or cr1
    where: str | None
    time: str | None = None
    weights: str | None = None
    float_keys: tuple[str, ...] = ()  # effect and cluster columns of a floating type (NaN/inf possible)
    wide_values: tuple[str, ...] = ()  # outcome/regressors of an integer or decimal type wider than a double
    wide_scales: tuple[int, ...] = ()  # the decimal scale of each of them (0 for integers)
    y_sql: str = ""
    x_sql: tuple[str, ...] = ()
    categorical: tuple[tuple[str, int, str], ...] = ()
    endogenous: tuple[str, ...] = ()  # regressors (labels in x) that instruments stand in for
    instruments: tuple[str, ...] = ()  # excluded instruments: the last labels of x, value columns but not regressors
    # columns an estimator's own passes read besides the model's: (internal name, SQL over quoted source columns)
    carry: tuple[tuple[str, str], ...] = ()
    # a condition over internal names that restricts the fitted sample (bp_sample) within the complete rows
    sample_where: str | None = None

    @property
    def regressors(self) -> tuple[str, ...]:
        """The regressors: ``x`` without the excluded instruments at its end."""
        return self.x[:len(self.x) - len(self.instruments)]

    @property
    def volatile_where(self) -> bool:
        """Whether the filter calls a function whose value changes between evaluations (random, now, ...)."""
        return bool(self.where) and bool(_functions(_parse_where(self.where)) & VOLATILE_FUNCTIONS)

    @property
    def value_sql(self) -> list[str]:
        """The SQL of the outcome and of each regressor over quoted source columns (``v0``, ``v1``...)."""
        return [self.y_sql or ident(self.y), *(self.x_sql or map(ident, self.x))]

    @property
    def categorical_levels(self) -> list[dict[str, object]]:
        """Each ``levels()`` term: its level count and the base level left out (JSON ``categorical``)."""
        return [{"term": term, "levels": n, "base": base} for term, n, base in self.categorical]

    @property
    def w(self) -> str:
        """The factor that weights a row's contribution in SQL: ``w * `` or nothing."""
        return "w * " if self.weights else ""

    @property
    def fe_names(self) -> list[str]:
        """Display names of the effects, ``a:b`` for interactions."""
        return [":".join(cols) for cols in self.fe]

    def key_aliases(self, d: int) -> list[str]:
        """Internal names of the columns of effect ``d`` (0-based)."""
        return [f"f{d + 1}_{j + 1}" for j in range(len(self.fe[d]))]

    @property
    def cluster_aliases(self) -> list[str]:
        """Internal names of the cluster columns: ``cl1``, ``cl2``, ..."""
        return [f"cl{j + 1}" for j in range(len(self.cluster))]

    @property
    def value_aliases(self) -> list[str]:
        """Internal names of the outcome and the regressors: ``v0`` then ``v1..vK``."""
        return [f"v{j}" for j in range(len(self.x) + 1)]


def parse_formula(formula: str) -> tuple[str, list[str]]:
    """Split ``y ~ terms`` into the outcome and the regressors' labels, the operators
    ``+ - : * ( )`` applied (see :mod:`bigpanel.model.formula`)."""
    if formula.count("~") != 1:
        raise BigPanelError(f"formula {formula!r} needs exactly one '~' (as in 'y ~ x1 + x2')")
    lhs, rhs = (part.strip() for part in formula.split("~"))
    if not lhs or not rhs:
        raise BigPanelError(f"formula {formula!r} is incomplete (write it as 'y ~ x1 + x2')")
    return parse_outcome(lhs).label, [term_label(t) for t in parse_rhs(rhs)]


def check_column(name: str, source: Source, role: str) -> None:
    if name in source.columns:
        return
    close = difflib.get_close_matches(name, list(source.columns), n=1, cutoff=0.6)
    hint = f"; did you mean {close[0]!r}?" if close else ""
    raise BigPanelError(f"{role} column {name!r} not found in {source.location}{hint}")


def _split_effect(term: str, source: Source) -> tuple[str, ...]:
    if term in source.columns:
        return (term,)
    return tuple(part.strip() for part in term.split(":"))


def _term(text: str, source: Source) -> Term:
    """A regressor given by a column name or by a term's label."""
    return (Factor("column", text),) if text in source.columns else parse_term(text)


def _check_factor(factor: Factor, source: Source, role: str, eng: Engine | None) -> None:
    """Columns exist and are numbers; an expression binds to a number (when an engine is at hand)."""
    if factor.kind == "power":
        _check_factor(parse_term(factor.arg)[0], source, role, eng)
        return
    if factor.kind in ("column", "levels") or factor.arg in source.columns:
        check_column(factor.arg, source, role)
        if factor.kind != "levels" and not NUMERIC.match(source.columns[factor.arg]):
            raise BigPanelError(
                f"column {factor.arg!r} has type {source.columns[factor.arg]}, not a number: it cannot be the "
                "outcome or a regressor (levels(column) makes indicators of a categorical column)"
            )
        return
    expression, used = sql_expression(factor.arg, source.columns)
    for name in used:
        check_column(name, source, role)
    if eng is None:
        return
    try:
        kind = eng.arrow("check a term", render("check_term", expression=Fragment(f"({expression})"))).schema[0].type
    except EngineError as exc:
        raise BigPanelError(f"term {factor.label!r} is not a valid expression: {exc.detail}") from None
    if not (pa.types.is_integer(kind) or pa.types.is_floating(kind) or pa.types.is_decimal(kind)
            or pa.types.is_boolean(kind)):
        raise BigPanelError(f"term {factor.label!r} has type {kind}, not a number")


def _check_whole_numbers(name: str, source: Source, eng: Engine | None) -> None:
    """Refuse a floating-point effect or cluster column unless every value is a whole number:
    levels that differ in the 16th digit would silently split one group in two."""
    if eng is None or name not in source.columns or not _FLOAT.match(source.columns[name]):
        return
    if eng.one(f"whole numbers in {name}", render("fractional_key", column=ident(name)), raw=True)["n"]:
        raise BigPanelError(
            f"column {name!r} ({source.columns[name]}) has values that are not whole numbers: it cannot define "
            "fixed-effect levels or clusters; round or cast it, or give an integer or text column"
        )


def _levels(eng: Engine | None, column: str, where: str | None) -> list[str]:
    """The levels of a categorical regressor under the filter, in text order (one pass over the rows)."""
    if eng is None:
        raise BigPanelError(f"levels({column}) needs the data: use it in bigpanel fit")
    if where:
        check_where(eng, where)
    sql = render("term_levels", column=ident(column), where=Fragment(f"({where})" if where else "TRUE"))
    rows = eng.arrow(f"levels of {column}", sql, {"limit": MAX_LEVELS + 1}, raw=True).column("level").to_pylist()
    if len(rows) > MAX_LEVELS:
        raise BigPanelError(f"levels({column}) has more than {MAX_LEVELS} levels: absorb it with --fe {column} instead")
    if len(rows) < 2:
        raise BigPanelError(f"levels({column}) has {len(rows)} level under the filter: nothing to compare")
    return rows


def _shown(factor: Factor) -> str:
    """A factor's name in results: a column's own name, else the factor as written."""
    return factor.arg if factor.kind == "column" else factor.label


def _term_columns(term: Term, source: Source, eng: Engine | None, where: str | None,
                  categorical: dict[str, tuple[str, int, str]], role: str = "regressor") -> list[tuple[str, str]]:
    """(label, SQL) of every column a term makes: a product over its factors, each levels()
    factor giving one indicator per level but the first."""
    columns = [("", "")]
    for f in term:
        _check_factor(f, source, role, eng)
        if f.kind == "levels":
            levels = _levels(eng, f.arg, where)
            categorical[f.arg] = (f.label, len(levels), levels[0])
            col = ident(f.arg)  # NULL stays NULL (the row is incomplete); no boolean cast, which PostgreSQL lacks
            parts = [(f"{f.arg}[{lvl}]",
                      f"CASE WHEN CAST({col} AS VARCHAR) = {literal(lvl)} THEN 1.0 WHEN {col} IS NOT NULL THEN 0.0 END")
                     for lvl in levels[1:]]
        else:
            parts = [(_shown(f), factor_sql(f, source.columns))]
        columns = [(f"{a}:{b}" if a else b, f"{sa} * CAST({sb} AS DOUBLE)" if sa else f"CAST({sb} AS DOUBLE)")
                   for a, sa in columns for b, sb in parts]
    if len(term) == 1 and term[0].kind != "levels":
        columns = [(_shown(term[0]), factor_sql(term[0], source.columns))]
    return columns


def build_spec(
    source: Source,
    y: str,
    x: list[str],
    fe: list[str],
    cluster: list[str] | None = None,
    variance: str | None = None,
    where: str | None = None,
    time: str | None = None,
    weights: str | None = None,
    *,
    eng: Engine | None = None,
    endogenous: list[str] | None = None,
    instruments: list[str] | None = None,
    regressors_required: bool = True,
) -> Spec:
    """Check names, types and options; return the spec or raise a one-line error.

    Each regressor in ``x`` is a column name or a term's label (``log(price)``,
    ``levels(region):promo``; see :mod:`bigpanel.model.formula`); it becomes one SQL
    expression over quoted source columns, or one per level for ``levels()``.
    ``eng`` binds expressions and reads the levels of categorical terms. ``endogenous``
    terms are regressors too (added after ``x`` unless listed there); ``instruments``
    become value columns after the regressors (see :func:`_instrument_columns`). An
    estimator whose regressors are optional (the event study's controls) passes
    ``regressors_required=False``.
    """
    x = list(x) + [e for e in endogenous or [] if e not in x]
    if not x and regressors_required:
        raise BigPanelError("no regressors: give at least one --x (or a formula 'y ~ x1 + ...')")
    if not fe:
        raise BigPanelError("no fixed effect: give at least one --fe column")
    if len(set(x)) != len(x):
        dup = next(v for v in x if x.count(v) > 1)
        raise BigPanelError(f"regressor {dup!r} is listed twice")
    if y in x:
        raise BigPanelError(f"column {y!r} is both the outcome and a regressor")
    outcome = _term(y, source)
    if len(outcome) != 1 or outcome[0].kind == "levels":
        raise BigPanelError(f"the outcome {y!r} must be one numeric column or expression")
    _check_factor(outcome[0], source, "outcome", eng)
    if where is not None:
        where = canonical_where(where, source.columns) if where.strip() else None
    categorical: dict[str, tuple[str, int, str]] = {}
    per_term = {name: _term_columns(_term(name, source), source, eng, where, categorical) for name in x}
    regressors = dict(col for columns in per_term.values() for col in columns)
    endogenous_labels = list(dict.fromkeys(label for name in endogenous or [] for label, _ in per_term[name]))
    extra = _instrument_columns(source, eng, where, categorical, list(regressors), y, endogenous_labels,
                                instruments or [])
    effects = tuple(_split_effect(term, source) for term in fe)
    for cols in effects:
        for name in cols:
            check_column(name, source, "fixed-effect")
    if len(set(effects)) != len(effects):
        raise BigPanelError("the same fixed effect is listed twice")
    for name in dict.fromkeys([c for cols in effects for c in cols] + list(cluster or [])):
        _check_whole_numbers(name, source, eng)
    if variance is None:
        variance = "cr1" if cluster else "classical"
    variance = variance.lower()
    if variance not in VARIANCE_TYPES:
        raise BigPanelError(f"unknown variance type {variance!r}: choose one of {', '.join(VARIANCE_TYPES)}")
    if variance == "cr1" and not cluster:
        raise BigPanelError("--variance cr1 needs a --cluster column")
    cluster = list(cluster or [])
    if cluster and variance != "cr1":
        raise BigPanelError(f"--cluster {', '.join(cluster)} conflicts with --variance {variance}: drop one of them")
    if len(set(cluster)) != len(cluster):
        raise BigPanelError("the same cluster column is listed twice")
    for name in cluster:
        check_column(name, source, "cluster")
    if time is not None:
        check_column(time, source, "time")
    if weights is not None:
        check_column(weights, source, "weights")
        if not NUMERIC.match(source.columns[weights]):
            raise BigPanelError(f"weights column {weights!r} has type {source.columns[weights]}, not a number")
    keys = [c for cols in effects for c in cols] + cluster
    regressors.update(extra)
    plain = [c for c in [y, *regressors] if c in source.columns]
    wide = {c: wide_scale(source.columns[c]) for c in plain if wide_scale(source.columns[c]) is not None}
    return Spec(y=y, x=tuple(regressors), fe=effects, cluster=tuple(cluster), variance=variance,
                where=where, time=time, weights=weights, y_sql=factor_sql(outcome[0], source.columns),
                x_sql=tuple(regressors.values()), categorical=tuple(categorical.values()),
                endogenous=tuple(endogenous_labels), instruments=tuple(extra),
                float_keys=tuple(c for c in keys if source.columns[c] in _FLOATS),
                wide_values=tuple(wide), wide_scales=tuple(wide.values()))


def _instrument_columns(source: Source, eng: Engine | None, where: str | None,
                        categorical: dict[str, tuple[str, int, str]], regressors: list[str], y: str,
                        endogenous: list[str], instruments: list[str]) -> dict[str, str]:
    """(label, SQL) of the excluded ``instruments``; one that is the outcome, a regressor (the
    ``endogenous`` labels among them) or listed twice is refused in one line."""
    extra: dict[str, str] = {}
    for name in instruments:
        for label, sql in _term_columns(_term(name, source), source, eng, where, categorical, role="instrument"):
            if label == y or name == y:
                raise BigPanelError(f"column {name!r} is both the outcome and an instrument")
            if label in endogenous:
                raise BigPanelError(f"{label!r} is both endogenous and an instrument: an endogenous regressor "
                                    "cannot instrument itself")
            if label in regressors:
                raise BigPanelError(f"{label!r} is both a regressor and an instrument: an exogenous regressor is "
                                    "its own instrument already, so list it once, as a regressor")
            if label in extra:
                raise BigPanelError(f"instrument {label!r} is listed twice")
            extra[label] = sql
    return extra


def canonical_where(where: str, columns: dict[str, str] | None = None) -> str:
    """Parse ``where`` as exactly one SQL expression and return DuckDB's own rendering of it.

    Only the re-rendered expression is ever placed in a query, so text that closes
    the parenthesis, comments out the rest or adds a statement cannot get through.
    With ``columns`` (the source's), the rendering is parsed again by DuckDB's own
    parser and walked: only references to those columns, literals, operators,
    comparisons, BETWEEN, IN lists, IS NULL, CASE, CAST and the functions of
    ``DETERMINISTIC_FUNCTIONS`` or ``VOLATILE_FUNCTIONS`` may appear, and the
    expression must be a condition (true or false), not a value.
    """
    try:
        text = str(duckdb.SQLExpression(where))
    except duckdb.Error as exc:
        detail = str(exc).strip().splitlines()[0]
        raise BigPanelError(f"--where {where!r} must be a single SQL expression ({detail})") from None
    if columns is not None:
        tree = _parse_where(text)
        _walk(tree, columns, where)
        if not _is_condition(tree, columns):
            raise BigPanelError(f"--where {where!r} is a value, not a condition: compare it (as in 'x > 0')")
    return text


def _parse_where(text: str) -> dict:
    """DuckDB's parse tree of the filter as placed in the query: ``... WHERE (text)``."""
    con = duckdb.connect(":memory:", config={"enable_external_access": False})
    try:
        raw = con.execute("SELECT json_serialize_sql($q)", {"q": f"SELECT * FROM bp_source WHERE ({text})"}).fetchone()
    finally:
        con.close()
    parsed = json.loads(raw[0])
    if parsed.get("error") or len(parsed["statements"]) != 1:
        raise BigPanelError(f"--where {text!r} must be a single SQL expression")
    return parsed["statements"][0]["node"]["where_clause"]


def _walk(node: object, columns: dict[str, str], where: str) -> None:
    """Refuse, with one line naming it, the first part of the filter outside the allow-list."""
    if isinstance(node, list):
        for item in node:
            _walk(item, columns, where)
        return
    if not isinstance(node, dict):
        return
    kind = node.get("class")
    if kind is not None:
        _check_node(node, kind, columns, where)
    for key, value in node.items():
        if key != "qualified_name":
            _walk(value, columns, where)


def _check_node(node: dict, kind: str, columns: dict[str, str], where: str) -> None:
    refuse = f"--where {where!r} is not a valid filter: "
    if kind not in _NODE_CLASSES:
        raise BigPanelError(refuse + f"{kind.lower().replace('_', ' ')} is not allowed in a row filter "
                            "(only the source's columns, literals, operators and plain functions)")
    if kind == "COLUMN_REF":
        names = node["column_names"]
        if len(names) != 1 or names[0] not in columns:
            raise BigPanelError(refuse + f"{'.'.join(names)!r} is not a column of the source")
    elif kind == "OPERATOR" and node["type"] not in _OPERATOR_TYPES:
        raise BigPanelError(refuse + f"the operator {node['type'].lower()} is not allowed in a row filter")
    elif kind == "FUNCTION":
        name = str(node["function_name"]).lower()
        plain = not node["schema"] and not node["catalog"] and not node["filter"] and not node["distinct"]
        if not plain or not (name in DETERMINISTIC_FUNCTIONS or name in VOLATILE_FUNCTIONS):
            raise BigPanelError(refuse + f"the function {node['function_name']!r} is not allowed in a row filter "
                                "(allowed: comparisons, arithmetic and plain scalar functions such as abs, ln, "
                                "lower, year, coalesce)")


def _is_condition(node: dict, columns: dict[str, str]) -> bool:
    """Whether the expression's value is true/false/NULL by its form (the outcome of a boolean type check)."""
    kind = node["class"]
    if kind in ("COMPARISON", "CONJUNCTION", "BETWEEN"):
        return True
    if kind == "OPERATOR":
        return node["type"] not in ("OPERATOR_COALESCE", "OPERATOR_NULLIF")
    if kind == "FUNCTION":
        return str(node["function_name"]).lower() in _BOOLEAN_FUNCTIONS
    if kind == "COLUMN_REF":
        return columns.get(node["column_names"][0]) == "BOOLEAN"
    if kind == "CONSTANT":
        return node.get("literal", {}).get("kind") in ("BOOLEAN", "NULL_LITERAL")
    if kind == "CASE":
        branches = [c["then_expr"] for c in node["case_checks"]] + [node["else_expr"]]
        return all(_is_condition(b, columns) for b in branches)
    if kind == "CAST":
        return node["type_expr"].get("type_name", "").upper() in ("BOOLEAN", "BOOL")
    return False


def _functions(node: object) -> set[str]:
    """Lower-case names of every function called in a parse tree."""
    if isinstance(node, list):
        return set().union(*(_functions(n) for n in node)) if node else set()
    if not isinstance(node, dict):
        return set()
    own = {str(node["function_name"]).lower()} if node.get("class") == "FUNCTION" else set()
    return own.union(*(_functions(v) for v in node.values()))


def check_where(eng: Engine, where: str) -> None:
    """Bind the (canonical) filter against the source's columns without reading a row."""
    try:
        eng.execute("check the filter", render("check_where", where=Fragment(f"({where})")))
    except EngineError as exc:
        raise BigPanelError(f"--where {where!r} is not a valid filter: {exc.detail}") from None
