"""Partial the fixed effects out of every column, on group-level statistics.

For a value column v (shifted by its mean) and dummy matrices D = [D_1 .. D_k],
the effects solve the normal equations D'D a = D'v. D'D is known from the
reduction alone: its diagonal blocks are the row counts per level and its
off-diagonal blocks the sparse counts per pair of levels. The iteration is
alternating projections (block Gauss-Seidel on the effects: each effect in turn
set to the level mean of what the others leave), run forward and then backward
as a symmetric sweep, and accelerated by using that sweep as the preconditioner
of conjugate gradients. All value columns iterate together; no raw row is read.

Convergence: the change of the demeaned column in an iteration, ||D (a_t+1 - a_t)||,
relative to the norm of the demeaned column itself, must fall below ``tol``. The
norm is known from the level statistics as ||t||^2 - a'D't - a'r (t the shifted
column, r the residual of the normal equations); it is floored at 1e-4 ||t|| so
that a column the effects absorb entirely still converges.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy.sparse.csgraph import connected_components
from scipy import sparse

from ..passes.reduce import Reduction


@dataclass(frozen=True)
class Projection:
    """Solved effects per dimension (levels x columns) and how the solve went."""

    alpha: list[np.ndarray]
    iterations: int
    change: float
    converged: bool


class _System:
    """The operator D'D and the symmetric alternating-projection sweep."""

    def __init__(self, red: Reduction) -> None:
        self.counts = red.counts
        self.k = len(red.counts)
        self.block: dict[tuple[int, int], sparse.csr_matrix] = {}
        for (d, e), mat in red.cross.items():
            self.block[(d, e)] = mat
            self.block[(e, d)] = mat.T.tocsr()
        self.sizes = [len(c) for c in red.counts]
        self.offsets = np.concatenate([[0], np.cumsum(self.sizes)])

    def split(self, vec: np.ndarray) -> list[np.ndarray]:
        return [vec[self.offsets[d] : self.offsets[d + 1]] for d in range(self.k)]

    def matvec(self, vec: np.ndarray) -> np.ndarray:
        parts = self.split(vec)
        out = []
        for d in range(self.k):
            acc = self.counts[d][:, None] * parts[d]
            for e in range(self.k):
                if e != d:
                    acc = acc + self.block[(d, e)] @ parts[e]
            out.append(acc)
        return np.vstack(out)

    def sweep(self, res: np.ndarray) -> np.ndarray:
        """Apply (Δ + L')^-1 Δ (Δ + L)^-1: a forward then a backward projection sweep."""
        r = self.split(res)
        z: list[np.ndarray | None] = [None] * self.k
        for d in range(self.k):
            acc = r[d].copy()
            for e in range(d):
                acc -= self.block[(d, e)] @ z[e]
            z[d] = acc / self.counts[d][:, None]
        u: list[np.ndarray | None] = [None] * self.k
        for d in reversed(range(self.k)):
            acc = self.counts[d][:, None] * z[d]
            for e in range(d + 1, self.k):
                acc -= self.block[(d, e)] @ u[e]
            u[d] = acc / self.counts[d][:, None]
        return np.vstack(u)


FLOOR = 1e-4


def conjugate_gradients(
    apply: Callable[[np.ndarray], np.ndarray],
    precondition: Callable[[np.ndarray], np.ndarray],
    b: np.ndarray,
    total: np.ndarray,
    tol: float,
    max_iter: int,
) -> tuple[np.ndarray, int, float, bool]:
    """Preconditioned conjugate gradients on A x = b for every column of ``b`` at once.

    ``apply`` is A (symmetric positive semi-definite: a normal-equations matrix of
    dummies, or a Schur complement of one), ``precondition`` an approximation of
    A^-1. ``total[j]`` is the squared norm of column j's response before the effects
    are removed (so that ||demeaned||^2 = total - x'b - x'r, r = b - A x); the
    stopping rule of the module docstring applies per column. Returns the solution,
    the iterations, the largest final change and whether every column converged.
    """
    m = b.shape[1]
    total = np.maximum(total, np.finfo(float).tiny)
    x = np.zeros_like(b)
    r = b.copy()
    z = precondition(r)
    p = z.copy()
    rz = np.einsum("ij,ij->j", r, z)
    active = np.ones(m, dtype=bool)
    change = np.zeros(m)
    it = 0
    while active.any() and it < max_iter:
        it += 1
        q = apply(p)
        pq = np.einsum("ij,ij->j", p, q)
        step = np.where(active & (pq > 0), rz / np.where(pq > 0, pq, 1.0), 0.0)
        x += p * step
        r -= q * step
        demeaned = total - np.einsum("ij,ij->j", x, b) - np.einsum("ij,ij->j", x, r)
        norm = np.sqrt(np.maximum(demeaned, FLOOR**2 * total))
        moved = np.abs(step) * np.sqrt(np.maximum(pq, 0.0)) / norm
        change = np.where(active, moved, change)
        active &= (moved >= tol) & (pq > 0)
        z = precondition(r)
        rz_new = np.einsum("ij,ij->j", r, z)
        beta = np.where(active & (rz != 0), rz_new / np.where(rz != 0, rz, 1.0), 0.0)
        p = z + p * beta
        rz = rz_new
    return x, it, float(change.max()), not active.any()


def solve_effects(red: Reduction, tol: float = 1e-8, max_iter: int = 10_000) -> Projection:
    """Effects of every dimension for every value column (one column per variable).

    The stopping rule is stated in the module docstring. One effect needs no
    iteration: a = level sums / counts.
    """
    if len(red.counts) == 1:
        return Projection([red.rhs[0] / red.counts[0][:, None]], 0, 0.0, True)
    system = _System(red)
    x, it, change, converged = conjugate_gradients(
        system.matvec, system.sweep, np.vstack(red.rhs), red.sumsq, tol, max_iter
    )
    return Projection(system.split(x), it, change, converged)


def normal_times(red: Reduction, parts: list[np.ndarray]) -> list[np.ndarray]:
    """D'WD times the effects ``parts`` (one array of levels x columns per effect), on the pair tables."""
    system = _System(red)
    return system.split(system.matvec(np.vstack(parts)))


def components(red: Reduction) -> tuple[int, np.ndarray]:
    """Connected components of the graph linking levels of effects 1 and 2.

    Returns the number of components and, for each level of effect 1 then
    effect 2, its component label.
    """
    n1, n2 = (len(c) for c in red.counts[:2])
    link = red.cross[(0, 1)]
    graph = sparse.bmat([[sparse.csr_matrix((n1, n1)), link], [link.T, sparse.csr_matrix((n2, n2))]], format="csr")
    n_comp, labels = connected_components(graph, directed=False)
    return int(n_comp), labels
