"""The effects' normal equations with a right-hand side of our choosing, on every strategy.

The within fit solves D'D a = D't for columns t of the rows. The event study also needs
D'D d = r for right-hand sides r that are not of that form (the target weights of treated
rows summed per level: Borusyak, Jaravel and Spiess's implied weights on the untreated rows
solve such a system). The same solvers apply, given the reduction's D'D and ``r`` in place
of its level sums: conjugate gradients on the pair tables (:mod:`.project`) or on the row
codes' Schur complement (:mod:`.rowcodes`), or, when neither fits the Python-side budget,
alternating projections run as grouped passes in the engine (:func:`sweep_given`).

Stopping rule. Each column needs the squared norm of "the column before the effects are
removed" (see :mod:`.project`). For a right-hand side that is not D't of a known t we take
T = k sum_d sum_l r_dl^2 / n_dl (k effects, n_dl the rows of level l of effect d). Since
D'D <= k diag(n) (Cauchy-Schwarz over the k blocks), r'(D'D)^+ r >= T / k^2, so T is at most
k^2 times the squared norm of the solution D d: the change is measured relative to at most k
times the solution's own norm, and stricter when the solution is large.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pyarrow as pa

from ..engines.base import Engine
from ..model.spec import Spec
from ..passes.reduce import IN_ENGINE, ROW_CODES, Reduction
from ..sql.text import Fragment, join, level_joins, names, render
from .project import Projection, solve_effects
from .rowcodes import Links, solve_codes


def virtual_totals(rhs: list[np.ndarray], counts: list[np.ndarray]) -> np.ndarray:
    """T = k sum_d sum_l r_dl^2 / n_dl per column (see the module docstring)."""
    k = len(rhs)
    return k * sum(((r**2) / c[:, None]).sum(axis=0) for r, c in zip(rhs, counts))


def solve_given(eng: Engine, spec: Spec, red: Reduction, links: Links | None, keys: list[pa.Table],
                rhs: list[np.ndarray], totals: np.ndarray, tol: float, max_iter: int) -> Projection:
    """Solve D'D d = r for every column of ``rhs`` (effect d's levels x columns) on the
    reduction's strategy; ``links`` are the row codes' tables (row-codes strategy) and
    ``keys`` each effect's level keys in code order (in-engine strategy)."""
    given = replace(red, rhs=rhs, sumsq=totals)
    if red.strategy == ROW_CODES:
        return solve_codes(links, given, tol, max_iter)
    if red.strategy == IN_ENGINE:
        return sweep_given(eng, spec, given, keys, tol, max_iter)
    return solve_effects(given, tol=tol, max_iter=max_iter)


def _put(eng: Engine, d: int, keys: pa.Table, values: np.ndarray) -> None:
    table = keys
    for j in range(values.shape[1]):
        table = table.append_column(f"z{j}", pa.array(values[:, j], type=pa.float64()))
    eng.put_table(f"bp_given_{d + 1}", table)


def sweep_given(eng: Engine, spec: Spec, red: Reduction, keys: list[pa.Table], tol: float,
                max_iter: int) -> Projection:
    """Alternating projections in the engine: for each effect d in turn,
    d_d = (r_d - sum over its rows of the other effects' current values) / n_d, the sum one
    grouped pass over the fitted rows. Stops when ||D (d_new - d_old)|| / sqrt(T) < tol for
    every column (T of the module docstring, in ``red.sumsq``)."""
    k, cols = len(red.counts), red.rhs[0].shape[1]
    delta = [np.zeros((len(c), cols)) for c in red.counts]
    for d in range(k):
        _put(eng, d, keys[d], delta[d])
    norm = np.sqrt(np.maximum(red.sumsq, np.finfo(float).tiny))
    change, sweeps = np.inf, 0
    while sweeps < max_iter:
        sweeps += 1
        moved = np.zeros(cols)
        for d in range(k):
            others = [e for e in range(k) if e != d]
            sums = [f"sum({' + '.join(f'g{e + 1}.z{j}' for e in others)}) AS z{j}" for j in range(cols)]
            joins = level_joins("bp_given", {e: spec.key_aliases(e) for e in others}, "g")
            keys_d = names(spec.key_aliases(d))
            eng.execute(f"in-engine sweep {sweeps} (given right-hand sides)",
                        render("sweep", target=Fragment("bp_given_next"), keys=keys_d, means=join(sums), joins=joins),
                        raw=True)
            fetch = render("alpha_by_code", columns=join([f"a.z{j}" for j in range(cols)], ", "),
                           alpha=Fragment("bp_given_next"), levels=Fragment(f"bp_lev_{d + 1}"), keys=keys_d)
            tab = eng.arrow("fetch the sums", fetch)
            others_sum = np.column_stack([tab.column(f"z{j}").to_numpy() for j in range(cols)])
            new = (red.rhs[d] - others_sum) / red.counts[d][:, None]
            moved += (red.counts[d][:, None] * (new - delta[d]) ** 2).sum(axis=0)
            delta[d] = new
            _put(eng, d, keys[d], new)
        change = float(np.max(np.sqrt(moved) / norm))
        if eng.on_step is not None:
            eng.on_step(f"in-engine sweep {sweeps} (given right-hand sides): change {change:.1e}")
        if change < tol:
            break
    return Projection(delta, iterations=sweeps, change=change, converged=change < tol)
