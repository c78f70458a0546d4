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
from ..passes.reduce import Reduction
from ..model.spec import Spec
from ..sql.text import Fragment, join, level_joins, names, render


def _fetch_alpha(eng: Engine, spec: Spec, d: int, m: int) -> np.ndarray:
    keys = names(spec.key_aliases(d))
    sql = render("alpha_by_code", columns=join([f"a.a{j}" for j in range(m)], ", "),
                 alpha=Fragment(f"bp_alpha_{d + 1}"), levels=Fragment(f"bp_lev_{d + 1}"), keys=keys)
    tab = eng.arrow("fetch effects", sql)
    return np.column_stack([tab.column(f"a{j}").to_numpy() for j in range(m)])


def sweep_in_engine(eng: Engine, spec: Spec, red: Reduction, keys: list[pa.Table], tol: float,
                    max_iter: int) -> Projection:
    """Alternating projections run as SQL passes (see the module docstring)."""
    k, m = len(spec.fe), len(spec.value_aliases)
    alpha = [np.zeros((len(c), m)) for c in red.counts]
    alpha[0] = red.rhs[0] / red.counts[0][:, None]
    for d in range(k):
        table = keys[d]
        for j in range(m):
            table = table.append_column(f"a{j}", pa.array(alpha[d][:, j]))
        eng.put_table(f"bp_alpha_{d + 1}", table)
    norm = np.sqrt(np.maximum(red.sumsq, np.finfo(float).tiny))
    change, sweeps = np.inf, 0
    while sweeps < max_iter:
        sweeps += 1
        moved = np.zeros(m)
        for d in range(k):
            others = [e for e in range(k) if e != d]
            wsum = "sum(w)" if spec.weights else "count(*)"
            means = [f"sum({spec.w}({v} - s.m{j}" + "".join(f" - a{e + 1}.a{j}" for e in others) + f")) / {wsum} AS a{j}"
                     for j, v in enumerate(spec.value_aliases)]
            joins = level_joins("bp_alpha", {e: spec.key_aliases(e) for e in others}, "a")
            keys_d = names(spec.key_aliases(d))
            sql = render("sweep", target=Fragment(f"bp_alpha_{d + 1}_next"), keys=keys_d, means=join(means),
                         joins=joins)
            eng.execute(f"in-engine sweep {sweeps}", sql, raw=True)
            eng.execute("swap effects", render("store_arrow", table=Fragment(f"bp_alpha_{d + 1}"),
                                                     view=Fragment(f"bp_alpha_{d + 1}_next")))
            new = _fetch_alpha(eng, spec, d, m)
            moved += (red.counts[d][:, None] * (new - alpha[d]) ** 2).sum(axis=0)
            alpha[d] = new
        change = float(np.max(np.sqrt(moved) / norm))
        if eng.on_step is not None:
            eng.on_step(f"in-engine sweep {sweeps}: change {change:.1e}")
        if change < tol:
            break
    return Projection(alpha, iterations=sweeps, change=change, converged=change < tol)
