"""``bigpanel.fit``: the data path from source to result.

source -> spec -> pass 1 (profile) -> pass 2 (group-level statistics) ->
alternating projections on the level tables -> pass 3 (demeaned cross-products)
-> slopes -> pass 4 (HC1 meat, if asked; the cluster meat comes from pass 3's per-cluster sums)
-> inference -> effects -> result.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from time import perf_counter
from typing import Callable

import numpy as np

from ..numerics.dof import count_absorbed
from ..numerics.effects import effect_tables, recover
from ..errors import BigPanelError
from .family import hausman_test, mundlak, run_family
from ..numerics.inference import Inference, infer
from .memory_backend import MemoryBackend
from ..options import ESTIMATORS, SINGLETONS, size_in_bytes
from ..passes.reduce import IN_ENGINE, ONE_WAY, PAIR_TABLES, ROW_CODES, Reduction, incomplete
from ..results.result import FitResult
from ..numerics.solve import ILL_CONDITIONED, exact_rss, solve_slopes
from ..engines.registry import ENGINES, open_session
from .sql_backend import SqlBackend
from ..model.spec import build_spec, check_where, parse_formula

FEW_CLUSTERS = 50


def as_list(value: str | Sequence[str] | None) -> list[str]:
    if value is None:
        return []
    if isinstance(value, str):
        return [value]
    return list(value)


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
    tol: float = 1e-8,
    max_iter: int = 10_000,
    singletons: str = "drop",
    memory_limit: str | None = None,
    temp_dir: str | None = None,
    threads: int | None = None,
    engine: str | None = None,
    spark_master: str | None = None,
    estimator: str = "within",
    time: str | None = None,
    hausman: bool = False,
    cell_budget: int | str | None = None,
    weights: str | None = None,
    delimiter: str | None = None,
    strategy: str | None = None,
    on_step: Callable[[str], None] | None = None,
) -> FitResult:
    """Fit ``y`` on ``x`` absorbing the fixed effects ``fe`` (within estimator).

    ``source`` is a Parquet file, folder or glob, a CSV file, or a DuckDB file with
    ``table``. Either ``formula`` (``"y ~ x1 + x2"``) or ``y`` and ``x`` name the
    variables; ``fe`` lists effect columns (``"a:b"`` for one effect per pair).
    ``variance`` is ``classical`` (default), ``hc1`` or ``cr1`` (cluster-robust on
    ``cluster``, one column or several for multi-way clustering; the default when
    ``cluster`` is given).
    Rows with a missing or non-finite used value are dropped listwise; rows alone
    in a level of any effect (singletons) are dropped unless
    ``singletons="keep"``. See :mod:`bigpanel.inference` and
    :mod:`bigpanel.dof` for the variance formulas and degrees of freedom.
    ``engine="memory"`` loads the used columns into numpy and fits the same
    model there (the reference for checking the SQL path on a sample);
    ``engine="spark"`` runs the same SQL on Spark (``spark_master``, default
    local mode); a ``postgresql://`` source runs it on PostgreSQL (see :mod:`bigpanel.engines.registry`).
    ``estimator`` is ``within`` (default), ``between``, ``first-difference`` (along
    ``time``) or ``random-effects`` (GLS, Swamy-Arora; ``hausman=True`` adds the
    test against the within fit); for those, the one ``fe`` column is the unit.
    See :mod:`bigpanel.family`. ``cell_budget`` (bytes; default a quarter of the
    machine's memory; a size such as ``"12GB"`` too, ``--python-memory`` on the command
    line) is the Python-side memory budget: the pair tables or per-row
    level codes fetched to numpy must fit it, else the projections run inside the
    engine (:mod:`bigpanel.sweeps`). The strategy is chosen from a measurement of
    the panel (:func:`bigpanel.reduce.choose_strategy`); ``strategy`` (``"pair
    tables"``, ``"row codes"`` or ``"in-engine sweeps"``) overrides the choice, for
    tests and benchmarks. ``weights`` names
    a column of analytic weights (every estimator; the weighted forms are stated
    in :mod:`bigpanel.family`): the effects are weighted level means and every
    moment is weighted; rows with a missing or non-positive weight are dropped
    and counted. ``delimiter`` is a CSV source's field separator (default comma,
    tab for .tsv).
    """
    started = perf_counter()
    if formula is not None:
        if y is not None or x is not None:
            raise BigPanelError("give either a formula or --y/--x, not both")
        y, xs = parse_formula(formula)
    else:
        xs = as_list(x)
    if not y:
        raise BigPanelError("no outcome: give a formula 'y ~ x1 + ...' or --y")
    if tol <= 0 or not np.isfinite(tol):
        raise BigPanelError(f"--tol must be a positive number, not {tol}")
    if max_iter < 0:
        raise BigPanelError(f"--max-iter must be 0 or more, not {max_iter}")
    if engine is not None and engine not in ENGINES:
        raise BigPanelError(f"unknown engine {engine!r}: choose one of {', '.join(ENGINES)}")
    if estimator not in ESTIMATORS:
        raise BigPanelError(f"unknown estimator {estimator!r}: choose one of {', '.join(ESTIMATORS)}")
    if hausman and estimator != "random-effects":
        raise BigPanelError("--hausman compares fixed and random effects: use it with --estimator random-effects")
    if singletons not in SINGLETONS:
        raise BigPanelError(f"--singletons {singletons!r}: choose one of {', '.join(SINGLETONS)}")
    drop_singletons = singletons == "drop"
    if estimator != "within":
        return _fit_family(
            estimator, source, y, xs, as_list(fe), as_list(cluster), variance, where, table, time, hausman, weights,
            engine, dict(spark_master=spark_master, memory_limit=memory_limit, temp_dir=temp_dir, threads=threads,
                         delimiter=delimiter),
            on_step, started,
        )
    if time is not None:
        raise BigPanelError("--time orders rows for --estimator first-difference; the within estimator does not use it")
    eng, src = open_session(
        source,
        table,
        engine=engine,
        spark_master=spark_master,
        memory_limit=memory_limit,
        temp_dir=temp_dir,
        threads=threads,
        on_step=on_step,
        delimiter=delimiter,
    )
    try:
        spec = build_spec(src, y, xs, as_list(fe), as_list(cluster), variance, where, weights=weights, eng=eng)
        if spec.where:
            check_where(eng, spec.where)
        back = (MemoryBackend if engine == "memory" else SqlBackend)(eng, spec, src.kind)
        first = back.start()
        budget = _budget(cell_budget)
        red = back.reduce(drop_singletons, budget, strategy)
        lost = back.incomplete() if red.n_complete < first.n_filtered else {}
        if on_step:
            on_step(f"projections ({red.strategy})")
        t0 = perf_counter()
        proj = back.project(red, tol, max_iter)
        n_comp, labels = back.components(red)
        eng.timings["projections (numpy)"] = perf_counter() - t0
        absorbed = count_absorbed([len(c) for c in red.counts], n_comp, red.nested)
        mom = back.moments(proj)
        n = mom.n
        sum_t = red.rhs[0].sum(axis=0)
        total_weight = float(red.counts[0].sum())
        slopes = solve_slopes(mom.q, total_weight, sum_t, red.sumsq)
        names_all = [spec.y, *spec.x]
        if not slopes.keep:
            raise BigPanelError(
                "every regressor is absorbed by the fixed effects or collinear: "
                + ", ".join(names_all[j] for j, _ in slopes.dropped)
            )
        slopes, rss_from = exact_rss(slopes, float(mom.q[0, 0]), back.rss)
        meat, terms = None, []
        if spec.vcov == "hc1":
            meat = back.meat_hc(slopes.keep, slopes.beta)
        elif spec.vcov == "cluster":
            terms = back.meat_cluster(slopes.keep, slopes.beta)
        inf = infer(
            slopes.beta,
            slopes.bread,
            slopes.rss,
            n,
            absorbed,
            spec.vcov,
            meat=meat,
            cluster_terms=terms,
            cluster_names=spec.cluster,
            mean_weight=total_weight / n,
        )
        fx = recover(proj, red.counts, slopes.keep, slopes.beta, first.shift, labels)
        effects = effect_tables(spec, back.level_keys, fx, red.rows)
    finally:
        eng.close()

    q = mom.q
    tss = float(red.sumsq[0] - sum_t[0] ** 2 / total_weight)
    sum_e = sum_t - sum(c @ a for c, a in zip(red.counts, proj.alpha))  # D'(t - D a), summed
    warnings: list[str] = []
    if not proj.converged and proj.iterations == 0:
        warnings.append(
            "NOT CONVERGED: no projection was run (--max-iter 0), so the fixed effects are not fully removed: these "
            "are not fixed-effects estimates (raise --max-iter)"
        )
    elif not proj.converged:
        warnings.append(
            f"NOT CONVERGED: the projections stopped after {proj.iterations} iterations with change "
            f"{proj.change:.2e} > tol {tol:.0e}; the estimates are not reliable (raise --max-iter)"
        )
    if slopes.condition > ILL_CONDITIONED:
        warnings.append(
            f"the demeaned regressors are nearly collinear (condition number {slopes.condition:.2e} of the "
            f"scaled regressors; about {max(0, int(16 - 2 * np.log10(slopes.condition)))} significant digits "
            "survive in the slopes)"
        )
    counts = {spec.cluster[t.columns[0]]: t.n_clusters for t in terms if len(t.columns) == 1}
    n_clusters = min(counts.values()) if counts else None
    for name, g in counts.items():
        if g < FEW_CLUSTERS:
            warnings.append(f"only {g} clusters in {name}: cluster-robust errors can be unreliable with few clusters")
        elif g > n / 2:
            warnings.append(
                f"{g:,} clusters in {name} for {n:,} rows: most clusters hold a single row, so the errors are "
                "close to HC1 and say little about correlation within clusters (is this the right cluster column?)"
            )
    if inf.psd_fixed:
        warnings.append(
            "the multi-way cluster variance was not positive semi-definite; its negative eigenvalues were set to zero"
        )
    fe_info = [
        {
            "name": name,
            "columns": list(cols),
            "levels": int(len(red.counts[d])),
            "parameters": int(absorbed.per_effect[d] + (1 if d == 0 else 0)),
            "nested_in_cluster": all(red.nested[d]) if spec.cluster else None,
        }
        for d, (name, cols) in enumerate(zip(spec.fe_names, spec.fe))
    ]
    return FitResult(
        outcome=spec.y,
        names=[names_all[j] for j in slopes.keep],
        coef=slopes.beta,
        **_inference_fields(inf),
        vcov_type=spec.variance,
        cluster=" x ".join(spec.cluster) or None,
        n_clusters=n_clusters,
        cluster_counts=counts,
        nobs=n,
        fe=fe_info,
        absorbed=absorbed.total,
        components=n_comp,
        r2_within=1.0 - slopes.rss / q[0, 0] if q[0, 0] > 0 else float("nan"),
        r2_full_model=1.0 - slopes.rss / tss if tss > 0 else float("nan"),
        rss=slopes.rss,
        df_resid=int(n - len(slopes.keep) - absorbed.total),
        rows={
            "source": first.n_source,
            "after_filter": first.n_filtered,
            "incomplete": {k: v for k, v in lost.items() if v},
            "dropped_incomplete": first.n_filtered - red.n_complete,
            "dropped_singletons": red.singletons,
            "used": n,
        },
        dropped=[{"name": names_all[j], "reason": why} for j, why in slopes.dropped],
        solver={
            "engine": engine if engine == "memory" else eng.name,
            "path": PATHS[red.strategy],
            "strategy": _strategy_report(red),
            "cross_products_from": back.moments_from,
            "python_budget_bytes": budget,
            "largest_python_allocation_bytes": int(back.python_bytes),
            "iterations": proj.iterations,
            "change": proj.change,
            "tol": tol,
            "converged": proj.converged,
            "condition_number": slopes.condition,
            "rss_from": rss_from,
            "max_mean_demeaned": float(np.max(np.abs(sum_e) / np.sqrt(n * np.maximum(red.sumsq, 1e-300)))),
            "raw_passes": back.raw_passes,
            "bytes_to_client": eng.bytes_to_client,
            "singleton_rounds": red.rounds,
            **({"filter": "materialised once (volatile)"} if spec.volatile_where else {}),
            "seconds": round(perf_counter() - started, 4),
        },
        effects=effects,
        source=src.location,
        where=spec.where,
        weights=spec.weights,
        warnings=warnings,
        timings=dict(back.timings),
        extras={"categorical": spec.categorical_levels},
    )


PATHS = {
    ONE_WAY: "exact one-way demeaning",
    PAIR_TABLES: "group-level statistics (pair tables)",
    ROW_CODES: "per-row level codes, largest effect eliminated exactly",
    IN_ENGINE: "in-engine sweeps (over the Python-side memory budget)",
}


def _strategy_report(red: Reduction) -> dict:
    """The strategy that ran, with the measurements and reason that chose it."""
    if red.plan is not None:
        return red.plan.to_dict()
    return {"name": red.strategy, "reason": "in-memory engine: every pair table in numpy"}


def _inference_fields(inf: Inference) -> dict:
    """The result fields that come straight from the inference step."""
    return {
        "std_error": inf.std_error, "vcov": inf.vcov, "t": inf.t, "p": inf.p, "ci_low": inf.ci_low,
        "ci_high": inf.ci_high, "df": inf.df, "small_sample": inf.small_sample, "sigma": inf.sigma,
        "f_stat": inf.f_stat, "f_df": inf.f_df, "f_p": inf.f_p, "psd_fixed": inf.psd_fixed,
    }


def _budget(cell_budget: int | str | None) -> int:
    """The Python-side memory budget in bytes: ``cell_budget`` (bytes, or a size such as ``12GB``),
    else a quarter of the machine's memory."""
    if cell_budget is None:
        return _default_budget()
    if isinstance(cell_budget, str):
        size = size_in_bytes(cell_budget)
        if size is None or size <= 0:
            raise BigPanelError(f"--python-memory {cell_budget!r} is not a size such as 12GB")
        return int(size)
    return int(cell_budget)


def _default_budget() -> int:
    """A quarter of the machine's physical memory, in bytes."""
    return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") // 4


def _fit_family(
    estimator: str,
    source: str,
    y: str,
    xs: list[str],
    fe: list[str],
    cluster: list[str],
    variance: str | None,
    where: str | None,
    table: str | None,
    time: str | None,
    hausman: bool,
    weights: str | None,
    engine: str,
    settings: dict,
    on_step: Callable[[str], None] | None,
    started: float,
) -> FitResult:
    """Between, first-difference and random-effects fits (see :mod:`bigpanel.family`)."""
    if engine == "memory":
        raise BigPanelError(f"--estimator {estimator} runs in the SQL engines only, not with --engine memory")
    within = None
    if estimator == "random-effects":
        within = fit(source, y=y, x=xs, fe=fe, where=where, table=table, singletons="keep", engine=engine,
                     weights=weights, on_step=on_step, **settings)
    eng, src = open_session(source, table, engine=engine, on_step=on_step, **settings)
    try:
        spec = build_spec(src, y, xs, fe, cluster, variance, where, time=time, weights=weights, eng=eng)
        if spec.where:
            check_where(eng, spec.where)
        fam, first = run_family(eng, spec, src.kind, estimator, within.rss / within.df_resid if within else None)
        if hausman:
            varying = [n for n in within.names if n in spec.x]
            fam.extras["mundlak"] = mundlak(eng, spec, first.shift, varying)
        sample_rows = fam.extras.pop("sample_rows")
        lost = incomplete(eng, spec) if sample_rows < first.n_filtered else {}
        passes = eng.raw_passes + (within.solver["raw_passes"] if within else 0)  # random: its within fit too
        timings = dict(eng.timings)
    finally:
        eng.close()
    extras = dict(fam.extras, categorical=spec.categorical_levels)
    warnings: list[str] = []
    if hausman and within is not None:
        extras["hausman"] = hausman_test(within, fam, spec.vcov)
    counts = {}
    if within is not None:
        counts["units"] = within.fe[0]["levels"]
    inf = fam.inf
    return FitResult(
        outcome=spec.y,
        names=fam.names,
        coef=fam.coef,
        **_inference_fields(inf),
        vcov_type=spec.variance,
        cluster=" x ".join(spec.cluster) or None,
        n_clusters=min(fam.cluster_counts.values()) if fam.cluster_counts else None,
        cluster_counts=fam.cluster_counts,
        nobs=fam.nobs,
        fe=[{"name": spec.fe_names[0], "columns": list(spec.fe[0]), "levels": extras.get("units", counts.get("units")),
             "parameters": 0, "nested_in_cluster": None, "role": "unit"}],
        absorbed=0,
        components=None,
        r2_within=float("nan"),
        r2_full_model=float("nan"),
        r2_transformed=fam.r2,
        rss=fam.rss,
        df_resid=int(fam.df_resid),
        rows={"source": first.n_source, "after_filter": first.n_filtered, "incomplete": {k: v for k, v in lost.items() if v},
              "dropped_incomplete": first.n_filtered - sample_rows, "dropped_singletons": 0, "used": fam.nobs},
        dropped=fam.dropped,
        solver={"engine": eng.name, "path": estimator, "iterations": 0, "change": 0.0, "tol": None, "converged": True,
                "condition_number": None, "raw_passes": passes, "seconds": round(perf_counter() - started, 4)},
        effects={},
        source=src.location,
        where=spec.where,
        weights=spec.weights,
        warnings=warnings,
        timings=timings,
        estimator=estimator,
        extras=extras,
    )
