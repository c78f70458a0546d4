"""The in-memory path: the used columns loaded into numpy, the same model fitted there.

It is the reference a user compares the SQL path against, and the fast path
for small data. Levels are coded by sorting (the same order as the SQL level
tables), reductions are ``bincount`` calls, singletons are peeled by repeated
counting, and the demeaned products are formed row by row in numpy. The
projections, slopes, inference and effects are the shared code.
"""

from __future__ import annotations

import time

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
from scipy import sparse

from ..engines.base import Engine
from ..errors import BigPanelError
from ..passes.bootstrap import Cells, PairSums, coded
from ..passes.moments import ClusterTerm, Residuals, ols_residuals
from ..passes.moments import Moments, cluster_sets
from ..numerics.project import Projection, components, solve_effects
from ..passes.reduce import (ONE_WAY, PAIR_TABLES, Reduction, Start, check_scale, create_views, no_complete_rows, source_rows,
                     value_offsets)
from ..model.spec import Spec
from ..sql.text import render


def _codes(columns: list[pa.ChunkedArray]) -> tuple[np.ndarray, pa.Table]:
    """Dense codes of the distinct key combinations in sorted key order, and the keys."""
    per_col = []
    uniques = []
    for col in columns:
        uniq = pc.unique(col)
        uniq = uniq.take(pc.sort_indices(uniq))
        per_col.append(pc.index_in(col, value_set=uniq).to_numpy(zero_copy_only=False).astype(np.int64))
        uniques.append(uniq)
    combined = per_col[0]
    for codes, uniq in zip(per_col[1:], uniques[1:]):
        combined = combined * len(uniq) + codes
    levels, inverse = np.unique(combined, return_inverse=True)
    keys = []
    rest = levels
    for codes, uniq in reversed(list(zip(per_col, uniques))):
        keys.append(uniq.take(pa.array(rest % len(uniq))))
        rest = rest // len(uniq)
    return inverse.astype(np.int64), pa.table(list(reversed(keys)), names=[f"k{j}" for j in range(len(columns))])


class MemoryBackend:
    """Runs the fit's row-level steps on numpy arrays held in memory."""

    moments_from = "demeaned rows"

    def __init__(self, eng: Engine, spec: Spec, source_kind: str) -> None:
        self.spec = spec
        self.eng = eng
        self.timings = eng.timings
        create_views(eng, spec)
        start = time.perf_counter()
        self.table = eng.arrow("load the used columns", render("load_columns"), raw=True)
        self.timings["load into memory"] = time.perf_counter() - start

    @property
    def raw_passes(self) -> int:
        return self.eng.raw_passes

    def start(self) -> Start:
        spec, tab = self.spec, self.table
        values = np.column_stack(
            [tab.column(v).to_numpy(zero_copy_only=False).astype(float) for v in spec.value_aliases]
        )
        ok_values = np.isfinite(values)
        incomplete: dict[str, int] = {}
        for j, name in enumerate([spec.y, *spec.x]):
            incomplete[name] = max(incomplete.get(name, 0), int((~ok_values[:, j]).sum()))
        complete = ok_values.all(axis=1)
        key_cols = [(name, a) for d, cols in enumerate(spec.fe) for name, a in zip(cols, spec.key_aliases(d))]
        key_cols += list(zip(spec.cluster, spec.cluster_aliases))
        for name, alias in key_cols:
            null = tab.column(alias).is_null().to_numpy(zero_copy_only=False)
            incomplete[name] = max(incomplete.get(name, 0), int(null.sum()))
            complete &= ~null
        n_filtered = len(values)
        n_source = source_rows(self.eng, spec, n_filtered)
        self.w = np.ones(len(values))
        if spec.weights:
            w = tab.column("w").to_numpy(zero_copy_only=False).astype(float)
            good = np.isfinite(w) & (w > 0)
            incomplete[spec.weights] = int((~np.isfinite(w)).sum())  # as the SQL path: missing apart from
            incomplete[f"{spec.weights} zero or negative"] = int((np.isfinite(w) & (w <= 0)).sum())  # non-positive
            complete &= good
            self.w = np.where(good, w, 0.0)
        self.bad = incomplete
        if not complete.any():
            raise no_complete_rows(incomplete, n_filtered)
        self.values = values[complete]
        self.w = self.w[complete]
        self.rows = tab.filter(pa.array(complete))
        shift = self.values[:1000].mean(axis=0)
        check_scale(spec, shift)
        self.t = self.values - shift
        return Start(n_source, n_filtered, shift + value_offsets(self.eng, spec))

    def incomplete(self) -> dict[str, int]:
        return self.bad

    def project(self, red: Reduction, tol: float, max_iter: int) -> Projection:
        return solve_effects(red, tol=tol, max_iter=max_iter)

    @property
    def python_bytes(self) -> int:
        """The loaded columns: the largest numpy allocation of this path."""
        return int(self.table.nbytes)

    def components(self, red: Reduction) -> tuple[int | None, np.ndarray | None]:
        return components(red) if len(red.counts) >= 2 else (None, None)

    def reduce(self, drop_singletons: bool, cell_budget: int, strategy: str | None = None) -> Reduction:
        spec = self.spec
        k = len(spec.fe)
        codes, self.keys = [], []
        for d in range(k):
            c, keys = _codes([self.rows.column(a) for a in spec.key_aliases(d)])
            codes.append(c)
            self.keys.append(keys.rename_columns(spec.key_aliases(d)))
        keep = np.ones(len(self.t), dtype=bool)
        rounds = 0
        while drop_singletons:
            rounds += 1
            drop = np.zeros_like(keep)
            for c in codes:
                drop |= np.bincount(c[keep], minlength=c.max() + 1)[c] == 1
            drop &= keep
            if not drop.any():
                break
            keep &= ~drop
        rounds = max(rounds, 1)
        if not keep.any():
            raise BigPanelError(f"no rows left: every level of {spec.fe_names[0]!r} holds a single row (singletons)")
        self.t = self.t[keep]
        self.w = self.w[keep]
        self.rows = self.rows.filter(pa.array(keep))
        self.codes = []
        for d in range(k):
            used, inverse = np.unique(codes[d][keep], return_inverse=True)
            self.codes.append(inverse.astype(np.int64))
            self.keys[d] = self.keys[d].take(pa.array(used))
        w = self.w
        rows = [np.bincount(c) for c in self.codes]
        counts = [np.bincount(c, weights=w) for c in self.codes]
        rhs = [np.column_stack([np.bincount(c, weights=w * self.t[:, j]) for j in range(self.t.shape[1])])
               for c in self.codes]
        cross = {}
        for d in range(k):
            for e in range(d + 1, k):
                shape = (len(counts[d]), len(counts[e]))
                cross[(d, e)] = sparse.csr_matrix((w, (self.codes[d], self.codes[e])), shape=shape)
        self.clusters = [_codes([self.rows.column(a)])[0] for a in spec.cluster_aliases]
        nested = []
        for d, c in enumerate(self.codes):
            flags = []
            for cl in self.clusters:
                lo = np.full(len(counts[d]), np.iinfo(np.int64).max)
                hi = np.full(len(counts[d]), -1)
                np.minimum.at(lo, c, cl)
                np.maximum.at(hi, c, cl)
                flags.append(bool((lo == hi).all()))
            nested.append(flags)
        sumsq = (w[:, None] * self.t**2).sum(axis=0)
        strategy = ONE_WAY if k == 1 else PAIR_TABLES
        return Reduction(counts, rows, rhs, cross, nested, sumsq, len(keep), len(self.t), rounds, strategy)

    def moments(self, proj: Projection) -> Moments:
        e = self.t.copy()
        for c, a in zip(self.codes, proj.alpha):
            e -= a[c]
        self.e = e
        return Moments(len(e), (e * self.w[:, None]).T @ e)

    def rss(self, keep: list[int], beta: np.ndarray) -> float:
        """The residual sum of squares, sum_i w_i (y~_i - x~_i'b)^2, each residual formed first."""
        r = self.e @ ols_residuals(self.e.shape[1], keep, beta).coef[:, 0]
        return float(np.dot(self.w * r, r))

    def _scores(self, res: Residuals) -> np.ndarray:
        """Row scores w_i u_ia e_ij over the support, residual a's block at columns a s ... a s + s - 1."""
        u = (self.e @ res.coef) * self.w[:, None]
        es = self.e[:, res.support]
        return (u[:, :, None] * es[:, None, :]).reshape(len(es), -1)

    def meat_hc(self, res: Residuals) -> np.ndarray:
        """The raw HC meat of :class:`~bigpanel.passes.moments.Residuals`, row by row."""
        scores = self._scores(res)
        return res.wanted(scores.T @ scores)

    def meat_cluster(self, res: Residuals) -> list[ClusterTerm]:
        """The raw cluster meats: the row scores summed per cluster of every combination of cluster columns."""
        scores = self._scores(res)
        terms = []
        for cols in cluster_sets(len(self.clusters)):
            _, codes = np.unique(np.column_stack([self.clusters[j] for j in cols]), axis=0, return_inverse=True)
            codes = codes.ravel()
            g = int(codes.max()) + 1
            sums = np.column_stack([np.bincount(codes, weights=scores[:, j], minlength=g)
                                    for j in range(scores.shape[1])])
            terms.append(ClusterTerm(cols, g, res.wanted(sums.T @ sums)))
        return terms

    def cluster_cells(self) -> Cells:
        """The wild bootstrap's per-cell cross-products (see :mod:`bigpanel.passes.bootstrap`)."""
        codes, keys = coded([self.rows.column(a).combine_chunks() for a in self.spec.cluster_aliases])
        cells, cell = np.unique(codes, axis=0, return_inverse=True)
        cell = cell.ravel()
        m = self.e.shape[1]
        q = np.zeros((len(cells), m, m))
        for i in range(m):
            for j in range(i, m):
                q[:, i, j] = q[:, j, i] = np.bincount(cell, weights=self.w * self.e[:, i] * self.e[:, j])
        return Cells(q, cells, keys)

    def cross_sums(self, boot: int, keys: pa.Array, dims: list[int]) -> PairSums:
        """Per (cluster of column ``boot``, level of the effects ``dims``) sums of the demeaned columns."""
        cluster = self.clusters[boot]
        offsets = np.concatenate([[0], np.cumsum([int(self.codes[d].max()) + 1 for d in dims])])
        parts = []
        for d, at in zip(dims, offsets):
            pairs, pair = np.unique(cluster * offsets[-1] + at + self.codes[d], return_inverse=True)
            sums = np.column_stack([np.bincount(pair.ravel(), weights=self.w * self.e[:, j])
                                    for j in range(self.e.shape[1])])
            parts.append((pairs // offsets[-1], pairs % offsets[-1], sums))
        return PairSums(*(np.concatenate(p) for p in zip(*parts)), len(keys), int(offsets[-1]))

    def level_keys(self, d: int) -> pa.Table:
        return self.keys[d]
