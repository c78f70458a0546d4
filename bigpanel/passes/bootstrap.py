"""What the wild cluster bootstrap reads from the engine: per-cluster sums, never rows.

* :func:`cluster_cells`: the cross-products Q_h = sum_{i in h} w_i e_i e_i' of the demeaned
  columns per cell h of the finest combination of cluster columns, read from the table
  ``bp_cluster_moments`` that the cluster-robust fit already left (no pass over the rows):
  H cells x m(m+1)/2 numbers, with each cell's key in every cluster column.
* :func:`level_cells`: per (cluster, level) weights and sums of the shifted columns, read
  from the cells pass 2 groups by cluster when the bootstrap follows (no pass); with one
  nested and one cut-across effect they give the sums F_c,t below without a pass.
* :func:`cross_sums`: the sums F_c,t = sum_{i in c, level t} w_i e_i per (cluster, level)
  pair with rows, for effects that cut across the bootstrap clusters (and for the clustered
  errors of a single effect's levels): one pass over the rows with the solved effects joined
  back, pairs x m numbers.

:mod:`bigpanel.numerics.bootstrap` states what is done with them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from ..engines.base import Engine
from ..model.spec import Spec
from ..sql.text import Fragment, grouping_id, grouping_sets, join, level_joins, names, render
from .moments import demeaned_columns, effect_joins
from .reduce import cluster_cells_gid, level_table


@dataclass(frozen=True)
class Cells:
    """Per cell: ``q`` (H x m x m), ``codes`` (H x J: the cell's cluster in each cluster column,
    numbered in key order) and ``keys[j]`` the sorted distinct keys of cluster column j."""

    q: np.ndarray
    codes: np.ndarray
    keys: list[pa.Array]


def coded(columns: list[pa.Array]) -> tuple[np.ndarray, list[pa.Array]]:
    """Each column's values as codes into its sorted distinct values, and those values."""
    codes, keys = [], []
    for col in columns:
        uniq = pc.unique(col)
        uniq = uniq.take(pc.sort_indices(uniq))
        codes.append(pc.index_in(col, value_set=uniq).to_numpy(zero_copy_only=False).astype(np.int64))
        keys.append(uniq)
    return np.column_stack(codes), keys


def square(columns: list[np.ndarray], m: int) -> np.ndarray:
    """Rows of the upper-triangle columns q_i_j (i <= j, row-major) as H x m x m symmetric matrices."""
    out = np.zeros((len(columns[0]), m, m))
    pairs = [(i, j) for i in range(m) for j in range(i, m)]
    for (i, j), col in zip(pairs, columns):
        out[:, i, j] = out[:, j, i] = col
    return out


def cluster_cells(eng: Engine, spec: Spec) -> Cells:
    """The cells of the finest combination of cluster columns and their cross-products."""
    columns, m = spec.cluster_aliases, len(spec.value_aliases)
    sums = [f"q_{i}_{j}" for i in range(m) for j in range(i, m)]
    tab = eng.arrow("bootstrap: per-cluster cross-products",
                    render("bootstrap_cells", clusters=names(columns), sums=join(sums)),
                    {"gid": grouping_id(columns, columns)})
    codes, keys = coded([tab.column(c).combine_chunks() for c in columns])
    q = square([tab.column(s).to_numpy(zero_copy_only=False).astype(float) for s in sums], m)
    return Cells(q, codes, keys)


@dataclass(frozen=True)
class PairSums:
    """Per (cluster, level) pair with rows: the cluster's place in the sorted keys, the level's
    place among the stacked levels of the effects asked for, and the (weighted) sums of the
    demeaned columns (pairs x m)."""

    cluster: np.ndarray
    level: np.ndarray
    sums: np.ndarray
    clusters: int
    levels: int

    def dense(self) -> np.ndarray:
        """The sums as a clusters x levels x m array (zero where a pair has no rows)."""
        out = np.zeros((self.clusters, self.levels, self.sums.shape[1]))
        out[self.cluster, self.level] = self.sums
        return out


@dataclass(frozen=True)
class LevelCells:
    """Per (cluster, level) pair with rows of one effect: the cluster's place in the sorted keys,
    the level's code, its weight and the sums of the shifted columns (pairs x m)."""

    cluster: np.ndarray
    level: np.ndarray
    weight: np.ndarray
    sums: np.ndarray


def level_cells(eng: Engine, spec: Spec, d: int, keys: pa.Array) -> LevelCells:
    """From the cells pass 2 left by cluster (``bp_cluster_cells``, no pass over the rows): per
    (cluster, level of effect d) pair the weight and the sums of the shifted columns."""
    cluster, m = spec.cluster_aliases[0], len(spec.value_aliases)
    sql = render("bootstrap_level_cells", cluster=Fragment(cluster), levels=level_table(d),
                 keys=names(spec.key_aliases(d)), sums=join([f"c.s{j}" for j in range(m)]))
    tab = eng.arrow("bootstrap: sums per cluster and level, from the cells by cluster", sql,
                    {"gid": cluster_cells_gid(spec, cluster, d)})
    at = pc.index_in(tab.column("cluster"), value_set=keys)
    return LevelCells(at.to_numpy(zero_copy_only=False).astype(np.int64),
                      tab.column("code").to_numpy(zero_copy_only=False).astype(np.int64),
                      tab.column("nw").to_numpy(zero_copy_only=False).astype(float),
                      np.column_stack([tab.column(f"s{j}").to_numpy(zero_copy_only=False) for j in range(m)]))


def cross_sums(eng: Engine, spec: Spec, boot: int, keys: pa.Array, dims: list[int], sizes: list[int]) -> PairSums:
    """One pass: the (weighted, plain) sums of the demeaned columns over the rows of each pair of a cluster
    of column ``boot`` (numbered by its place in the sorted ``keys``) and a level of the effects
    ``dims`` (stacked in that order; ``sizes`` their level counts)."""
    cluster, m = spec.cluster_aliases[boot], len(spec.value_aliases)
    codes = [f"c{d + 1}" for d in dims]
    columns = [cluster] + [f"l{d + 1}.code AS c{d + 1}" for d in dims] + demeaned_columns(spec)
    columns += ["w"] if spec.weights else []
    joins = Fragment(effect_joins(spec) + "\n" + level_joins("bp_lev", {d: spec.key_aliases(d) for d in dims}, "l",
                                                             indent="      "))
    sql = render("bootstrap_cross_sums", cluster=Fragment(cluster), codes=join(codes),
                 grouping=names([cluster, *codes]),
                 columns=join(columns), joins=joins, sets=grouping_sets([[cluster, c] for c in codes]),
                 sums=join([f"sum({spec.w}e{j}) AS f{j}" for j in range(m)]))  # plain: the summands are demeaned
    tab = eng.arrow("bootstrap: sums per cluster and level of the effects that cut across", sql, raw=True)
    gid = tab.column("gid").to_numpy()
    at = pc.index_in(tab.column(cluster), value_set=keys).to_numpy(zero_copy_only=False)
    offsets = np.concatenate([[0], np.cumsum(sizes)])
    level = np.zeros(len(gid), dtype=np.int64)
    for a, c in enumerate(codes):
        rows = gid == grouping_id([cluster, *codes], [cluster, c])
        level[rows] = tab.column(c).to_numpy(zero_copy_only=False)[rows].astype(np.int64) + offsets[a]
    sums = np.column_stack([tab.column(f"f{j}").to_numpy(zero_copy_only=False).astype(float) for j in range(m)])
    return PairSums(at.astype(np.int64), level, sums, len(keys), int(offsets[-1]))
