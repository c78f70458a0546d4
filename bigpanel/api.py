"""``bigpanel.fit``: the thin public entry that picks the estimator and runs it."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Callable

from .errors import BigPanelError
from .estimators.base import Estimator, Request
from .estimators.between import Between
from .estimators.first_difference import FirstDifference
from .estimators.poisson import Poisson
from .estimators.random_effects import RandomEffects
from .estimators.within import Within
from .model.spec import parse_formula
from .options import MODELS, as_list
from .results.result import FitResult

ESTIMATOR_CLASSES: dict[str, type[Estimator]] = {
    cls.name: cls for cls in (Within, Between, FirstDifference, RandomEffects)
}


def fit(
    source: str,
    formula: str | None = None,
    *,
    y: str | None = None,
    x: str | Sequence[str] | None = None,
    fe: str | Sequence[str] = (),
    cluster: str | Sequence[str] | None = None,
    variance: str | None = None,
    where: str | None = None,
    table: str | None = None,
    weights: str | None = None,
    estimator: str = "within",
    model: str = "linear",
    engine: str | None = None,
    memory_limit: str | None = None,
    temp_dir: str | None = None,
    threads: int | None = None,
    delimiter: str | None = None,
    spark_master: str | None = None,
    on_step: Callable[[str], None] | None = None,
    **options: object,
) -> FitResult:
    """Fit ``y`` on ``x`` absorbing the fixed effects ``fe`` (by default the within estimator).

    ``source`` is a Parquet file, folder or glob, a CSV file (``delimiter``: its field
    separator), a DuckDB file with ``table``, or a ``postgresql://`` URL with ``table``.
    Either ``formula`` (``"y ~ x1 + x2"``, see :mod:`bigpanel.model.formula`) or ``y`` and
    ``x`` name the variables; ``fe`` lists effect columns (``"a:b"`` for one effect per pair).
    ``variance`` is ``classical`` (default), ``hc1`` or ``cr1`` (cluster-robust on ``cluster``,
    one column or several for multi-way clustering; the default when ``cluster`` is given).
    ``where`` filters rows (one SQL condition); ``weights`` names a column of analytic weights.
    Rows with a missing or non-finite used value are dropped listwise and counted.

    ``estimator`` is ``within`` (default), ``between``, ``first-difference`` or
    ``random-effects``; for the last three the one ``fe`` column is the unit. Each takes
    its own ``options`` and refuses others:

    * within: ``tol`` (1e-8) and ``max_iter`` (10,000), the projections' stopping rule;
      ``singletons`` (``drop``, default, or ``keep``); ``cell_budget`` (bytes or a size such as
      ``"12GB"``; default a quarter of the machine's memory), the Python-side budget of the
      pair tables or row codes; ``strategy`` (``"pair tables"``, ``"row codes"`` or
      ``"in-engine sweeps"``) forces the strategy, for tests and benchmarks;
    * first-difference: ``time``, the period column;
    * random-effects: ``hausman=True`` adds the Hausman and Mundlak tests; ``tol`` and
      ``max_iter`` go to the within fit it runs first.

    ``model`` is ``linear`` (default) or ``poisson``: Poisson pseudo-maximum likelihood with the
    effects absorbed (y >= 0; the within estimator only), with the within fit's options and
    ``irls_tol`` (1e-8), ``irls_max_iter`` (100) and ``exponentiate`` (effects also as exp);
    its default variance is ``hc1``.

    ``engine`` is ``duckdb`` (default for files; ``memory_limit``, ``temp_dir`` and ``threads``
    are its settings), ``postgresql`` (default for a ``postgresql://`` URL), ``spark``
    (``spark_master``, default local mode) or ``memory`` (load the used columns into numpy:
    the reference for checking the SQL path on a sample). ``on_step`` receives a line for each
    step as it starts.
    """
    if formula is not None:
        if y is not None or x is not None:
            raise BigPanelError("give either a formula or --y/--x, not both")
        y, xs = parse_formula(formula)
    else:
        xs = as_list(x)
    if not y:
        raise BigPanelError("no outcome: give a formula 'y ~ x1 + ...' or --y")
    if estimator not in ESTIMATOR_CLASSES:
        raise BigPanelError(f"unknown estimator {estimator!r}: choose one of {', '.join(ESTIMATOR_CLASSES)}")
    if model not in MODELS:
        raise BigPanelError(f"unknown model {model!r}: choose one of {', '.join(MODELS)}")
    if model == "poisson" and estimator != "within":
        raise BigPanelError(f"--model poisson is fitted with the within estimator only, not {estimator}")
    request = Request(
        source=source, y=y, x=xs, fe=as_list(fe), cluster=as_list(cluster), variance=variance, where=where,
        table=table, weights=weights, engine=engine, on_step=on_step,
        engine_options=dict(memory_limit=memory_limit, temp_dir=temp_dir, threads=threads, delimiter=delimiter,
                            spark_master=spark_master),
    )
    cls = Poisson if model == "poisson" else ESTIMATOR_CLASSES[estimator]
    return cls(request, **options).fit()
