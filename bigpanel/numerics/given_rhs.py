"""The effects' normal equations with a right-hand side of our choosing, on every strategy.

The within fit solves D'D a = D't for columns t of the rows. The event study also needs
D'D d = r for right-hand sides r that are not of that form (the target weights of treated
rows summed per level: Borusyak, Jaravel and Spiess's implied weights on the untreated rows
solve such a system). The same solvers apply, given the reduction's D'D and ``r`` in place
of its level sums: conjugate gradients on the pair tables (:mod:`.project`) or on the row
codes' Schur complement (:mod:`.rowcodes`), or, when neither fits the Python-side budget,
alternating projections run as grouped passes in the engine (:func:`.sweeps.sweep_in_engine`).

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
from .project import Projection, solve_effects
from .rowcodes import Links, solve_codes
from .sweeps import sweep_in_engine


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
        return sweep_in_engine(eng, spec, given, keys, tol, max_iter, "in-engine sweep (given right-hand sides)")
    return solve_effects(given, tol=tol, max_iter=max_iter)
