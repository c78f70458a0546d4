"""Multi-way effects from per-row level codes, with the largest effect eliminated exactly.

When pairs of levels barely compress (a unit x period panel with one row per
cell), the normal equations D'WD a = D'Wt of the effects are solved from each
row's integer level codes instead of pair tables. Let B be the effect with the
most levels, s the others, n_B the (weighted) row counts of B's levels,
C_e = D_B'W D_e the B x e table of (weighted) rows per pair of levels, and
P_ef = D_e'W D_f for two other effects. Then, exactly,

    a_B = (D_B'Wt - sum_e C_e a_e) / n_B
    S a_s = r_s,  S = diag(n_s) + [P_ef] - C' diag(1/n_B) C,  r_s = D_s'Wt - C' (D_B'Wt / n_B),

where S is the Schur complement of B's block: the normal equations of the
other effects once B is partialled out. S is singular (a constant added to an
effect's levels in one connected component of its graph with B is absorbed by
B), so one level per such component is held at zero; without that, rounding in
r_s would let the solution drift along the null space and lose digits. Conjugate gradients preconditioned by
the diagonal of S (Jacobi) solve it for every value column at once, with the
stopping rule of :mod:`bigpanel.project` applied to the columns with B
partialled out (||(I - P_B) t||^2 = t'Wt - sum_l (D_B'Wt)_l^2 / n_B,l). Each
iteration is two sparse products whose nonzeros are the rows; nothing is read
from the engine while iterating.

C_e is built without a hash table: the engine returns the rows sorted by
their B code, so they are the nonzeros of C_e in row order, its row pointers
are the cumulative row counts of B's levels and its column indices are the
rows' e-codes. Memory: 4 bytes per row per other effect plus one float64
weight per row shared by every C_e (duplicate cells are kept as separate
nonzeros; a product adds them), and the int16/int32 codes while building.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import sparse
from scipy.sparse.csgraph import connected_components

from .project import Projection, conjugate_gradients
from ..passes.reduce import Reduction, RowCodes

DENSE_PAIRS = 1 << 26  # a pair table of two small effects is counted densely up to this many cells
EDGE_CHUNK = 1 << 24  # rows (or edges) handled at a time while counting pair tables and components


@dataclass(frozen=True)
class Links:
    """The sparse tables of the Schur system: ``link[e]`` = C_e, ``pairs[(e, f)]`` = P_ef (e < f),
    and for every other effect e the connected components of the graph linking its levels to
    B's (``groups[e]``: their number and a label per level of e)."""

    big: int
    link: dict[int, sparse.csr_matrix]
    pairs: dict[tuple[int, int], sparse.csr_matrix]
    groups: dict[int, tuple[int, np.ndarray]]
    weighted: bool

    @property
    def nbytes(self) -> int:
        mats = list(self.link.values()) + list(self.pairs.values())
        shared = {id(m.data): m.data.nbytes for m in mats}
        return sum(m.indices.nbytes + m.indptr.nbytes for m in mats) + sum(shared.values())


def _pair_table(a: np.ndarray, b: np.ndarray, w: np.ndarray | None, ga: int, gb: int) -> sparse.csr_matrix:
    """P = D_a'W D_b for two effects given by per-row codes, counted chunk by chunk (densely
    when the table is small)."""
    if ga * gb <= DENSE_PAIRS:
        flat = np.zeros(ga * gb)
        for start in range(0, len(a), EDGE_CHUNK):
            part = slice(start, start + EDGE_CHUNK)
            weights = None if w is None else w[part]
            flat += np.bincount(a[part].astype(np.int64) * gb + b[part], weights=weights, minlength=ga * gb)
        return sparse.csr_matrix(flat.reshape(ga, gb))
    table = sparse.csr_matrix((ga, gb))
    for start in range(0, len(a), EDGE_CHUNK):
        part = slice(start, start + EDGE_CHUNK)
        data = np.ones(len(a[part])) if w is None else w[part]
        table = table + sparse.csr_matrix((data, (a[part].astype(np.int32), b[part].astype(np.int32))), shape=(ga, gb))
    return table


def build_links(rc: RowCodes, rows: list[np.ndarray]) -> Links:
    """The tables of the module docstring from the row codes; empties ``rc`` on the way."""
    sizes = [len(r) for r in rows]
    big, small = rc.big, sorted(rc.codes)
    pairs = {(e, f): _pair_table(rc.codes[e], rc.codes[f], rc.weights, sizes[e], sizes[f])
             for i, e in enumerate(small) for f in small[i + 1:]}
    n = int(rows[big].sum())
    index = np.int32 if n < np.iinfo(np.int32).max else np.int64
    indptr = np.concatenate([[0], np.cumsum(rows[big])]).astype(index)
    data = np.ones(n) if rc.weights is None else rc.weights
    link = {}
    for e in small:
        link[e] = sparse.csr_matrix((data, rc.codes.pop(e).astype(index), indptr), shape=(sizes[big], sizes[e]))
    weighted = rc.weights is not None
    rc.weights = None
    return Links(big, link, pairs, {e: _linked_groups(link[e]) for e in small}, weighted)


def reweighted(links: Links, sizes: list[int], weights: np.ndarray) -> Links:
    """``links`` with new row weights (the Poisson fit's IRLS steps): every C_e holds ``weights``
    as its values (the array they were built around, already rewritten in place), the tables
    P_ef of the other effects are counted again; the components do not depend on the weights."""
    for c in links.link.values():
        if not np.shares_memory(c.data, weights):
            c.data = weights
    small = sorted(links.link)
    pairs = {(e, f): _pair_table(links.link[e].indices, links.link[f].indices, weights, sizes[e], sizes[f])
             for i, e in enumerate(small) for f in small[i + 1:]}
    return Links(links.big, links.link, pairs, links.groups, True)


def _pair(links: Links, e: int, f: int) -> sparse.csr_matrix:
    """P_ef = D_e'W D_f for two other effects, from the table kept for e < f."""
    return links.pairs[(e, f)] if e < f else links.pairs[(f, e)].T


class _Schur:
    """The operator S of the module docstring on the stacked other effects, and its diagonal."""

    def __init__(self, links: Links, counts: list[np.ndarray]) -> None:
        self.links = links
        self.small = sorted(links.link)
        self.nb = counts[links.big]
        self.n = [counts[e] for e in self.small]
        self.offsets = np.concatenate([[0], np.cumsum([len(c) for c in self.n])])
        inv = 1.0 / self.nb
        diag, free = [], []
        for e, n_e in zip(self.small, self.n):
            c = links.link[e]
            if links.weighted:
                c = sparse.csr_matrix((c.data**2, c.indices, c.indptr), shape=c.shape)
            d = n_e - c.T @ inv  # unweighted, every nonzero is 1 and equals its square
            diag.append(np.where(d > 1e-9 * n_e, d, n_e))  # a level absorbed by B: any positive scale
            n_groups, labels = links.groups[e]
            pinned = np.zeros(len(n_e), dtype=bool)
            pinned[np.unique(labels, return_index=True)[1]] = True
            free.append(~pinned)
        self.diag = np.concatenate(diag)
        self.free = np.concatenate(free)[:, None]

    def split(self, vec: np.ndarray) -> list[np.ndarray]:
        return [vec[self.offsets[i] : self.offsets[i + 1]] for i in range(len(self.small))]

    def matvec(self, vec: np.ndarray) -> np.ndarray:
        parts = self.split(vec * self.free)
        on_big = sum(self.links.link[e] @ p for e, p in zip(self.small, parts)) / self.nb[:, None]
        out = []
        for i, e in enumerate(self.small):
            acc = self.n[i][:, None] * parts[i] - self.links.link[e].T @ on_big
            for j, f in enumerate(self.small):
                if f != e:
                    acc += _pair(self.links, e, f) @ parts[j]
            out.append(acc)
        return np.vstack(out) * self.free

    def precondition(self, res: np.ndarray) -> np.ndarray:
        return res * self.free / self.diag[:, None]


def solve_codes(links: Links, red: Reduction, tol: float, max_iter: int) -> Projection:
    """Effects of every dimension for every value column (see the module docstring)."""
    op = _Schur(links, red.counts)
    big = links.big
    rhs_big = red.rhs[big]
    on_big = rhs_big / op.nb[:, None]
    b = np.vstack([red.rhs[e] - links.link[e].T @ on_big for e in op.small]) * op.free
    total = red.sumsq - np.einsum("ij,ij->j", rhs_big, on_big)
    x, it, change, converged = conjugate_gradients(op.matvec, op.precondition, b, total, tol, max_iter)
    alpha: list[np.ndarray] = [np.empty(0)] * len(red.counts)
    for e, part in zip(op.small, op.split(x)):
        alpha[e] = part
    alpha[big] = (rhs_big - sum(links.link[e] @ alpha[e] for e in op.small)) / op.nb[:, None]
    return Projection(alpha, it, change, converged)


def _linked_groups(c: sparse.csr_matrix) -> tuple[int, np.ndarray]:
    """Connected components of the column levels of ``c`` when two are linked by sharing a row
    level: edges between consecutive column indices inside each row connect them exactly so.
    The edges are deduplicated chunk by chunk, so memory stays a few bytes per chunk row."""
    g = c.shape[1]
    row_start = np.zeros(len(c.indices), dtype=bool)
    row_start[c.indptr[:-1][c.indptr[:-1] < len(c.indices)]] = True
    dense = g * g <= DENSE_PAIRS
    seen = np.zeros(g * g if dense else 0, dtype=bool)
    graph = sparse.csr_matrix((g, g), dtype=bool)
    for start in range(1, len(c.indices), EDGE_CHUNK):
        stop = min(start + EDGE_CHUNK, len(c.indices))
        keep = ~row_start[start:stop]
        a, b = c.indices[start - 1:stop - 1][keep], c.indices[start:stop][keep]
        if dense:
            seen[a.astype(np.int64) * g + b] = True
        else:
            graph = graph + sparse.csr_matrix((np.ones(len(a), dtype=bool), (a, b)), shape=(g, g))
    if dense:
        a, b = np.divmod(np.flatnonzero(seen), g)
        graph = sparse.csr_matrix((np.ones(len(a), dtype=bool), (a, b)), shape=(g, g))
    n_comp, labels = connected_components(graph, directed=False)
    return int(n_comp), labels


def components(links: Links, sizes: list[int]) -> tuple[int, np.ndarray]:
    """Connected components of the graph linking levels of effects 1 and 2 that share a row.

    Returns their number and a label per level of effect 1 then effect 2.
    """
    if links.big in (0, 1):
        other = 1 - links.big
        c = links.link[other]
        n_comp, lab_other = links.groups[other]
        lab_big = lab_other[c.indices[c.indptr[:-1]]]
        labels = (lab_big, lab_other) if links.big == 0 else (lab_other, lab_big)
        return n_comp, np.concatenate(labels)
    link = links.pairs[(0, 1)]
    graph = sparse.bmat([[None, link], [link.T, None]], format="csr")
    n_comp, labels = connected_components(graph, directed=False)
    return int(n_comp), labels
