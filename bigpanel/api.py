"""``bigpanel.fit``: the thin public entry that picks the estimator and runs it."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Callable

from .errors import BigPanelError
from .estimators.base import Estimator, Request
from .estimators.between import Between
from .estimators.first_difference import FirstDifference
from .estimators.instrumental import InstrumentalVariables
from .estimators.poisson import Poisson
from .estimators.random_effects import RandomEffects
from .estimators.within import Within
from .model.iv_formula import split_instrumented
from .model.spec import parse_formula
from .options import MODELS, as_list
from .results.call import call_record
from .results.event import EventResult
from .results.result import FitResult

ESTIMATOR_CLASSES: dict[str, type[Estimator]] = {
    cls.name: cls for cls in (Within, Between, FirstDifference, RandomEffects, InstrumentalVariables)
}


def fit(
    source: object,
    formula: str | None = None,
    *,
    y: str | None = None,
    x: str | Sequence[str] | None = None,
    fe: str | Sequence[str] = (),
    cluster: str | Sequence[str] | None = None,
    variance: str | None = None,
    where: str | None = None,
    table: object = None,
    weights: str | None = None,
    estimator: str = "within",
    model: str = "linear",
    engine: str | None = None,
    memory_limit: str | None = None,
    temp_dir: str | None = None,
    threads: int | None = None,
    delimiter: str | None = None,
    spark_master: str | None = None,
    allow_remote: bool = False,
    on_step: Callable[[str], None] | None = None,
    endogenous: str | Sequence[str] | None = None,
    instruments: str | Sequence[str] | None = None,
    **options: object,
) -> FitResult:
    """Fit ``y`` on ``x`` absorbing the fixed effects ``fe`` (by default the within estimator).

    ``source`` is a Parquet file, folder or glob, a CSV file (``delimiter``: its field
    separator), a DuckDB file with ``table``, or a ``postgresql://`` URL with ``table``; remote
    Parquet (``s3://``, ``gs://``, ``https://``) with ``allow_remote=True``. It may also be a
    panel the program holds: a DuckDB connection with ``table`` (a table or view name, or a
    relation of it), a DuckDB relation, a pyarrow Table or Dataset, a pandas or polars DataFrame
    (see :mod:`bigpanel.engines.inprocess`).
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
      ``max_iter`` go to the within fit it runs first;
    * instrumental-variables (chosen by giving ``endogenous`` and ``instruments``, or in the
      formula ``"y ~ x1 + p, p instrumented by z1 + z2"``): the within fit's options, and
      ``liml=True`` for LIML instead of 2SLS. ``endogenous`` terms are regressors (added to
      ``x`` when not among them); ``instruments`` are the excluded instruments.

    ``model`` is ``linear`` (default) or ``poisson``: Poisson pseudo-maximum likelihood with the
    effects absorbed (y >= 0; the within estimator only), with the within fit's options and
    ``irls_tol`` (1e-8), ``irls_max_iter`` (100) and ``exponentiate`` (effects also as exp);
    its default variance is ``hc1``.

    ``engine`` is ``duckdb`` (default for files; ``memory_limit``, ``temp_dir`` and ``threads``
    are its settings), ``postgresql`` (default for a ``postgresql://`` URL), ``spark``
    (``spark_master``, default local mode) or ``memory`` (load the used columns into numpy:
    the reference for checking the SQL path on a sample). ``on_step`` receives a line for each
    step as it starts.

    The result records every argument given here but ``on_step`` (``FitResult.call``), so that
    ``bigpanel refit`` can run the fit again from its saved JSON.
    """
    given = {name: value for name, value in locals().items() if name != "on_step"}
    y, xs, endogenous, instruments = _variables(formula, y, x, as_list(endogenous), as_list(instruments))
    if endogenous or instruments:
        if estimator not in ("within", InstrumentalVariables.name):
            raise BigPanelError(f"instruments work with the within estimator, not --estimator {estimator}")
        estimator = InstrumentalVariables.name
        options.update(endogenous=endogenous, instruments=instruments)
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
                            spark_master=spark_master, allow_remote=allow_remote or None),
    )
    cls = Poisson if model == "poisson" else ESTIMATOR_CLASSES[estimator]
    res = cls(request, **options).fit()
    res.call = call_record(given)
    return res


def _variables(formula: str | None, y: str | None, x: str | Sequence[str] | None, endogenous: list[str],
               instruments: list[str]) -> tuple[str | None, list[str], list[str], list[str]]:
    """The outcome, regressors, endogenous regressors and instruments, from the formula or the lists."""
    if formula is None:
        return y, as_list(x), endogenous, instruments
    if y is not None or x is not None:
        raise BigPanelError("give either a formula or --y/--x, not both")
    formula, named, excluded = split_instrumented(formula)
    if named and (endogenous or instruments):
        raise BigPanelError("give the instruments either in the formula or with --endogenous/--instrument, not both")
    y, xs = parse_formula(formula)
    return (y, xs, named, excluded) if named else (y, xs, endogenous, instruments)


def event(
    source: str,
    *,
    y: str,
    unit: str,
    time: str,
    first_treated: str,
    x: str | Sequence[str] | None = None,
    fe: str | Sequence[str] = (),
    cluster: str | None = None,
    horizon: str | tuple[int, int] = "-5:10",
    weights: str | None = None,
    where: str | None = None,
    table: str | None = None,
    engine: str | None = None,
    memory_limit: str | None = None,
    temp_dir: str | None = None,
    threads: int | None = None,
    delimiter: str | None = None,
    spark_master: str | None = None,
    on_step: Callable[[str], None] | None = None,
    **options: object,
) -> EventResult:
    """An event study for staggered adoption by imputation (Borusyak, Jaravel and Spiess 2024).

    ``first_treated`` holds each unit's first treated period (missing for units never treated);
    the untreated outcome ``y`` is fitted on the untreated rows with effects of ``unit`` and
    ``time`` (and the further effects ``fe``) and the controls ``x``, and imputed for the treated
    rows; the result averages the imputed effects by event time over the ``horizon`` ``"LO:HI"``
    (leads LO..-1 from the pre-trend fit on the untreated rows, event times 0..HI by imputation)
    and over every imputed row. ``weights`` makes each treated row's share in the averages
    proportional to it (the untreated fit stays unweighted). Standard errors are the paper's
    conservative ones, clustered by ``cluster`` (default the unit). ``options``: ``tol``,
    ``max_iter``, ``cell_budget`` and ``strategy`` as for :func:`fit`. The other arguments are
    those of :func:`fit`.
    """
    from .estimators.event import EventStudy

    request = Request(
        source=source, y=y, x=as_list(x), fe=as_list(fe), cluster=as_list(cluster), variance=None, where=where,
        table=table, weights=weights, engine=engine, on_step=on_step,
        engine_options=dict(memory_limit=memory_limit, temp_dir=temp_dir, threads=threads, delimiter=delimiter,
                            spark_master=spark_master),
    )
    if engine == "memory":
        raise BigPanelError("the event study runs in the SQL engines only, not with --engine memory")
    return EventStudy(request, unit=unit, time=time, first_treated=first_treated, horizon=horizon,
                      **options).fit()
