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
the diagonal of S (Jacobi) plus a coarse space solve it for every value column at once, with the
stopping rule of :mod:`bigpanel.numerics.project` applied to the columns with B
partialled out (||(I - P_B) t||^2 = t'Wt - sum_l (D_B'Wt)_l^2 / n_B,l). Each
iteration is two sparse products whose nonzeros are the rows; nothing is read
from the engine while iterating.

C_e is built without a hash table: the rows come grouped by their B level
(:func:`bigpanel.passes.reduce.fetch_codes`), so they are the nonzeros of C_e in row
order, its row pointers are the cumulative row counts of B's levels (in the
order the groups came) and its column indices are the rows' e-codes. Rows of
one B level that follow each other with the same e level (a worker's years in
one firm) become one nonzero holding their count or summed weight; other
duplicate cells stay separate nonzeros (a product adds them). Memory: 4 bytes per
row per other effect (the int32 codes become the column indices) plus one
float64 weight per row shared by every C_e that was not shortened so.

An unweighted C_e that holds most of its cells, each at most once (the period of a
unit x period panel), is kept as all ones minus its missing cells M: C_e p =
1 (1'p) - M p and C_e'v = 1 (1'v) - M'v cost the missing cells only.

When the other effects hold few levels (the periods of a unit x period panel), S is
formed densely, S = diag(n_s) + [P_ef] - T' diag(1/n_B) T with T the per-level tables
C_e side by side, and its Cholesky factor, with the pinned levels left out, is the
preconditioner: the conjugate gradients then stop after one or two iterations, whatever
the graph. Each block T_e' diag(1/n_B) T_f is one sparse product (a table kept as its
missing cells M expands to rank-one terms plus M_e' diag(1/n_B) M_f) or, when that costs
more, B's levels in dense blocks, one matrix product each (about B x G_e x G_f
multiply-adds, half that for e = f by BLAS's symmetric rank-k update; a dense multiply-add
runs some SPARSE_SLOWER = 25 times faster than a sparse one on this machine). S is formed
when that costs at most DENSE_PAYS iterations' sparse products (2 x nonzeros x columns
each) or a few milliseconds; else the preconditioner is M^-1 = diag(S)^-1 + Z (Z'SZ)^-1 Z',
Z an indicator column per (other effect, component) on the free levels (a two-level additive
preconditioner; Z'SZ costs one product).
Pinning one level leaves the Jacobi-scaled S with an eigenvalue near 1/G_e per other effect e
(the shift of e's other levels against the pinned one); the coarse term removes it. On 10M rows
of store x week x supplier the Jacobi spectrum was [0.0010, 0.0067, 0.989 ... 1.018], and
[0.989 ... 1.018] with the coarse term: 10 iterations became 5.

A product with a C_e of many levels reads and writes memory at random; it runs
in threads (scipy's sparse products release the interpreter lock), each on some
of the value columns, so the sums are the same as in one thread.
"""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np
from scipy import linalg, sparse
from scipy.linalg import blas
from scipy.sparse.csgraph import connected_components

from .project import Projection, conjugate_gradients
from ..passes.reduce import Reduction, RowCodes

DENSE_PAIRS = 1 << 26  # a pair table of two small effects is counted densely up to this many cells
EDGE_CHUNK = 1 << 24  # rows (or edges) handled at a time while counting pair tables and components
GRID_CHUNK = 1 << 18  # rows marked at a time in the cells table of a complement (small: the temporaries stay in cache)
THREADED_LEVELS = 1 << 16  # a product with C_e runs its value columns in threads from this many levels of e
RUNS_PAY = 0.75  # a link table is shortened to its runs when they are at most this share of its rows
DENSE_LEVELS = 2048  # S is formed densely (and factored) only when the other effects hold at most this many levels
DENSE_PAYS = 100  # ... and when forming it costs at most this many iterations' sparse products (see _dense_schur)
DENSE_FLOOR = 1 << 26  # ... or at most this many multiply-adds (a few milliseconds)
DENSE_CHUNK = 1 << 22  # entries of a dense block of the per-level link tables while forming S
SPARSE_SLOWER = 25  # a sparse product's multiply-add against a dense one's (BLAS), on this machine
COARSE_CELLS = 1 << 24  # the coarse space is used while Z S (other levels x components) holds at most this many


@dataclass(frozen=True)
class _Complement:
    """C_e as all ones but the cells of ``missing`` (rows x levels of e, a one per missing
    cell); ``first`` holds the first level of e each row holds."""

    missing: sparse.csr_matrix
    first: np.ndarray

    @property
    def nbytes(self) -> int:
        m = self.missing
        return m.data.nbytes + m.indices.nbytes + m.indptr.nbytes + self.first.nbytes

    def times(self, vec: np.ndarray) -> np.ndarray:
        return vec.sum(axis=0) - self.missing @ vec

    def transposed_times(self, vec: np.ndarray) -> np.ndarray:
        return vec.sum(axis=0) - self.missing.T @ vec


Link = sparse.csr_matrix | _Complement


@dataclass(frozen=True)
class Links:
    """The sparse tables of the Schur system: ``link[e]`` = C_e with a row per run of rows of
    one B level (``order``: the B level of each row; None: one row per level, in code order;
    ``gather`` adds rows up per level), ``pairs[(e, f)]`` = P_ef (e < f), for every other
    effect e the connected components of the graph linking its levels to B's (``groups[e]``:
    their number and a label per level of e), ``unit`` the effects whose C_e holds only ones
    and ``formed`` the dense S last formed, with the counts it was formed for."""

    big: int
    link: dict[int, Link]
    pairs: dict[tuple[int, int], sparse.csr_matrix]
    groups: dict[int, tuple[int, np.ndarray]]
    unit: frozenset[int]
    order: np.ndarray | None
    gather: sparse.csr_matrix | None
    formed: dict[str, tuple[list[np.ndarray], np.ndarray]] = field(default_factory=dict, repr=False, compare=False)

    @property
    def nbytes(self) -> int:
        mats = [m for m in self.link.values() if not isinstance(m, _Complement)] + list(self.pairs.values())
        shared = {id(m.data): m.data.nbytes for m in mats}
        dense = sum(m.nbytes for m in self.link.values() if isinstance(m, _Complement))
        return sum(m.indices.nbytes + m.indptr.nbytes for m in mats) + sum(shared.values()) + dense

    def by_row(self, values: np.ndarray) -> np.ndarray:
        """Values per level of B (code order) repeated for each row of the link tables."""
        return values if self.order is None else values[self.order]

    def per_level(self, values: np.ndarray) -> np.ndarray:
        """Values per row of the link tables added up per level of B (code order)."""
        return values if self.gather is None else self.gather @ values

    def times(self, parts: dict[int, np.ndarray]) -> np.ndarray:
        """sum_e C_e parts[e] (a row per row of the link tables)."""
        return sum(c.times(p) if isinstance(c := self.link[e], _Complement) else _product(c, p)
                   for e, p in parts.items())

    def transposed_times(self, vec: np.ndarray) -> dict[int, np.ndarray]:
        """C_e' vec for every other effect e (vec: a row per row of the link tables)."""
        return {e: c.transposed_times(vec) if isinstance(c, _Complement) else _product(c.T, vec)
                for e, c in self.link.items()}

    def firsts(self, e: int) -> np.ndarray:
        """The first level of e in each row of the link tables."""
        c = self.link[e]
        return c.first if isinstance(c, _Complement) else c.indices[c.indptr[:-1]]


def _product(mat: sparse.spmatrix, vec: np.ndarray) -> np.ndarray:
    """mat @ vec (mat: C_e or its transpose); with many levels of e, the columns of vec split over threads."""
    columns = vec.shape[1]
    threads = min(columns, os.cpu_count() or 1)
    if threads < 2 or min(mat.shape) < THREADED_LEVELS:
        return mat @ vec
    spans = np.array_split(np.arange(columns), threads)
    with ThreadPoolExecutor(threads) as pool:
        return np.hstack(list(pool.map(lambda cols: mat @ vec[:, cols], spans)))


def _pair_table(a: np.ndarray, b: np.ndarray, w: np.ndarray | None, ga: int, gb: int) -> sparse.csr_matrix:
    """P = D_a'W D_b for two effects given by per-row codes, counted chunk by chunk (densely
    when the table is small)."""
    if ga * gb <= DENSE_PAIRS:
        flat = np.zeros(ga * gb)
        buffer = np.empty(min(len(a), EDGE_CHUNK), dtype=np.int64)  # reused: no fresh pages per chunk
        for start in range(0, len(a), EDGE_CHUNK):
            part = slice(start, start + EDGE_CHUNK)
            weights = None if w is None else w[part]
            cells = buffer[:len(a[part])]
            np.multiply(a[part], gb, out=cells)
            cells += b[part]
            flat += np.bincount(cells, weights=weights, minlength=ga * gb)
        return sparse.csr_matrix(flat.reshape(ga, gb))
    table = sparse.csr_matrix((ga, gb))
    for start in range(0, len(a), EDGE_CHUNK):
        part = slice(start, start + EDGE_CHUNK)
        data = np.ones(len(a[part])) if w is None else w[part]
        table = table + sparse.csr_matrix((data, (a[part].astype(np.int32), b[part].astype(np.int32))), shape=(ga, gb))
    return table


def build_links(rc: RowCodes, rows: list[np.ndarray], fixed: bool = True) -> Links:
    """The tables of the module docstring from the row codes; empties ``rc`` on the way. With
    ``fixed`` False (the Poisson fit's working weights, whose tables are built again at every
    step) every C_e keeps a nonzero per row holding the row weights: no runs merged, no complement."""
    sizes = [len(r) for r in rows]
    big, small = rc.big, sorted(rc.codes)
    pairs = {(e, f): _pair_table(rc.codes[e], rc.codes[f], rc.weights, sizes[e], sizes[f])
             for i, e in enumerate(small) for f in small[i + 1:]}
    order, per_row = (None, rows[big]) if rc.runs is None else rc.runs
    n = int(per_row.sum())
    index = np.int32 if n < np.iinfo(np.int32).max else np.int64
    indptr = np.concatenate([[0], np.cumsum(per_row)]).astype(index)
    data = rc.weights
    link: dict[int, Link] = {}
    groups, unit = {}, set()
    for e in small:
        codes = rc.codes.pop(e)
        found = None if rc.weights is not None or not fixed else _complement(codes, indptr, sizes[e], order,
                                                                              sizes[big])
        if found is not None:
            link[e], groups[e] = found
            continue
        found = _runs(codes, indptr, data, sizes[e]) if fixed else None
        if found is None:
            data = np.ones(n) if data is None else data  # shared by every table that keeps its rows
            found = sparse.csr_matrix((data, codes.astype(index, copy=False), indptr), shape=(len(per_row), sizes[e]))
            if rc.weights is None:
                unit.add(e)
        link[e] = found
        groups[e] = _linked_groups(found, order, sizes[big])
        del codes, found
    rc.weights = None
    gather = None if order is None else sparse.csr_matrix(
        (np.ones(len(order)), (order, np.arange(len(order)))), shape=(sizes[big], len(order)))
    return Links(big, link, pairs, groups, frozenset(unit), order, gather)


def _row_blocks(indptr: np.ndarray) -> list[tuple[int, int]]:
    """Consecutive blocks (lo, hi) of a table's rows holding about GRID_CHUNK nonzeros each (more
    when one row holds more): what a loop over the rows handles at a time."""
    cuts = np.unique(np.concatenate([[0], np.searchsorted(indptr, np.arange(GRID_CHUNK, indptr[-1], GRID_CHUNK)),
                                     [len(indptr) - 1]]))
    return list(zip(cuts[:-1].tolist(), cuts[1:].tolist()))


def _complement(codes: np.ndarray, indptr: np.ndarray, g: int, order: np.ndarray | None,
                levels: int) -> tuple[_Complement, tuple[int, np.ndarray]] | None:
    """C_e as a :class:`_Complement` and the connected components of e's levels, when the rows
    x levels of e table is at most twice the row count and no row holds a level twice; else None.

    Two rows holding more than half the levels each share one, so all the levels such rows hold
    are linked; the other rows link their levels to their first (:func:`_union_edges`), and a B
    level in several rows links the first levels of those rows (as :func:`_linked_groups`)."""
    rows, n = len(indptr) - 1, len(codes)
    if rows * g > 2 * n or n == 0:
        return None
    grid = np.zeros(rows * g, dtype=bool)
    flat = np.int32 if rows * g < np.iinfo(np.int32).max else np.int64
    for lo, hi in _row_blocks(indptr):
        cells = np.repeat(np.arange(lo, hi, dtype=flat) * g, np.diff(indptr[lo:hi + 1]))
        cells += codes[indptr[lo]:indptr[hi]]
        grid[cells] = True
    if np.count_nonzero(grid) != n:
        return None
    grid = grid.reshape(rows, g)
    first = grid.argmax(axis=1).astype(np.int32)
    holds = np.diff(indptr)
    ptr = np.concatenate([[0], np.cumsum(g - holds)]).astype(indptr.dtype)
    heavy = holds * 2 > g
    held = np.flatnonzero(grid.any(axis=0, where=heavy[:, None]))
    edges = [(np.full(len(held), held[0] if len(held) else 0), held), _union_edges(grid, first, np.flatnonzero(~heavy))]
    np.logical_not(grid, out=grid)  # now the missing cells: the held ones are no longer needed
    columns = np.broadcast_to(np.arange(g, dtype=indptr.dtype), grid.shape)  # cells in row order, no temporaries
    missing = sparse.csr_matrix((np.ones(int(ptr[-1])), columns[grid], ptr), shape=(rows, g))
    if order is not None:
        edges.append(_split_edges(first, order, levels))
    a, b = (np.concatenate(side) for side in zip(*edges))
    if g * g <= DENSE_PAIRS:  # each edge once: the graph's build sorts no duplicates
        seen = np.zeros(g * g, dtype=bool)
        seen[a.astype(np.int32, copy=False) * g + b] = True
        a, b = np.divmod(np.flatnonzero(seen), g)
    graph = sparse.csr_matrix((np.ones(len(a), dtype=bool), (a, b)), shape=(g, g))
    n_comp, labels = connected_components(graph, directed=False)
    return _Complement(missing, first), (int(n_comp), labels)


def _union_edges(grid: np.ndarray, first: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Edges from the first level each of ``rows`` holds (a row of ``grid``, rows x levels) to every
    level it holds, once per pair: the rows that share a first level OR-ed together (at most
    levels x levels edges, where an edge per held cell took an array per cell)."""
    if len(rows) == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    lead = first[rows]
    order = np.argsort(lead, kind="stable")
    lead = lead[order]
    starts = np.flatnonzero(np.concatenate([[True], lead[1:] != lead[:-1]]))
    group, level = np.nonzero(np.logical_or.reduceat(grid[rows[order]], starts, axis=0))
    return lead[starts][group].astype(np.int64), level


def _split_edges(firsts: np.ndarray, order: np.ndarray, levels: int) -> tuple[np.ndarray, np.ndarray]:
    """Edges from the first level of e of each row to that of the first row of its B level
    (a B level that came in several runs links what its rows hold)."""
    lead = np.empty(levels, dtype=firsts.dtype)
    lead[order[::-1]] = firsts[::-1]  # the first row of each level writes last
    return lead[order], firsts


def _runs(codes: np.ndarray, indptr: np.ndarray, data: np.ndarray | None, g: int) -> sparse.csr_matrix | None:
    """C_e with each run of equal codes inside a row as one nonzero (its count, or its summed
    weight given ``data``), or None when the runs would not save at least a quarter of the nonzeros."""
    n = len(codes)
    if n == 0:
        return None
    new = np.empty(n, dtype=bool)
    new[0] = True
    np.not_equal(codes[1:], codes[:-1], out=new[1:])
    new[indptr[:-1][indptr[:-1] < n]] = True
    if np.count_nonzero(new) > RUNS_PAY * n:
        return None
    starts = np.flatnonzero(new)
    del new
    weights = np.diff(starts, append=n).astype(float) if data is None else np.add.reduceat(data, starts)
    ptr = np.searchsorted(starts, indptr).astype(indptr.dtype)
    return sparse.csr_matrix((weights, codes[starts].astype(indptr.dtype), ptr), shape=(len(indptr) - 1, g))


def _pair(links: Links, e: int, f: int) -> sparse.csr_matrix:
    """P_ef = D_e'W D_f for two other effects, from the table kept for e < f."""
    return links.pairs[(e, f)] if e < f else links.pairs[(f, e)].T


def _stored(c: Link) -> sparse.csr_matrix:
    """The sparse table a link table keeps: C_e itself, or a complement's missing cells."""
    return c.missing if isinstance(c, _Complement) else c


def per_level_table(links: Links, e: int) -> tuple[sparse.csr_matrix, np.ndarray | None]:
    """T_e = the rows of C_e added up per level of B, as a sparse table and, for a complement,
    the number of rows per level r (then T_e = r 1' - the sparse table)."""
    c = links.link[e]
    table = _stored(c)
    if links.gather is not None:
        table = (links.gather @ table).tocsr()
    if not isinstance(c, _Complement):
        return table, None
    runs = np.ones(table.shape[0]) if links.gather is None else np.asarray(links.gather.sum(axis=1)).ravel()
    return table, runs


Table = tuple[sparse.csr_matrix, np.ndarray | None]


def _dense_rows(table: Table, lo: int, hi: int, out: np.ndarray) -> np.ndarray:
    """Rows lo..hi of a per-level table (:func:`per_level_table`) as a dense array written into
    ``out`` (duplicate cells added; r - the rows for a complement), read straight from its arrays:
    slicing the sparse table would copy them first, and a fresh array per block costs fresh pages."""
    sub, runs = table
    ptr, dense = sub.indptr, out[:hi - lo]
    start, stop = ptr[lo], ptr[hi]
    block = sparse.csr_matrix((sub.data[start:stop], sub.indices[start:stop], ptr[lo:hi + 1] - start),
                              shape=(hi - lo, sub.shape[1]))
    block.toarray(out=dense)
    if runs is not None:
        np.subtract(runs[lo:hi, None], dense, out=dense)
    return dense


def _dense_schur(links: Links, counts: list[np.ndarray], columns: int) -> np.ndarray | None:
    """S of the module docstring as a dense matrix (:func:`schur_matrix`), or None when the other
    effects hold more than DENSE_LEVELS levels or forming S would cost more than DENSE_PAYS
    iterations' products (and more than DENSE_FLOOR multiply-adds)."""
    g = sum(len(counts[e]) for e in links.link)
    if g > DENSE_LEVELS:
        return None
    products = sum(_stored(c).nnz for c in links.link.values())
    held = [_held_per_level(links, e) for e in sorted(links.link)]
    cost = sum(min(_outer_costs(*a, *b)) for i, a in enumerate(held) for b in held[i:])
    if cost > max(DENSE_PAYS * 2 * products * columns, DENSE_FLOOR):
        return None
    return schur_matrix(links, counts)


def _held_per_level(links: Links, e: int) -> tuple[np.ndarray, int]:
    """The nonzeros of effect e's per-level table in each level of B (at most: runs of one level
    may share cells) and e's level count, without forming the table."""
    table = _stored(links.link[e])
    held = np.diff(table.indptr).astype(float)
    return (held if links.order is None else np.bincount(links.order, weights=held)), table.shape[1]


def _outer_costs(held_a: np.ndarray, levels_a: int, held_b: np.ndarray, levels_b: int) -> tuple[float, float]:
    """Dense-equivalent multiply-adds of :func:`_outer` for two tables with ``held`` nonzeros in
    each level of B and ``levels`` columns: by one sparse product (a sparse multiply-add counted
    as SPARSE_SLOWER dense ones) and by dense blocks."""
    return SPARSE_SLOWER * float(np.dot(held_a, held_b)), float(len(held_a)) * levels_a * levels_b


def _outer(a: Table, b: Table, inv: np.ndarray) -> np.ndarray:
    """T_a' diag(inv) T_b for two per-level tables (:func:`per_level_table`): T = A, or r 1' - A
    when the table is kept as its missing cells A with r the rows per level. Expanded with
    T = r 1' + s A (r = 0, s = 1 for a plain table; s = -1 for a complement):
    1 1' r_a'D r_b + s_b 1 (r_a'D A_b) + s_a (A_a'D r_b) 1' + s_a s_b A_a'D A_b, one sparse
    product when that is cheaper (:func:`_outer_costs`); else by dense blocks of B's levels."""
    (ta, ra), (tb, rb) = a, b
    by_sparse, by_blocks = _outer_costs(np.diff(ta.indptr).astype(float), ta.shape[1],
                                        np.diff(tb.indptr).astype(float), tb.shape[1])
    if by_sparse > by_blocks:
        return _outer_dense(a, b, inv)
    sa, sb = (1.0 if ra is None else -1.0), (1.0 if rb is None else -1.0)
    out = sa * sb * (ta.T @ (tb.multiply(inv[:, None])).tocsr()).toarray()
    if ra is not None:
        out += sb * (tb.T @ (inv * ra))[None, :]
        if rb is not None:
            out += float(ra @ (inv * rb))
    if rb is not None:
        out += sa * (ta.T @ (inv * rb))[:, None]
    return out


def _outer_dense(a: Table, b: Table, inv: np.ndarray) -> np.ndarray:
    """:func:`_outer` by dense blocks of B's levels, one matrix product each, into buffers
    allocated once. When ``a`` is ``b`` each block is formed once and the product is the
    symmetric rank-k update (D^1/2 T)'(D^1/2 T): half the multiply-adds."""
    if a is b:
        return _outer_symmetric(a, np.sqrt(inv))
    out = np.zeros((a[0].shape[1], b[0].shape[1]))
    step = min(len(inv), max(1, DENSE_CHUNK // max(out.shape)))
    left, right = np.empty((step, out.shape[0])), np.empty((step, out.shape[1]))
    for lo in range(0, len(inv), step):
        hi = min(lo + step, len(inv))
        db = _dense_rows(b, lo, hi, right)
        out += _dense_rows(a, lo, hi, left).T @ np.multiply(db, inv[lo:hi, None], out=db)
    return out


def _outer_symmetric(a: Table, root: np.ndarray) -> np.ndarray:
    """T_a' diag(root^2) T_a by dense blocks, each scaled by ``root`` and added by BLAS's
    symmetric rank-k update into the upper triangle (a column-major result: no copies)."""
    g = a[0].shape[1]
    out = np.zeros((g, g), order="F")
    step = min(len(root), max(1, DENSE_CHUNK // g))
    block = np.empty((step, g))
    for lo in range(0, len(root), step):
        hi = min(lo + step, len(root))
        scaled = np.multiply(_dense_rows(a, lo, hi, block), root[lo:hi, None], out=block[:hi - lo])
        out = blas.dsyrk(1.0, scaled.T, beta=1.0, c=out, overwrite_c=True)
    return np.triu(out) + np.triu(out, 1).T


def schur_matrix(links: Links, counts: list[np.ndarray]) -> np.ndarray:
    """S = diag(n_s) + [P_ef] - T' diag(1/n_B) T (module docstring) as a dense matrix over the
    other effects in code order, T the per-level link tables side by side, block by block
    (:func:`_outer`): the normal equations of the other effects with B partialled out. Kept in
    ``links.formed`` for the next call with the same counts (the event study's implied
    weights and the wild bootstrap's Sigma reuse the fit's)."""
    small = sorted(links.link)
    nb, n = counts[links.big], [counts[e] for e in small]
    kept = links.formed.get("schur")
    if kept is not None and all(np.array_equal(a, b) for a, b in zip(kept[0], [nb, *n])):
        return kept[1]
    tables = [per_level_table(links, e) for e in small]
    inv = 1.0 / nb
    offsets = np.concatenate([[0], np.cumsum([len(c) for c in n])])
    out = np.zeros((offsets[-1], offsets[-1]))
    for i, e in enumerate(small):
        rows = slice(offsets[i], offsets[i + 1])
        out[rows, rows] = np.diag(n[i]) - _outer(tables[i], tables[i], inv)
        for j in range(i + 1, len(small)):
            cols = slice(offsets[j], offsets[j + 1])
            out[rows, cols] = _pair(links, e, small[j]).toarray() - _outer(tables[i], tables[j], inv)
            out[cols, rows] = out[rows, cols].T
    links.formed["schur"] = ([nb.copy(), *(c.copy() for c in n)], out)
    return out


def schur_diagonal(links: Links, counts: list[np.ndarray]) -> np.ndarray:
    """S's diagonal (module docstring) from the link tables: n_e - (C_e squared)' (1 / n_B) for
    every other effect e in code order. Exact when every cell (level of B, level of e) is one
    nonzero; a cell held by two (its rows apart in a level, or a level of B in two runs) counts
    as two squares: the preconditioner's approximation."""
    inv = links.by_row(1.0 / counts[links.big])
    out = []
    for e in sorted(links.link):
        c = links.link[e]
        if isinstance(c, _Complement):  # ones: every nonzero equals its square
            squares = c.transposed_times(inv)
        else:
            squares = c.T @ inv if e in links.unit else _squares_times(c, inv)
        out.append(counts[e] - squares)
    return np.concatenate(out)


def _squares_times(c: sparse.csr_matrix, vec: np.ndarray) -> np.ndarray:
    """(C with every value squared)' vec, a block of rows at a time, the squares written into one
    small buffer (no copy of C's values, no fresh pages per block)."""
    ptr, out = c.indptr, np.zeros(c.shape[1])
    blocks = _row_blocks(ptr)
    buffer = np.empty(max((int(ptr[hi] - ptr[lo]) for lo, hi in blocks), default=0))
    for lo, hi in blocks:
        values = np.square(c.data[ptr[lo]:ptr[hi]], out=buffer[:ptr[hi] - ptr[lo]])
        block = sparse.csr_matrix((values, c.indices[ptr[lo]:ptr[hi]], ptr[lo:hi + 1] - ptr[lo]),
                                  shape=(hi - lo, c.shape[1]))
        out += block.T @ vec[lo:hi]
    return out


class _Schur:
    """The operator S of the module docstring on the stacked other effects, and its
    preconditioner: the Cholesky factor of S formed densely, or S's diagonal plus the coarse
    space."""

    def __init__(self, links: Links, counts: list[np.ndarray], columns: int, dense: bool) -> None:
        self.links = links
        self.small = sorted(links.link)
        self.nb = counts[links.big]
        self.n = [counts[e] for e in self.small]
        self.offsets = np.concatenate([[0], np.cumsum([len(c) for c in self.n])])
        pinned = [np.zeros(len(n_e), dtype=bool) for n_e in self.n]
        for p, e in zip(pinned, self.small):
            p[np.unique(links.groups[e][1], return_index=True)[1]] = True  # one level per component
        self.free = ~np.concatenate(pinned)[:, None]
        dense = _dense_schur(links, counts, columns) if dense else None
        scale = np.concatenate(self.n)
        d = schur_diagonal(links, counts) if dense is None else np.diag(dense)
        self.diag = np.where(d > 1e-9 * scale, d, scale)  # a level absorbed by B: any positive scale
        self.factor = None if dense is None else self._factor(dense)
        self.coarse = self._coarse() if self.factor is None else None

    def _factor(self, dense: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
        """The Cholesky factor of S on the free levels (a level absorbed by B scaled as the
        diagonal is), or None when S is not positive definite in rounding."""
        free = np.flatnonzero(self.free[:, 0])
        sub = dense[np.ix_(free, free)]
        idx = np.arange(len(free))
        sub[idx, idx] = self.diag[free]
        try:
            return linalg.cho_factor(sub, lower=True, check_finite=False), free
        except linalg.LinAlgError:
            return None

    def _coarse(self) -> tuple[sparse.csr_matrix, tuple[np.ndarray, bool]] | None:
        """The coarse space of the diagonal preconditioner: Z, an indicator column per (other
        effect, component) on its free levels, and the Cholesky factor of Z'SZ; None when
        Z S is too large to form (COARSE_CELLS) or Z'SZ is not positive definite in rounding."""
        cell, first = [], 0
        for e in self.small:
            n_comp, labels = self.links.groups[e]
            cell.append(first + labels)
            first += n_comp
        rows = np.flatnonzero(self.free[:, 0])
        cols = np.concatenate(cell)[rows]
        used, cols = np.unique(cols, return_inverse=True)
        if len(used) * len(self.free) > COARSE_CELLS:
            return None
        z = sparse.csr_matrix((np.ones(len(rows)), (rows, cols)), shape=(len(self.free), len(used)))
        try:
            return z, linalg.cho_factor(z.T @ self.matvec(z.toarray()), lower=True, check_finite=False)
        except linalg.LinAlgError:
            return None

    def split(self, vec: np.ndarray) -> list[np.ndarray]:
        return [vec[self.offsets[i] : self.offsets[i + 1]] for i in range(len(self.small))]

    def matvec(self, vec: np.ndarray) -> np.ndarray:
        parts = self.split(vec * self.free)
        on_big = self.links.per_level(self.links.times(dict(zip(self.small, parts)))) / self.nb[:, None]
        back = self.links.transposed_times(self.links.by_row(on_big))
        out = []
        for i, e in enumerate(self.small):
            acc = self.n[i][:, None] * parts[i] - back[e]
            for j, f in enumerate(self.small):
                if f != e:
                    acc += _pair(self.links, e, f) @ parts[j]
            out.append(acc)
        return np.vstack(out) * self.free

    def precondition(self, res: np.ndarray) -> np.ndarray:
        if self.factor is None:
            out = res * self.free / self.diag[:, None]
            if self.coarse is not None:
                z, factor = self.coarse
                out += z @ linalg.cho_solve(factor, z.T @ res, check_finite=False)
            return out
        factor, free = self.factor
        out = np.zeros_like(res)
        out[free] = linalg.cho_solve(factor, res[free], check_finite=False)
        return out


def solve_codes(links: Links, red: Reduction, tol: float, max_iter: int, dense: bool = True) -> Projection:
    """Effects of every dimension for every value column (see the module docstring); ``dense``
    False keeps the diagonal and coarse-space preconditioner (a warm-started solve needs few
    iterations)."""
    op = _Schur(links, red.counts, red.rhs[links.big].shape[1], dense)
    big = links.big
    rhs_big = red.rhs[big]
    on_big = rhs_big / op.nb[:, None]
    back = links.transposed_times(links.by_row(on_big))
    b = np.vstack([red.rhs[e] - back[e] for e in op.small]) * op.free
    total = red.sumsq - np.einsum("ij,ij->j", rhs_big, on_big)
    x, it, change, converged = conjugate_gradients(op.matvec, op.precondition, b, total, tol, max_iter)
    alpha: list[np.ndarray] = [np.empty(0)] * len(red.counts)
    for e, part in zip(op.small, op.split(x)):
        alpha[e] = part
    fitted = links.per_level(links.times({e: alpha[e] for e in op.small}))
    alpha[big] = (rhs_big - fitted) / op.nb[:, None]
    return Projection(alpha, it, change, converged)


def normal_times(links: Links, counts: list[np.ndarray], parts: list[np.ndarray]) -> list[np.ndarray]:
    """D'WD times the effects ``parts`` (one array of levels x columns per effect, B's included):
    diag(n) a plus the link and pair tables times the other effects."""
    big, small = links.big, sorted(links.link)
    out = [counts[d][:, None] * p for d, p in enumerate(parts)]
    out[big] = out[big] + links.per_level(links.times({e: parts[e] for e in small}))
    back = links.transposed_times(links.by_row(parts[big]))
    for e in small:
        out[e] = out[e] + back[e]
        for f in small:
            if f != e:
                out[e] = out[e] + _pair(links, e, f) @ parts[f]
    return out


def _linked_groups(c: sparse.csr_matrix, order: np.ndarray | None, levels: int) -> tuple[int, np.ndarray]:
    """Connected components of the column levels of ``c`` when two are linked by sharing a B
    level: edges between consecutive column indices inside each row connect them exactly so,
    with, when a B level has several rows (``order``), an edge from the first index of each of
    its rows to that of its first row. The edges are deduplicated chunk by chunk (in a dense
    table of pairs when the levels are few), so memory stays a few bytes per chunk row. Once the
    edges so far link every level into one component, the rest cannot change it: they are skipped."""
    g = c.shape[1]
    n = len(c.indices)
    dense = g * g <= DENSE_PAIRS  # so a * g + b fits an int32
    seen = np.zeros(g * g if dense else 0, dtype=bool)
    graph = sparse.csr_matrix((g, g), dtype=bool)
    starts, size = [1], EDGE_CHUNK >> 4  # growing chunks: a connected graph is usually seen so early
    while starts[-1] + size < n:
        starts.append(starts[-1] + size)
        size = min(2 * size, EDGE_CHUNK)
    chunks = [(c.indices[lo - 1:hi - 1], c.indices[lo:hi], lo) for lo, hi in zip(starts, starts[1:] + [n]) if lo < n]
    if order is not None:
        chunks.append((*_split_edges(c.indices[c.indptr[:-1]], order, levels), None))
    for i, (a, b, start) in enumerate(chunks):
        heads = None if start is None else (
            c.indptr[np.searchsorted(c.indptr, start):np.searchsorted(c.indptr, start + len(b))] - start)
        if dense:  # the pair across two rows becomes a loop on one level, which links nothing
            if heads is not None:
                b = b.copy()
                b[heads] = a[heads]
            seen[a.astype(np.int32, copy=False) * g + b] = True
        else:
            keep = a != b
            if heads is not None:
                keep[heads] = False
            graph = graph + sparse.csr_matrix((np.ones(int(keep.sum()), dtype=bool), (a[keep], b[keep])),
                                              shape=(g, g))
        n_comp, labels = _components_of(seen, g) if dense else connected_components(graph, directed=False)
        if n_comp == 1 or i == len(chunks) - 1:
            return int(n_comp), labels
    return connected_components(graph, directed=False)  # no edges at all


def _components_of(seen: np.ndarray, g: int) -> tuple[int, np.ndarray]:
    """Connected components of g levels given the dense table of the pairs seen linked."""
    a, b = np.divmod(np.flatnonzero(seen), g)
    return connected_components(sparse.csr_matrix((np.ones(len(a), dtype=bool), (a, b)), shape=(g, g)),
                                directed=False)


def components(links: Links, sizes: list[int]) -> tuple[int, np.ndarray]:
    """Connected components of the graph linking levels of effects 1 and 2 that share a row.

    Returns their number and a label per level of effect 1 then effect 2.
    """
    if links.big in (0, 1):
        other = 1 - links.big
        n_comp, lab_other = links.groups[other]
        lab_big = lab_other[links.firsts(other)]
        if links.order is not None:
            lab_big = np.empty_like(lab_big, shape=sizes[links.big])
            lab_big[links.order] = lab_other[links.firsts(other)]
        labels = (lab_big, lab_other) if links.big == 0 else (lab_other, lab_big)
        return n_comp, np.concatenate(labels)
    link = links.pairs[(0, 1)]
    graph = sparse.bmat([[None, link], [link.T, None]], format="csr")
    n_comp, labels = connected_components(graph, directed=False)
    return int(n_comp), labels
