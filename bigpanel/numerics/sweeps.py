"""The in-engine path for effects whose pair tables are too big to fetch.

When the cells of the reduction (one per distinct pair of levels) would not fit
the memory budget, the projections run inside the engine: each sweep sets every
dimension's effects, in turn, to the level means of what the other dimensions'
current effects leave (alternating projections, plain Gauss-Seidel), one
grouped pass per dimension. Only the level tables travel to numpy, to measure
the change: ||D (a_t+1 - a_t)|| per column, relative to the shifted column's
norm ||t||, must fall below ``tol``. This path reads the rows k times per sweep;
the report says that it ran and how many sweeps it took.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from ..engines.base import Engine
from .project import Projection
from ..passes.reduce import Reduction, level_table
from ..model.spec import Spec
from ..sql.text import Fragment, join, level_joins, names, render


def _put(eng: Engine, d: int, keys: pa.Table, values: np.ndarray) -> None:
    """Effect d's current values as ``bp_sweep_<d+1>`` (its level keys, then z0, z1, ...)."""
    table = keys
    for j in range(values.shape[1]):
        table = table.append_column(f"z{j}", pa.array(values[:, j], type=pa.float64()))
    eng.put_table(f"bp_sweep_{d + 1}", table)


def _others(eng: Engine, spec: Spec, d: int, k: int, cols: int, label: str) -> np.ndarray:
    """One grouped pass: per level of effect d (code order), the weighted sum over its rows of
    the other effects' current values, sum w (sum_{e != d} a_e), for every column."""
    others = [e for e in range(k) if e != d]
    sums = [f"sum({spec.w}({' + '.join(f'a{e + 1}.z{j}' for e in others)})) AS z{j}" for j in range(cols)]
    keys_d = names(spec.key_aliases(d))
    eng.execute(label, render("sweep", target=Fragment("bp_sweep_next"), keys=keys_d, means=join(sums),
                              joins=level_joins("bp_sweep", {e: spec.key_aliases(e) for e in others}, "a")),
                raw=True)
    tab = eng.arrow("fetch the sums", render("alpha_by_code", columns=join([f"a.z{j}" for j in range(cols)], ", "),
                                             alpha=Fragment("bp_sweep_next"), levels=level_table(d),
                                             keys=keys_d))
    return np.column_stack([tab.column(f"z{j}").to_numpy() for j in range(cols)])


def sweep_in_engine(eng: Engine, spec: Spec, red: Reduction, keys: list[pa.Table], tol: float,
                    max_iter: int, label: str = "in-engine sweep") -> Projection:
    """Alternating projections run as SQL passes (see the module docstring): for each effect d in
    turn, a_d = (r_d - sum over its rows of w times the other effects' current values) / n_d,
    with r_d = ``red.rhs[d]`` (the level sums D_d'Wt of the shifted columns, or any right-hand
    side: :mod:`.given_rhs`) and n_d = ``red.counts[d]``; the sum is one grouped pass. ``keys``
    holds each effect's level keys in code order. Stops when ||D (a_new - a_old)|| / sqrt(T) <
    ``tol`` for every column, T the column's squared norm in ``red.sumsq``."""
    k, cols = len(red.counts), red.rhs[0].shape[1]
    alpha = [np.zeros((len(c), cols)) for c in red.counts]
    for d in range(k):
        _put(eng, d, keys[d], alpha[d])
    norm = np.sqrt(np.maximum(red.sumsq, np.finfo(float).tiny))
    change, sweeps = np.inf, 0
    while sweeps < max_iter:
        sweeps += 1
        moved = np.zeros(cols)
        for d in range(k):
            new = (red.rhs[d] - _others(eng, spec, d, k, cols, f"{label} {sweeps}")) / red.counts[d][:, None]
            moved += (red.counts[d][:, None] * (new - alpha[d]) ** 2).sum(axis=0)
            alpha[d] = new
            _put(eng, d, keys[d], new)
        change = float(np.max(np.sqrt(moved) / norm))
        if eng.on_step is not None:
            eng.on_step(f"{label} {sweeps}: change {change:.1e}")
        if change < tol:
            break
    return Projection(alpha, iterations=sweeps, change=change, converged=change < tol)
