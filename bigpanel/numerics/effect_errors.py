"""Standard errors of the estimated effects: what is identified, and how precisely.

**One effect.** Level g's intercept is a_g = ybar_g - xbar_g'b, with ybar_g, xbar_g the
level's (weighted) means and W_g its weight (its rows when unweighted). It is the
coefficient of level g's dummy in the regression with a dummy for every level and no
constant, so its variances are that regression's:

* classical: Var(a_g) = s^2 / W_g + xbar_g' V xbar_g with V = s^2 (X~'WX~)^-1 the classical
  variance of the slopes and s^2 = RSS / (N - K - P). The covariance of ybar_g and b is
  zero under the model: Cov(b, ybar_g) = s^2 (X~'WX~)^-1 X~'W 1_g / W_g, and X~'W 1_g = 0
  because every demeaned regressor sums to zero within each level. It equals the diagonal
  of the partitioned inverse of the dummy regression's cross-products (the textbook
  algebra of the least-squares dummy variable model, e.g. Greene, Econometric Analysis,
  from memory), so it is the dummy coefficient's classical standard error exactly.
* clustered (CR1, one cluster column): cluster c moves a_g by psi_gc = R_gc / W_g -
  xbar_g' B g_c, with R_gc = sum_{i in g and c} w_i u_i, g_c = X~_c'W u_c the cluster's
  score and B = (X~'WX~)^-1; Var(a_g) = f sum_c psi_gc^2 with the fit's CR1 factor f.
  That is the dummy regression's CR1 variance of the dummy coefficient (its factor counts
  every dummy when the effect is not nested in the clusters, as the fit's does). A level
  that lies inside one cluster has R_gc = 0 there (its residuals sum to zero), so the
  error of its own mean is invisible to a cluster-robust variance: it gets no clustered
  standard error (and an effect nested in the clusters gets none at all).

**Two or more effects.** Each level's effect is identified only up to the normalisation
(see :mod:`bigpanel.numerics.effects`): adding a constant to one effect and removing it
from another changes no fitted value, so a standard error of a single level's effect
would describe the normalisation, not the data. None are reported.
"""

from __future__ import annotations

import numpy as np

from ..passes.bootstrap import PairSums

CLASSICAL = ("classical, the dummy regression's: s^2 / W_g + xbar_g' V xbar_g with V = s^2 (X~'WX~)^-1 "
             "(ybar_g and the slopes are uncorrelated)")
CLUSTERED = ("CR1, the dummy regression's: f sum_c (R_gc / W_g - xbar_g' B g_c)^2; none for a level inside one "
             "cluster, whose own mean error a cluster-robust variance cannot see")
NOT_IDENTIFIED = ("two or more effects: each level's effect is identified only up to the normalisation (a constant "
                  "moved between effects changes no fitted value), so no standard errors are reported")


def classical_errors(xbar: np.ndarray, weight: np.ndarray, s2: float, bread: np.ndarray) -> np.ndarray:
    """sqrt(s^2 / W_g + xbar_g' (s^2 B) xbar_g) for every level (``xbar``: levels x K)."""
    return np.sqrt(s2 / weight + s2 * np.einsum("gk,kl,gl->g", xbar, bread, xbar))


def clustered_errors(xbar: np.ndarray, weight: np.ndarray, pairs: PairSums, omega: np.ndarray,
                     scores: np.ndarray, bread: np.ndarray, factor: float) -> np.ndarray:
    """The CR1 standard error of every level (module docstring): ``pairs`` holds the per (cluster,
    level) sums of the demeaned columns, whose residual sums are R_gc = sums @ ``omega`` with omega
    = (1, -b); ``scores`` the clusters' g_c (clusters x K). NaN for a level inside one cluster."""
    z = xbar @ bread @ scores.T  # levels x clusters: xbar_g' B g_c
    r = pairs.sums @ omega
    own = r / weight[pairs.level]
    total = np.einsum("gc,gc->g", z, z)  # every cluster's slope part
    np.add.at(total, pairs.level, own**2 - 2.0 * own * z[pairs.level, pairs.cluster])
    spans = np.bincount(pairs.level, minlength=len(weight))
    return np.where(spans > 1, np.sqrt(factor * np.maximum(total, 0.0)), np.nan)
