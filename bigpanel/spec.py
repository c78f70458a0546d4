"""The model a user asks for, checked against the source's columns.

A spec maps every user column to a short internal name so that only one SQL
statement (the ``bp_filtered`` view) ever mentions user identifiers, quoted:
the outcome is ``v0``, regressor j is ``vj``, column j of effect d is ``fd_j``
and cluster column j is ``clj``.
"""

from __future__ import annotations

import difflib
import re

import duckdb
from dataclasses import dataclass

from .errors import BigPanelError
from .engine import Engine, EngineError
from .source import Source
from .sqltext import render

# the user's names of the variance estimators and the internal codes the SQL steps test for
VARIANCE_TYPES = {"classical": "iid", "hc1": "hc1", "cr1": "cluster"}
SINGLETONS = ("drop", "keep")
_NUMERIC = re.compile(
    r"^(TINYINT|SMALLINT|INTEGER|BIGINT|HUGEINT|UTINYINT|USMALLINT|UINTEGER|UBIGINT|UHUGEINT"
    r"|FLOAT|DOUBLE|REAL|DECIMAL.*|BOOLEAN)$"
)


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
    vcov: str
    where: str | None
    time: str | None = None
    weights: str | None = None

    @property
    def variance(self) -> str:
        """The user's name of the variance estimator: ``classical``, ``hc1`` or ``cr1``."""
        return next(name for name, code in VARIANCE_TYPES.items() if code == self.vcov)

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
    """Split ``y ~ x1 + x2`` into the outcome and the regressors."""
    if formula.count("~") != 1:
        raise BigPanelError(f"formula {formula!r} needs exactly one '~' (as in 'y ~ x1 + x2')")
    lhs, rhs = (part.strip() for part in formula.split("~"))
    terms = [t.strip() for t in rhs.split("+")]
    if not lhs or not terms or any(not t for t in terms):
        raise BigPanelError(f"formula {formula!r} is incomplete (write it as 'y ~ x1 + x2')")
    for term in terms:
        if term in ("0", "1", "-1"):
            raise BigPanelError(
                f"formula term {term!r}: the intercept is absorbed by the fixed effects; leave it out"
            )
    return lhs, terms


def _check_column(name: str, source: Source, role: str) -> None:
    if name in source.columns:
        return
    close = difflib.get_close_matches(name, list(source.columns), n=1, cutoff=0.6)
    hint = f"; did you mean {close[0]!r}?" if close else ""
    raise BigPanelError(f"{role} column {name!r} not found in {source.location}{hint}")


def _split_effect(term: str, source: Source) -> tuple[str, ...]:
    if term in source.columns:
        return (term,)
    return tuple(part.strip() for part in term.split(":"))


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
) -> Spec:
    """Check names, types and options; return the spec or raise a one-line error."""
    if not x:
        raise BigPanelError("no regressors: give at least one --x (or a formula 'y ~ x1 + ...')")
    if not fe:
        raise BigPanelError("no fixed effect: give at least one --fe column")
    if len(set(x)) != len(x):
        dup = next(v for v in x if x.count(v) > 1)
        raise BigPanelError(f"regressor {dup!r} is listed twice")
    if y in x:
        raise BigPanelError(f"column {y!r} is both the outcome and a regressor")
    _check_column(y, source, "outcome")
    for name in x:
        _check_column(name, source, "regressor")
    for name in [y, *x]:
        kind = source.columns[name]
        if not _NUMERIC.match(kind):
            raise BigPanelError(
                f"column {name!r} has type {kind}, not a number: it cannot be the outcome or a regressor"
            )
    effects = tuple(_split_effect(term, source) for term in fe)
    for cols in effects:
        for name in cols:
            _check_column(name, source, "fixed-effect")
    if len(set(effects)) != len(effects):
        raise BigPanelError("the same fixed effect is listed twice")
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
        _check_column(name, source, "cluster")
    if where is not None:
        where = canonical_where(where) if where.strip() else None
    if time is not None:
        _check_column(time, source, "time")
    if weights is not None:
        _check_column(weights, source, "weights")
        if not _NUMERIC.match(source.columns[weights]):
            raise BigPanelError(f"weights column {weights!r} has type {source.columns[weights]}, not a number")
    return Spec(y=y, x=tuple(x), fe=effects, cluster=tuple(cluster), vcov=VARIANCE_TYPES[variance], where=where, time=time,
                weights=weights)


def canonical_where(where: str) -> str:
    """Parse ``where`` as exactly one SQL expression and return DuckDB's own rendering of it.

    Only the re-rendered expression is ever placed in a query, so text that closes
    the parenthesis, comments out the rest or adds a statement cannot get through.
    """
    try:
        return str(duckdb.SQLExpression(where))
    except duckdb.Error as exc:
        detail = str(exc).strip().splitlines()[0]
        raise BigPanelError(f"--where {where!r} must be a single SQL expression ({detail})") from None


def check_where(eng: Engine, where: str) -> None:
    """Bind the (canonical) filter against the source's columns without reading a row."""
    try:
        eng.execute("check the filter", render("check_where", where=f"({where})"))
    except EngineError as exc:
        raise BigPanelError(f"--where {where!r} is not a valid filter: {exc.detail}") from None
