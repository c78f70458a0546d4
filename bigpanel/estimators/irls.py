"""The Poisson fit's sample and its iteratively reweighted least squares (IRLS) loop.

The sample: the within fit's listwise deletion and singleton removal (``reduce_cells``), a
check that the outcome is never negative, then rounds of one IRLS pass each at the starting
fit: a level whose outcome is zero in every row has an effect of minus infinity (the
likelihood rises without bound as it falls), so its rows are dropped; that can leave new
singletons, which are dropped in turn (when singletons are dropped), until neither is left.
Each round drops one kind, so the rows lost are counted by reason.

The loop (see :mod:`bigpanel.passes.irls` and :mod:`bigpanel.numerics.irls`): each step is a
weighted within fit of the working outcome on the regressors, warm-started from the effects
of the step before; the new slopes and effects define the next linear predictor. One pass
over the rows per step (two on the row-codes path, whose row weights change every step).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from time import perf_counter

import numpy as np
import pyarrow as pa

from ..engines.base import Engine
from ..errors import BigPanelError
from ..model.spec import Spec
from ..numerics.irls import Change, change, clear_cut, deviance, level_moments, project_step, step_reduction
from ..numerics.project import components
from ..numerics.rowcodes import Links, build_links
from ..numerics.rowcodes import components as code_components
from ..numerics.solve import Slopes, solve_slopes
from ..passes.irls import (StepSums, check_nonnegative, create_demeaned, fetch_weights, final_pass, step_pass,
                           store_state)
from ..passes.reduce import (IN_ENGINE, ONE_WAY, PAIR_TABLES, ROW_CODES, Plan, Reduction, Start,
                             choose_strategy, create_views, incomplete, level_keys, reduce_cells, start,
                             value_offsets)
from .absorb import Projections
from .base import Session

SEPARATION_SHARE = 1e-10  # a zero outcome fitted below this share of the mean outcome is flagged
WORKING_WEIGHT = "the IRLS working weight"  # what the weighted passes of the last step weigh by
ZERO_LEVELS = "outcome zero in every row of a level"


@dataclass
class Sample:
    """The fit's sample: the first step's counts and shifts, the reduction, the incomplete rows,
    each effect's level keys (code order), the sums of the first IRLS pass, the strategy, the
    nesting flags, the one-row table's values, the rows dropped by reason, the sums of p, p y,
    p y^2 and p y log y (``constants``), the starting effects ``f0``, the components of effects
    1-2 and, on the row-codes path, the largest link tables' bytes and the arrays of the rows'
    codes and weights that every step fills."""

    first: Start
    red: Reduction
    lost: dict[str, int]
    keys: list[pa.Table]
    sums: StepSums
    plan: Plan
    nested: list[list[bool]]
    coef: dict[str, float]
    dropped: dict[str, int] = field(default_factory=dict)
    zero_levels: dict[str, int] = field(default_factory=dict)
    singletons: int = 0
    rounds: int = 0
    constants: dict[str, float] = field(default_factory=dict)
    f0: list[np.ndarray] = field(default_factory=list)
    n_comp: int | None = None
    labels: np.ndarray | None = None
    link_bytes: int | None = None
    row_arrays: tuple[dict[int, np.ndarray], np.ndarray] | None = None


@dataclass
class Run:
    """The loop's outcome: effects f (linear predictor) and a (taken out of each working column),
    the slopes of the last step, its sums and the deviance at its fit, the regressors the first
    step dropped, how the steps went and where the time went."""

    f: list[np.ndarray]
    a: list[np.ndarray]
    beta: np.ndarray
    keep: list[int]
    sums: StepSums
    deviance: float = float("nan")
    dropped: list[tuple[int, str]] = field(default_factory=list)
    steps: int = 0
    converged: bool = False
    last: Change | None = None
    projection_iterations: list[int] = field(default_factory=list)
    projections_converged: bool = True
    projection_change: float = 0.0
    passes_per_step: list[int] = field(default_factory=list)
    seconds_in_numpy: float = 0.0


def working_spec(spec: Spec) -> Spec:
    """The spec the weighted passes of the last step read: weighted by the working weight ``w``."""
    return replace(spec, weights=spec.weights or WORKING_WEIGHT)


def prepare(session: Session, how: Projections) -> Sample:
    """Views, counts and shifts, the sign check, the reduction, the starting fit, then the rounds
    of the module docstring (the last round's pass is the first step's)."""
    eng, spec = session.eng, session.spec
    create_views(eng, spec, materialize=session.src.kind == "csv")
    first = start(eng, spec, session.src.kind)
    offset = float(value_offsets(eng, spec)[0])
    check_nonnegative(eng, spec, offset)
    k = len(spec.fe)
    red = reduce_cells(eng, spec, how.singletons == "drop", how.budget, IN_ENGINE if k > 1 else None)
    lost = incomplete(eng, spec) if red.n_complete < first.n_filtered else {}
    weight = float(red.counts[0].sum())
    ybar = float(first.shift[0] + red.rhs[0][:, 0].sum() / weight)
    if not ybar > 0:
        raise BigPanelError(f"the outcome {spec.y!r} is zero in every row: there is nothing to fit")
    coef = {"yo": offset, "low": float(np.log(SEPARATION_SHARE * ybar))}
    coef.update({f"b{j}": 0.0 for j in range(1, len(spec.value_aliases))})
    keys = [level_keys(eng, spec, d) for d in range(k)]
    sample = Sample(first, red, lost, keys, None, None, [], coef, {ZERO_LEVELS: 0}, {n: 0 for n in spec.fe_names})
    sample.f0 = _level_start(red, float(first.shift[0]), ybar)
    _rounds(eng, spec, sample, how)
    if sample.plan.strategy == PAIR_TABLES:  # on the row-codes path they come with the first link tables
        sample.n_comp, sample.labels = components(step_reduction(sample.sums, sample.nested, PAIR_TABLES))
    return sample


def _level_start(red: Reduction, shift: float, ybar: float) -> list[np.ndarray]:
    """The starting fit: b = 0 and the effects of the model of independent effects,
    mu = ybar prod_d (ybar_d[level] / ybar), from the level means of y (``shift`` turns the
    reduction's shifted sums into means); a level whose mean is 0 (dropped later) starts at ybar."""
    means = [r[:, 0] / c + shift for r, c in zip(red.rhs, red.counts)]
    f = [np.log(np.where(mean > 0, mean, ybar)) for mean in means]
    return [f[0]] + [fd - np.log(ybar) for fd in f[1:]]


def _plan(spec: Spec, sizes: list[int], rows: int, how: Projections) -> Plan:
    if len(sizes) == 1:
        return Plan(ONE_WAY, "one effect: exact demeaning by level means", rows)
    plan = choose_strategy(working_spec(spec), sizes, rows, how.budget, how.strategy)
    if plan.strategy == IN_ENGINE:
        raise BigPanelError(f"--model poisson needs the pair tables or row codes in Python memory ({plan.reason}); "
                            "raise --python-memory")
    return plan


def _rounds(eng: Engine, spec: Spec, sample: Sample, how: Projections) -> None:
    """One IRLS pass at the starting fit per round, dropping all-zero levels, then singletons."""
    m = len(spec.value_aliases)
    rows, pending = int(sample.red.n_obs), None
    while True:
        sample.rounds += 1
        sizes = [t.num_rows for t in sample.keys]
        sample.plan = _plan(spec, sizes, rows, how)
        store_state(eng, spec, sample.keys, sample.f0, [np.zeros((g, m)) for g in sizes],
                    sample.coef)
        pairs = _pairs(len(sizes)) if sample.plan.strategy == PAIR_TABLES else []
        sums = step_pass(eng, spec, pairs, first=True)
        now = int(sums.levels[0].rows.sum())
        if pending == ZERO_LEVELS:
            sample.dropped[ZERO_LEVELS] += rows - now
        elif pending is not None:
            sample.singletons += rows - now
        rows = now
        zero = [lv.top <= 0 for lv in sums.levels]
        single = [lv.rows == 1 for lv in sums.levels] if how.singletons == "drop" else []
        if any(z.any() for z in zero):
            pending, drop = ZERO_LEVELS, zero
            for name, z in zip(spec.fe_names, zero):
                sample.zero_levels[name] += int(z.sum())
        elif any(s.any() for s in single):
            pending, drop = "singletons", single
        else:
            sample.sums = sums
            sample.nested = [lv.nested for lv in sums.levels]
            sample.constants = {name: float(v.sum()) for name, v in sums.levels[0].constants.items()}
            return
        sample.keys = [t.filter(pa.array(~gone)) for t, gone in zip(sample.keys, drop)]
        sample.f0 = [f[~gone] for f, gone in zip(sample.f0, drop)]
        if any(t.num_rows == 0 for t in sample.keys):
            raise BigPanelError("no rows left: every level has an outcome of zero in every row or a single row")


def _pairs(k: int) -> list[tuple[int, int]]:
    return [(d, e) for d in range(k) for e in range(d + 1, k)]


def _row_weights(eng: Engine, spec: Spec, sample: Sample) -> Links:
    """The row-codes path's codes and weights of a step and the link tables built around them,
    held only for the step's projections; the arrays they fill are allocated once and kept
    between steps (writing fresh pages every step cost about a second per 400 MB on the
    benchmark machine). The first time also the components of effects 1-2, which do not depend
    on the weights."""
    rows = [lv.rows for lv in sample.sums.levels]
    sizes, n = [len(r) for r in rows], int(rows[0].sum())
    if sample.row_arrays is None:
        big = int(np.argmax(sizes))
        sample.row_arrays = ({d: np.empty(n, dtype=np.int32) for d in range(len(sizes)) if d != big}, np.empty(n))
    links = build_links(fetch_weights(eng, spec, sizes, *sample.row_arrays), rows, fixed=False)
    sample.link_bytes = max(sample.link_bytes or 0, links.nbytes)
    if sample.labels is None:
        sample.n_comp, sample.labels = code_components(links, sizes)
    return links


def irls_slopes(q: np.ndarray, sums: StepSums, keep: list[int] | None) -> tuple[Slopes, list[int]]:
    """Slopes of the working outcome on the regressors ``keep`` (all, the first time: the within
    fit's rules then drop the absorbed and collinear ones) from the cross-products ``q``."""
    cols = [0] + (keep if keep is not None else list(range(1, q.shape[0])))
    sub = np.ix_(cols, cols)
    st, tt, n = _totals(sums)
    slopes = solve_slopes(q[sub], n, st[cols], tt[cols])
    if not slopes.keep:
        raise BigPanelError("every regressor is absorbed by the fixed effects or collinear")
    mapped = replace(slopes, keep=[cols[j] for j in slopes.keep], dropped=[(cols[j], why) for j, why in slopes.dropped])
    return mapped, mapped.keep


def _totals(sums: StepSums) -> tuple[np.ndarray, np.ndarray, float]:
    """Each working column's weighted sum and sum of squares, and the weight total."""
    return sums.levels[0].sums.sum(axis=0), np.diag(sums.products), float(sums.levels[0].weight.sum())


def _first_slopes(eng: Engine, spec: Spec, sample: Sample, run: Run, q: np.ndarray) -> Slopes:
    """The first step's slopes, and which regressors stay for every step: from the level-sum
    cross-products ``q`` when the call is clear-cut (:func:`bigpanel.numerics.irls.clear_cut`),
    else from a compensated pass over the demeaned rows, as the linear fit decides."""
    st, tt, n = _totals(run.sums)
    if not clear_cut(q, tt - st**2 / n):
        store_state(eng, spec, sample.keys, run.f, run.a, sample.coef)
        create_demeaned(eng, spec)
        q = final_pass(eng, replace(spec, variance="classical")).q
    slopes, _ = irls_slopes(q, run.sums, None)
    run.dropped = slopes.dropped
    return slopes


def iterate(eng: Engine, spec: Spec, sample: Sample, how: Projections, tol: float, max_steps: int) -> Run:
    """The IRLS loop of the module docstring, up to the last step's projections (the caller then
    runs the compensated pass at that step's weights)."""
    sizes = [t.num_rows for t in sample.keys]
    m, strategy = len(spec.value_aliases), sample.plan.strategy
    run = Run(list(sample.f0), [np.zeros((g, m)) for g in sizes], np.zeros(0), [], sample.sums)
    pairs = _pairs(len(sizes)) if strategy == PAIR_TABLES else []
    final, dev_before, beta_before = max_steps <= 1, None, None
    while True:
        run.steps += 1
        passes = eng.raw_passes
        if run.steps > 1:
            run.sums = step_pass(eng, spec, pairs, first=False)
        links = _row_weights(eng, spec, sample) if strategy == ROW_CODES else None
        level_py = [lv.constants["py"] for lv in sample.sums.levels]
        run.deviance = deviance(sample.constants, level_py, run.f, run.beta, run.keep,
                                float(run.sums.levels[0].weight.sum()))
        if run.steps > 1:
            if dev_before is not None:
                run.last = change(run.deviance, dev_before, run.beta, beta_before)
                run.converged = run.last.below(tol)
            final = run.converged or run.steps >= max_steps
            dev_before, beta_before = run.deviance, run.beta
        run.passes_per_step.append(eng.raw_passes - passes)
        if eng.on_step:
            eng.on_step(f"IRLS step {run.steps}: projections ({strategy})")
        t0 = perf_counter()
        proj = project_step(step_reduction(run.sums, sample.nested, strategy), links, how.tol, how.max_iter)
        run.a = [a + da for a, da in zip(run.a, proj.alpha)]
        run.projection_iterations.append(proj.iterations)
        run.projections_converged, run.projection_change = proj.converged, proj.change
        if final:
            run.seconds_in_numpy += perf_counter() - t0
            return run
        q = level_moments(run.sums, proj.alpha)
        slopes = irls_slopes(q, run.sums, run.keep)[0] if run.keep else _first_slopes(eng, spec, sample, run, q)
        run.keep, run.beta = slopes.keep, slopes.beta
        run.f = [a[:, 0] - a[:, run.keep] @ run.beta for a in run.a]
        run.seconds_in_numpy += perf_counter() - t0
        coef = {**sample.coef, **{f"b{j}": float(b) for j, b in zip(run.keep, run.beta)}}
        store_state(eng, spec, sample.keys, run.f, run.a, coef)
