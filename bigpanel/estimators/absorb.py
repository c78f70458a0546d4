"""Partial the fixed effects out of every value column: the within fit's passes and projections.

The steps, in order (see README, "How it scales"): the first counts and shifts; the
per-level statistics (singletons peeled) and the strategy they call for; the incomplete-row
breakdown when rows were lost; the projections; the connected components of effects 1-2
and the absorbed parameters (:mod:`bigpanel.numerics.dof`); the demeaned cross-products E'WE
of the outcome and the regressors. Estimators that need the demeaned columns (the within
fit, and those built on it) start here and go on from the backend, which still holds the
solved effects for the meat, the residual pass and the effects.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from time import perf_counter
from typing import Union

import numpy as np

from ..errors import BigPanelError
from ..numerics.dof import Absorbed, count_absorbed
from ..numerics.project import Projection
from ..options import SINGLETONS, size_in_bytes
from ..model.spec import Spec
from ..passes.moments import Moments
from ..passes.reduce import Reduction, Start
from .base import Session
from .memory_backend import MemoryBackend
from .sql_backend import SqlBackend

Backend = Union[SqlBackend, MemoryBackend]


@dataclass(frozen=True)
class Absorption:
    """The effects partialled out: the first step's counts and shifts, the reduction, the solved
    effects, the components of effects 1-2 (number and labels), the absorbed parameters, the
    demeaned cross-products, the incomplete rows per column and the Python-side budget."""

    back: Backend
    first: Start
    red: Reduction
    proj: Projection
    n_comp: int | None
    labels: np.ndarray | None
    absorbed: Absorbed
    mom: Moments
    lost: dict[str, int]
    budget: int


@dataclass(frozen=True)
class Projections:
    """The within fit's options: the stopping rule, singletons, the Python-side budget and,
    for tests and benchmarks, a forced strategy."""

    tol: float
    max_iter: int
    singletons: str
    budget: int
    strategy: str | None

    @classmethod
    def checked(cls, tol: float, max_iter: int, singletons: str, cell_budget: int | str | None,
                strategy: str | None) -> Projections:
        if tol <= 0 or not np.isfinite(tol):
            raise BigPanelError(f"--tol must be a positive number, not {tol}")
        if max_iter < 0:
            raise BigPanelError(f"--max-iter must be 0 or more, not {max_iter}")
        if singletons not in SINGLETONS:
            raise BigPanelError(f"--singletons {singletons!r}: choose one of {', '.join(SINGLETONS)}")
        return cls(tol, max_iter, singletons, budget_bytes(cell_budget), strategy)


def budget_bytes(cell_budget: int | str | None) -> int:
    """The Python-side memory budget in bytes: ``cell_budget`` (bytes, or a size such as ``12GB``),
    else a quarter of the machine's physical memory."""
    if cell_budget is None:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") // 4
    if isinstance(cell_budget, str):
        size = size_in_bytes(cell_budget)
        if size is None or size <= 0:
            raise BigPanelError(f"--python-memory {cell_budget!r} is not a size such as 12GB")
        return int(size)
    return int(cell_budget)


def least_passes(spec: Spec) -> int | None:
    """The fewest passes over the rows the steps below take on the SQL engine (the README's table
    in *How it scales*): one effect 1, or 2 with HC1 errors; two or more effects 2 (per-level
    statistics, then pair tables or row codes), or 3 with HC1 (the score pass) or CR1 (the
    per-cluster sums). A filter, singleton rounds, missing values, unsorted codes, the in-engine
    sweeps and an estimator's own passes add to it. None without effects."""
    k = len(spec.fe)
    if k == 0:
        return None
    if k == 1:
        return 2 if spec.variance == "hc1" else 1
    return 3 if spec.variance in ("hc1", "cr1") else 2


def absorb(session: Session, how: Projections, in_memory: bool, back: Backend | None = None,
           bootstrap: bool = False) -> Absorption:
    """Run the steps of the module docstring on the SQL engine, or in numpy when ``in_memory``;
    ``back`` is a backend the caller has already opened on the session (its views made);
    ``bootstrap``: the wild bootstrap follows (the SQL backend keeps what it reads)."""
    eng = session.eng
    if not in_memory:
        eng.least_passes = least_passes(session.spec)
    if back is None:
        back = (MemoryBackend(eng, session.spec, session.src.kind) if in_memory
                else SqlBackend(eng, session.spec, session.src.kind, bootstrap))
    first = back.start()
    red = back.reduce(how.singletons == "drop", how.budget, how.strategy)
    lost = back.incomplete() if red.n_complete < first.n_filtered else {}
    if eng.on_step:
        eng.on_step(f"projections ({red.strategy})")
    t0 = perf_counter()
    proj = back.project(red, how.tol, how.max_iter)
    n_comp, labels = back.components(red)
    eng.timings["projections (numpy)"] = perf_counter() - t0
    absorbed = count_absorbed([len(c) for c in red.counts], n_comp, red.nested)
    mom = back.moments(proj)
    return Absorption(back, first, red, proj, n_comp, labels, absorbed, mom, lost, how.budget)
