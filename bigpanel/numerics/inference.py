"""Variance estimators, degrees of freedom and tests for the within slopes.

With N rows, K kept slopes and P absorbed effect parameters (see
:mod:`bigpanel.dof`), and bread B = (X~'X~)^-1:

* ``iid``: V = s^2 B, s^2 = RSS / (N - K - P); t tests on N - K - P df.
* ``hc1``: V = N / (N - K - P) * B (sum_i u_i^2 x~_i x~_i') B; t on N - K - P df.
* ``cluster`` (CR1): V = G/(G - 1) * (N - 1)/(N - K - P_c) * B (sum_c g_c g_c') B,
  g_c = sum_{i in c} u_i x~_i, G clusters; P_c counts the absorbed parameters of
  effects not nested in the cluster, plus one for the intercept when some are
  nested; t tests on G - 1 df.
* ``cluster`` on two or more columns (Cameron, Gelbach and Miller's
  inclusion-exclusion): V = sum over non-empty sets S of cluster columns of
  (-1)^(|S|+1) V_S, where V_S is the CR1 matrix clustering by the combination S
  (with its own G_S and P_c(S)); t tests on min_j G_j - 1 df. When V is not
  positive semi-definite its negative eigenvalues are set to zero, and the
  result says so.

The F statistic tests that all slopes are zero: (b' V^-1 b) / K on (K, df).
For ``iid`` this equals the classical ((TSS_within - RSS) / K) / s^2.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import linalg, stats

from ..passes.moments import ClusterTerm
from .dof import Absorbed
from ..errors import BigPanelError


@dataclass(frozen=True)
class Inference:
    """Variance matrix and the tests that follow from it."""

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
    psd_fixed: bool = False


def infer(
    beta: np.ndarray,
    bread: np.ndarray,
    rss: float,
    n: int,
    absorbed: Absorbed,
    vcov: str,
    meat: np.ndarray | None = None,
    cluster_terms: list[ClusterTerm] | None = None,
    cluster_names: tuple[str, ...] = (),
    level: float = 0.95,
    mean_weight: float = 1.0,
) -> Inference:
    """Standard errors, t and p values, intervals and the F test; see the module docstring.

    ``sigma`` is the residual standard error of a row of mean weight,
    sqrt(sum_i w_i u_i^2 / (wbar df)) with wbar = ``mean_weight`` (1 unweighted), so
    that it does not change when every weight is multiplied by the same number
    (the variances do not either: s^2 and (X'WX)^-1 scale oppositely).
    """
    k = len(beta)
    df_resid = n - k - absorbed.total
    if df_resid <= 0:
        raise BigPanelError(
            f"no residual degrees of freedom: {n} rows, {k} slopes and {absorbed.total} absorbed effect parameters"
        )
    sigma2 = rss / df_resid
    if vcov == "iid":
        factor = sigma2
        v = sigma2 * bread
        df = float(df_resid)
    elif vcov == "hc1":
        factor = n / df_resid
        v = factor * bread @ meat @ bread
        df = float(df_resid)
    else:
        v = np.zeros_like(bread)
        factor = 1.0
        for term in cluster_terms or []:
            g = term.n_clusters
            if g < 2:
                name = " x ".join(cluster_names[j] for j in term.columns)
                raise BigPanelError(
                    f"cluster column {name!r} takes a single value: cluster-robust errors need two or more clusters"
                )
            c = (g / (g - 1)) * ((n - 1) / (n - k - absorbed.cluster_total(term.columns)))
            v += (-1) ** (len(term.columns) + 1) * c * bread @ term.meat @ bread
            if len(cluster_terms) == 1:
                factor = c
        df = float(min(t.n_clusters for t in cluster_terms if len(t.columns) == 1) - 1)
    v = (v + v.T) / 2.0
    psd_fixed = False
    if vcov == "cluster" and len(cluster_terms or []) > 1:
        eig, vec = np.linalg.eigh(v)
        if eig.min() < 0:
            v = (vec * np.maximum(eig, 0.0)) @ vec.T
            psd_fixed = True
    se = np.sqrt(np.maximum(np.diag(v), 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        t = beta / se
    p = 2.0 * stats.t.sf(np.abs(t), df)
    crit = stats.t.ppf(0.5 + level / 2.0, df)
    if k:
        wald = float(beta @ linalg.pinvh(v) @ beta) / k
        f_p = float(stats.f.sf(wald, k, df))
    else:
        wald, f_p = float("nan"), float("nan")
    return Inference(
        vcov=v,
        std_error=se,
        t=t,
        p=p,
        ci_low=beta - crit * se,
        ci_high=beta + crit * se,
        df=df,
        f_stat=wald,
        f_df=(float(k), df),
        f_p=f_p,
        sigma=float(np.sqrt(sigma2 / mean_weight)),
        small_sample=float(factor if vcov != "iid" else 1.0),
        psd_fixed=psd_fixed,
    )
