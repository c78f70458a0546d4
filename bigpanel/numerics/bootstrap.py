"""The restricted wild cluster bootstrap-t, drawn from per-cluster sums instead of rows.

Method: Cameron, Gelbach and Miller (2008, Review of Economics and Statistics) for the
restricted wild cluster bootstrap-t (the null imposed on the residuals that are
resampled); the per-cluster algebra of MacKinnon (2023, "Fast cluster bootstrap
methods for linear regression models", Econometrics and Statistics); Webb's six-point
weights (Webb 2023, Canadian Journal of Economics).

**Sums.** The clusters of the finest combination of the cluster columns are the *cells*
h (one-way clustering: the clusters themselves); each lies in one cluster c(h) of the
bootstrap dimension, which has G clusters. e = (y~, x~_1, ..., x~_p) are the columns
with every fixed effect partialled out (weighted by the analytic weights w when given),
and Q_h = sum_{i in h} w_i e_i e_i' (m x m) is all the bootstrap reads of the rows when
every effect is nested in the bootstrap clusters. X~ are the K kept regressors and
B = (X~'WX~)^-1.

**Null.** H0: b_k = b0. The restricted slopes b_r (b_k fixed at b0, the others by least
squares on Q = sum_h Q_h) give u_r = e'omega with omega = (1, -b_r) on the columns, so
s_h = X~_h'W u_r,h = Q_h[x, :] omega.

**Draw.** With one weight v_c per bootstrap cluster, the bootstrap sample is
y* = X b_r + D a_r + v o u_r (o: row by row, v_c on cluster c's rows). Its fixed-effects
fit, by Frisch-Waugh-Lovell (X~'WD = 0), has

    b* - b_r = delta(v) = B sum_h v_c(h) s_h,
    u* = M_X~ (v o u_r - D alpha(v)),   alpha(v) the (weighted) effects of v o u_r,
    g*_h = X~_h'W u*_h = v_c(h) s_h - C_h alpha(v) - Q_h,xx delta(v).

*Every effect nested in the bootstrap clusters* (each level inside one cluster): a level's
u_r sum to zero and share one v, so D'W(v o u_r) = 0, alpha = 0 and
g*_h = v_c(h) s_h - Q_h,xx delta(v): exact, from the Q_h alone (MacKinnon 2023).

*Effects that cut across the bootstrap clusters* (one-way clustering only; at most one
other effect, nested): with D_x the T levels that cut across and D_n the nested effect,
D_n'W(v o u_r) is still 0, so alpha_x = Sigma^+ sum_c v_c U_c, where U_c = D_x'W u_r over
cluster c's rows, Sigma = D_x'W M_n D_x = D_x'WD_x - N' diag(1/W_l) N (N the weight of each
(nested level, cut-across level) pair; without a nested effect N = 0), and Sigma^+ its
pseudo-inverse (any solution gives the same D alpha). In cluster c, X~_c'W D_l = 0 for a
nested level l (it lies inside c and X~ is orthogonal to D), so only C_c = X~_c'W D_x,
the per (cluster, cut-across level) sums, enters. Exact as well; the sums F_c,t =
sum_{i in c, level t} w_i e_i cost one pass over the demeaned rows, or none with one
nested effect n and one cut-across effect x: e = t - a_n - a_x (t the shifted columns), so

    F_c,t = T_c,t - W_c,t a_x,t - sum_{l in c} W_l,t a_n,l

from the per (cluster, level) weights W_c,t and sums T_c,t of the shifted columns (pass 2
grouped by cluster and level) and the table W_l,t of (nested level, cut-across level) pairs.

**Statistic.** For every combination S of cluster columns (one-way: one), the draw's scores
are summed per cluster of S and V* = sum_S (-1)^(|S|+1) f_S B (sum g g') B with the fit's
CR1 factors f_S = G_S/(G_S - 1) (N - 1)/(N - K - P_c(S)); a multi-way V* that is not
positive semi-definite has its negative eigenvalues set to zero, as in the fit.
t* = delta_k(v) / sqrt(V*_kk). With v = 1 this is the fit's own t = (b_k - b0)/s.e.
(alpha(1) = 0, delta(1) = b - b_r). The p-value is symmetric, the share of draws with
|t*| >= |t|; a draw whose |t*| equals |t| to 1e-9 relative counts (weights equal in every
cluster give |t*| = |t| exactly, and rounding must not decide them).

**Weights.** Rademacher (+1 or -1, each with probability 1/2) or Webb's six points
+-sqrt(1/2), +-1, +-sqrt(3/2), each 1/6. With Rademacher weights and 2^G <= the draws
asked for, every one of the 2^G sign vectors is used once instead (deterministic).
Pseudo-random weights come from numpy's PCG64 generator seeded with ``seed``, one 64-bit
draw per weight in draw order, so the same seed gives the same weights on any engine and
thread count.

**Cost.** Per draw O(H K^2) for the scores (H cells), plus O(G^2 K) with effects that cut
across (C_c Sigma^+ U' is formed once per hypothesis, G x K x G, at O(G^2 T K)); the draws
run in blocks of weight vectors. Nothing here reads a row.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterator

import numpy as np
from scipy import linalg, sparse

from ..errors import BigPanelError
from ..options import BOOTSTRAP_WEIGHTS
WEBB_POINTS = np.array([-np.sqrt(1.5), -1.0, -np.sqrt(0.5), np.sqrt(0.5), 1.0, np.sqrt(1.5)])
FEW_FOR_WEBB = 12  # Webb weights by default at or below this many clusters (Webb 2023)
TIE = 1e-9  # |t*| within this relative distance of |t| counts as at least as large
BLOCK_CELLS = 1 << 22  # numbers in one block of draw scores (draws x cells x K)
SCHUR_RTOL = 1e-10  # eigenvalues of Sigma below this share of the largest are its null space


@dataclass(frozen=True)
class CrossEffects:
    """Effects that cut across the bootstrap clusters: ``sums[c, t, :]`` = F_c,t (G x T x m)
    and ``schur_pinv`` = Sigma^+ (T x T) of the module docstring."""

    sums: np.ndarray
    schur_pinv: np.ndarray


@dataclass(frozen=True)
class ClusterSums:
    """What a draw needs: per cell, ``q[h]`` = Q_h (m x m) and ``codes[h, j]`` its cluster in
    each cluster column j; ``boot`` the bootstrap column; the terms (combinations of columns,
    with their CR1 factors) and the effects that cut across (None when all are nested)."""

    q: np.ndarray
    codes: np.ndarray
    boot: int
    terms: list[tuple[int, ...]]
    factors: list[float]
    cross: CrossEffects | None = None

    @property
    def clusters(self) -> int:
        return int(self.codes[:, self.boot].max()) + 1


@dataclass(frozen=True)
class Draws:
    """The weights: ``kind``, how many draws, whether every sign vector was enumerated, the seed."""

    kind: str
    count: int
    enumerated: bool
    seed: int | None
    clusters: int

    def blocks(self, size: int) -> Iterator[np.ndarray]:
        """The weight vectors (draws x G) in blocks of ``size`` rows, always in the same order."""
        g = self.clusters
        if self.enumerated:
            for start in range(0, self.count, size):
                idx = np.arange(start, min(start + size, self.count))
                yield 1.0 - 2.0 * ((idx[:, None] >> np.arange(g)[None, :]) & 1)
            return
        rng = np.random.Generator(np.random.PCG64(self.seed))
        for start in range(0, self.count, size):
            u = rng.random((min(size, self.count - start), g))
            yield np.where(u < 0.5, -1.0, 1.0) if self.kind == "rademacher" else WEBB_POINTS[(u * 6).astype(int)]


def plan_draws(clusters: int, count: int, kind: str | None, seed: int | None) -> Draws:
    """The weights for ``clusters`` bootstrap clusters: ``kind`` (default Webb at 12 clusters or
    fewer, else Rademacher), ``count`` draws, all 2^G sign vectors when Rademacher and 2^G <= count;
    a missing seed is drawn from the operating system and reported."""
    if count < 99:
        raise BigPanelError(f"--draws {count}: the bootstrap needs at least 99 draws (9,999 is the default)")
    kind = kind or ("webb" if clusters <= FEW_FOR_WEBB else "rademacher")
    if kind not in BOOTSTRAP_WEIGHTS:
        raise BigPanelError(f"--bootstrap-weights {kind!r}: choose one of {', '.join(BOOTSTRAP_WEIGHTS)}")
    if kind == "rademacher" and clusters < 63 and 2**clusters <= count:
        return Draws(kind, 2**clusters, True, None, clusters)
    if seed is None:
        seed = int(np.random.SeedSequence().entropy % (2**63))
    elif seed < 0:
        raise BigPanelError(f"--seed {seed}: give a whole number of 0 or more")
    return Draws(kind, count, False, int(seed), clusters)


@dataclass(frozen=True)
class Hypothesis:
    """H0: b_k = b0 for kept regressor k: the restricted weights omega on the m columns."""

    k: int
    value: float
    omega: np.ndarray


def restricted(q: np.ndarray, keep: list[int], k: int, value: float = 0.0) -> Hypothesis:
    """omega = (1, -b_r) from the total cross-products ``q`` (m x m) with b_k fixed at ``value``."""
    omega = np.zeros(q.shape[0])
    omega[0] = 1.0
    omega[keep[k]] = -value
    rest = [j for a, j in enumerate(keep) if a != k]
    if rest:
        target = q[rest, 0] - value * q[rest, keep[k]]
        s = np.sqrt(np.diag(q)[rest])
        b_r = linalg.lstsq(q[np.ix_(rest, rest)] / np.outer(s, s), target / s, cond=None)[0] / s
        omega[rest] = -b_r
    return Hypothesis(k, value, omega)


def _term_maps(sums: ClusterSums) -> list[sparse.csr_matrix | None]:
    """For each term, the (clusters of S) x cells matrix that adds cell scores into S's clusters
    (None for the finest term, whose clusters are the cells)."""
    width = sums.codes.shape[1]
    maps: list[sparse.csr_matrix | None] = []
    for cols in sums.terms:
        if len(cols) == width:
            maps.append(None)
            continue
        _, ids = np.unique(sums.codes[:, list(cols)], axis=0, return_inverse=True)
        ids = ids.ravel()
        h = len(ids)
        maps.append(sparse.csr_matrix((np.ones(h), (ids, np.arange(h))), shape=(int(ids.max()) + 1, h)))
    return maps


class WildScores:
    """The draws' scores and t statistics for one hypothesis (the formulas of the module docstring)."""

    def __init__(self, sums: ClusterSums, keep: list[int], bread: np.ndarray, hyp: Hypothesis) -> None:
        self.sums, self.bread, self.k = sums, bread, hyp.k
        self.cell = sums.codes[:, sums.boot]
        self.s = sums.q[:, keep, :] @ hyp.omega  # H x K
        self.qxx = sums.q[:, keep][:, :, keep]  # H x K x K
        self.maps = _term_maps(sums)
        self.cross: np.ndarray | None = None
        if sums.cross is not None:
            f = sums.cross.sums
            pre = (f @ hyp.omega) @ sums.cross.schur_pinv  # G x T: alpha_x(v) = v @ pre
            c = f[self.cell][:, :, keep]  # H x T x K: X~_h'W D_x (one-way: the cells are the clusters)
            self.cross = c.transpose(0, 2, 1) @ pre.T  # H x K x G: C_h alpha_x(v) = cross @ v
        self.linear = self._linear() if len(sums.terms) == 1 else None

    def _linear(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """One cluster column: delta_k(v) = v @ num and r'g*_h(v) = v_c(h) a_h - (m v)_h (r = row k of B),
        linear maps of the weights, so that a block of draws costs two matrix products."""
        h = len(self.s)
        agg = np.zeros((self.sums.clusters, h))
        agg[self.cell, np.arange(h)] = 1.0
        sb = (agg @ self.s) @ self.bread  # G x K: delta(v) = v @ sb
        r = self.bread[self.k]
        m = np.einsum("hkj,j->hk", self.qxx, r) @ sb.T  # H x G: r'Q_h delta(v)
        if self.cross is not None:
            m += np.einsum("hkg,k->hg", self.cross, r)
        return sb[:, self.k], self.s @ r, m

    def t(self, v: np.ndarray) -> np.ndarray:
        """t* for each weight vector (rows of ``v``)."""
        if self.linear is not None:
            num, a, m = self.linear
            phi = v[:, self.cell] * a - v @ m.T
            with np.errstate(divide="ignore", invalid="ignore"):
                return (v @ num) / np.sqrt(self.sums.factors[0] * np.einsum("rh,rh->r", phi, phi))
        vh = v[:, self.cell]
        delta = (vh @ self.s) @ self.bread  # draws x K
        g = vh[:, :, None] * self.s[None] - np.einsum("hkj,rj->rhk", self.qxx, delta)
        if self.cross is not None:
            g -= np.einsum("hkg,rg->rhk", self.cross, v)
        var = np.zeros((len(v),) + self.bread.shape)
        for cols, factor, agg in zip(self.sums.terms, self.sums.factors, self.maps):
            if agg is not None:
                r, h, kk = g.shape
                g_s = (agg @ g.transpose(1, 0, 2).reshape(h, r * kk)).reshape(-1, r, kk).transpose(1, 0, 2)
            else:
                g_s = g
            var += (-1) ** (len(cols) + 1) * factor * np.einsum("rgk,rgl->rkl", g_s, g_s)
        var = self.bread @ var @ self.bread
        if len(self.sums.terms) > 1:
            eig, vec = np.linalg.eigh((var + var.transpose(0, 2, 1)) / 2)
            var = (vec * np.maximum(eig, 0.0)[:, None, :]) @ vec.transpose(0, 2, 1)
        with np.errstate(divide="ignore", invalid="ignore"):
            return delta[:, self.k] / np.sqrt(var[:, self.k, self.k])


@dataclass(frozen=True)
class BootstrapTest:
    """One tested coefficient: the fit's t, its bootstrap p-value and the draws' t statistics."""

    k: int
    t: float
    p_value: float
    t_draws: np.ndarray


def block_size(sums: ClusterSums, keep: list[int]) -> int:
    """Weight vectors per block, so that a block holds about ``BLOCK_CELLS`` numbers."""
    h = len(sums.q)
    per_draw = h + sums.clusters if len(sums.terms) == 1 else 2 * h * max(len(keep), 1)
    return max(16, BLOCK_CELLS // per_draw)


def wild_tests(sums: ClusterSums, keep: list[int], bread: np.ndarray, tested: list[int], t_fit: np.ndarray,
               draws: Draws) -> list[BootstrapTest]:
    """The restricted wild cluster bootstrap-t p-values of H0: b_k = 0 for every k in ``tested``
    (``t_fit[k]`` the fit's t), all from the same draws, made once (module docstring)."""
    total = sums.q.sum(axis=0)
    scores = [WildScores(sums, keep, bread, restricted(total, keep, k)) for k in tested]
    t_draws: list[list[np.ndarray]] = [[] for _ in tested]
    for v in draws.blocks(block_size(sums, keep)):
        for out, sc in zip(t_draws, scores):
            out.append(sc.t(v))
    results = []
    for k, parts in zip(tested, t_draws):
        t = np.concatenate(parts)
        extreme = np.abs(t) >= np.abs(t_fit[k]) * (1.0 - TIE)
        results.append(BootstrapTest(k, float(t_fit[k]), float(np.mean(extreme)), t))
    return results


def pair_block(cross: dict[tuple[int, int], sparse.csr_matrix], d: int, e: int) -> sparse.csr_matrix:
    """The weights of the (level of d, level of e) pairs from the pair tables kept for d < e."""
    return cross[(d, e)] if d < e else cross[(e, d)].T.tocsr()


def cut_across_sigma(counts: list[np.ndarray], cross: dict[tuple[int, int], sparse.csr_matrix],
                     nested: int | None, dims: list[int]) -> np.ndarray:
    """Sigma for the effects ``dims`` that cut across the clusters, with at most one ``nested``
    effect: Sigma = D_x'WD_x - N' diag(1/W_l) N from the level weights ``counts`` and the pair
    tables ``cross[(d, e)]`` (d < e)."""
    sigma = linalg.block_diag(*[np.diag(counts[d]) for d in dims])
    offsets = np.concatenate([[0], np.cumsum([len(counts[d]) for d in dims])])
    for a, d in enumerate(dims):
        for b, e in enumerate(dims):
            if a != b:
                sigma[offsets[a]:offsets[a + 1], offsets[b]:offsets[b + 1]] = pair_block(cross, d, e).toarray()
    if nested is not None:  # N' diag(1/W) N by dense blocks of levels (a sparse product is far slower here)
        n = sparse.hstack([pair_block(cross, nested, d) for d in dims]).tocsr()
        step = max(1, BLOCK_CELLS // n.shape[1])
        for start in range(0, n.shape[0], step):
            part = n[start:start + step].toarray()
            sigma -= part.T @ (part / counts[nested][start:start + step, None])
    return sigma


def cut_across_sums(shifted: np.ndarray, weight: np.ndarray, home: np.ndarray, nested: np.ndarray,
                    cut: np.ndarray, table: sparse.csr_matrix, runs: np.ndarray | None) -> np.ndarray:
    """F_c,t of the module docstring (G x T x m) with one nested and one cut-across effect and
    no pass: ``shifted`` = T_c,t (G x T x m) and ``weight`` = W_c,t (G x T), ``home`` each nested
    level's cluster, ``nested`` and ``cut`` the solved effects (levels x m), and W_l,t the
    pair table: ``table``, or ``runs`` 1' - ``table`` when ``runs`` is given (a table kept as
    its missing cells). The last term is W'V with V[l, (home_l, j)] = a_n,l,j, one sparse product."""
    g, levels, m = shifted.shape
    rows = len(home)
    v = sparse.csr_matrix((nested.ravel(), (np.repeat(np.arange(rows), m), (home[:, None] * m + np.arange(m)).ravel())),
                          shape=(rows, g * m))
    inside = (table.T @ v).toarray()
    if runs is not None:
        inside = (v.T @ runs)[None, :] - inside
    return shifted - weight[:, :, None] * cut[None, :, :] - inside.reshape(levels, g, m).transpose(1, 0, 2)


def pseudo_inverse(sigma: np.ndarray) -> np.ndarray:
    """Sigma^+, eigenvalues below ``SCHUR_RTOL`` of the largest taken as its null space."""
    eig, vec = np.linalg.eigh((sigma + sigma.T) / 2)
    keep = eig > SCHUR_RTOL * eig[-1]
    return (vec[:, keep] / eig[keep]) @ vec[:, keep].T
