"""Variance estimators, degrees of freedom and tests for the slopes.

With N rows, K kept slopes and P absorbed effect parameters (see
:mod:`bigpanel.numerics.dof`), and bread B = (X~'X~)^-1:

* ``classical``: V = s^2 B, s^2 = RSS / (N - K - P); t tests on N - K - P df.
* ``hc1``: V = N / (N - K - P) * B (sum_i u_i^2 x~_i x~_i') B; t on N - K - P df.
* ``cr1``: V = G/(G - 1) * (N - 1)/(N - K - P_c) * B (sum_c g_c g_c') B,
  g_c = sum_{i in c} u_i x~_i, G clusters; P_c counts the absorbed parameters of
  effects not nested in the cluster, plus one for the intercept when some are
  nested; t tests on G - 1 df.
* ``cr1`` on two or more columns (Cameron, Gelbach and Miller's
  inclusion-exclusion): V = sum over non-empty sets S of cluster columns of
  (-1)^(|S|+1) V_S, where V_S is the CR1 matrix clustering by the combination S
  (with its own G_S and P_c(S)); t tests on min_j G_j - 1 df. When V is not
  positive semi-definite its negative eigenvalues are set to zero, and the
  result says so.

The F statistic tests that all slopes are zero: (b' V^-1 b) / K on (K, df).
For ``classical`` this equals the classical ((TSS_within - RSS) / K) / s^2.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from scipy import linalg, stats

from ..errors import BigPanelError
from ..passes.moments import ClusterTerm
from .dof import Absorbed


@dataclass(frozen=True)
class Inference:
    """Variance matrix and the tests that follow from it.

    ``kind`` is ``classical``, ``hc1`` or ``cr1``; ``clusters`` the number of clusters of
    each cluster column (empty unless ``cr1``); ``sigma`` the residual standard error;
    ``small_sample`` the factor applied to the sandwich (1 for ``classical``).
    """

    kind: str
    vcov: np.ndarray
    std_error: np.ndarray
    t: np.ndarray
    p: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    df: float
    f_stat: float
    f_df: tuple[float, float]
    f_p: float
    sigma: float
    small_sample: float
    clusters: dict[str, int]
    psd_fixed: bool = False


def with_variance(inf: Inference, beta: np.ndarray, vcov: np.ndarray, tested: list[int] | None = None,
                  level: float = 0.95) -> Inference:
    """``inf`` with the variance ``vcov`` of ``beta`` and the t tests, intervals and F test that
    follow on ``inf.df`` degrees of freedom; the F test covers the coefficients ``tested``
    (default all): (b_S' V_S^-1 b_S) / |S| on (|S|, df)."""
    se = np.sqrt(np.maximum(np.diag(vcov), 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        t = beta / se
    crit = stats.t.ppf(0.5 + level / 2.0, inf.df)
    tested = list(range(len(beta))) if tested is None else tested
    if tested:
        b = beta[tested]
        wald = float(b @ linalg.pinvh(vcov[np.ix_(tested, tested)]) @ b) / len(tested)
        f_p = float(stats.f.sf(wald, len(tested), inf.df))
    else:
        wald, f_p = float("nan"), float("nan")
    return replace(inf, vcov=vcov, std_error=se, t=t, p=2.0 * stats.t.sf(np.abs(t), inf.df),
                   ci_low=beta - crit * se, ci_high=beta + crit * se, f_stat=wald,
                   f_df=(float(len(tested)), inf.df), f_p=f_p)


def cluster_factor(g: int, n: int, k: int, absorbed: Absorbed, columns: tuple[int, ...]) -> float:
    """The CR1 factor G/(G - 1) * (N - 1)/(N - K - P_c) of one combination of cluster columns."""
    return (g / (g - 1)) * ((n - 1) / (n - k - absorbed.cluster_total(columns)))


def _cluster_sandwich(bread: np.ndarray, n: int, k: int, absorbed: Absorbed, terms: list[ClusterTerm],
                      names: tuple[str, ...]) -> tuple[np.ndarray, float, float]:
    """The CR1 variance (one or several cluster columns), its factor and its df (see the module docstring)."""
    v = np.zeros_like(bread)
    factor = 1.0
    for term in terms:
        g = term.n_clusters
        if g < 2:
            name = " x ".join(names[j] for j in term.columns)
            raise BigPanelError(
                f"cluster column {name!r} takes a single value: cluster-robust errors need two or more clusters"
            )
        c = cluster_factor(g, n, k, absorbed, term.columns)
        v += (-1) ** (len(term.columns) + 1) * c * bread @ term.meat @ bread
        if len(terms) == 1:
            factor = c
    return v, factor, float(min(t.n_clusters for t in terms if len(t.columns) == 1) - 1)


def infer(
    beta: np.ndarray,
    bread: np.ndarray,
    rss: float,
    n: int,
    absorbed: Absorbed,
    kind: str,
    meat: np.ndarray | None = None,
    cluster_terms: list[ClusterTerm] | None = None,
    cluster_names: tuple[str, ...] = (),
    mean_weight: float = 1.0,
    k: int | None = None,
) -> Inference:
    """Standard errors, t and p values, intervals and the F test; see the module docstring.

    ``k`` is the number of regressors that the degrees of freedom count (default
    ``len(beta)``; fewer when ``beta`` stacks the coefficients of several equations on the
    same k regressors, with a block-diagonal ``bread`` and their joint meat).

    ``sigma`` is the residual standard error of a row of mean weight,
    sqrt(sum_i w_i u_i^2 / (wbar df)) with wbar = ``mean_weight`` (1 unweighted), so
    that it does not change when every weight is multiplied by the same number
    (the variances do not either: s^2 and (X'WX)^-1 scale oppositely).
    """
    k = len(beta) if k is None else k
    df_resid = n - k - absorbed.total
    if df_resid <= 0:
        raise BigPanelError(
            f"no residual degrees of freedom: {n} rows, {k} slopes and {absorbed.total} absorbed effect parameters"
        )
    sigma2 = rss / df_resid
    terms = cluster_terms or []
    clusters: dict[str, int] = {}
    if kind == "classical":
        v, factor, df = sigma2 * bread, 1.0, float(df_resid)
    elif kind == "hc1":
        factor = n / df_resid
        v, df = factor * bread @ meat @ bread, float(df_resid)
    else:
        v, factor, df = _cluster_sandwich(bread, n, k, absorbed, terms, cluster_names)
        clusters = {cluster_names[t.columns[0]]: t.n_clusters for t in terms if len(t.columns) == 1}
    v = (v + v.T) / 2.0
    psd_fixed = False
    if kind == "cr1" and len(terms) > 1:
        eig, vec = np.linalg.eigh(v)
        if eig.min() < 0:
            v = (vec * np.maximum(eig, 0.0)) @ vec.T
            psd_fixed = True
    empty = np.zeros(0)
    base = Inference(kind, v, empty, empty, empty, empty, empty, df, float("nan"), (0.0, df), float("nan"),
                     float(np.sqrt(sigma2 / mean_weight)), float(factor), clusters, psd_fixed)
    return with_variance(base, beta, v)
