"""The variances of an IV fit and of its auxiliary regressions, from one set of raw meats.

An IV fit needs the variance of several linear regressions on the same demeaned
columns: the k-class fit itself, the first stage of each endogenous regressor (X2_l on
Zf = [X1, Z]; jointly, for the Kleibergen-Paap statistic) and the reduced form of y on Zf
(the Anderson-Rubin test). Each is a residual over the value columns with a map to its
score columns (:class:`~bigpanel.passes.moments.Residuals`), so the raw meats of all of
them come at once: from one pass over the rows (HC1) or from the per-cluster
cross-products (CR1, no pass). The residuals are laid out as: the fit's (``FIT``), one
first stage per endogenous regressor (``FIRST + l``), the reduced form (last). Every
variance then follows the within fit's rules (:func:`bigpanel.numerics.inference.infer`),
with k the regressors of its own regression.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from scipy import linalg

from ..passes.moments import ClusterTerm, Residuals, mapped
from .dof import Absorbed
from .inference import Inference, infer
from .kclass import KClass

FIT, FIRST = 0, 1


def coefficients(q: np.ndarray, on: list[int], cols: list[int]) -> np.ndarray:
    """Least-squares coefficients of ``cols`` on ``on`` from the cross-products, Q_oo^-1 Q_oc,
    solved on the columns scaled to unit sum of squares."""
    idx = on + cols
    s = 1.0 / np.sqrt(np.diag(q)[idx])
    qs = q[np.ix_(idx, idx)] * np.outer(s, s)
    k = len(on)
    return linalg.lstsq(qs[:k, :k], qs[:k, k:], cond=None)[0] * np.outer(s[:k], 1.0 / s[k:])


def inverse(q: np.ndarray, cols: list[int]) -> np.ndarray:
    """(Q_cc)^-1, through the columns scaled to unit sum of squares."""
    s = 1.0 / np.sqrt(np.diag(q)[cols])
    return linalg.pinvh(q[np.ix_(cols, cols)] * np.outer(s, s)) * np.outer(s, s)


def selection(m: int, cols: list[int]) -> np.ndarray:
    """The m x len(cols) map whose scores are the columns ``cols`` themselves (OLS on them)."""
    out = np.zeros((m, len(cols)))
    out[cols, range(len(cols))] = 1.0
    return out


def iv_residuals(q: np.ndarray, fit: KClass) -> Residuals:
    """The fit's residual, each first stage's and the reduced form's, over the m value columns;
    the scores live on Zf (and, for LIML, on the endogenous regressors too). Only the meats that
    are used are summed: each residual's own, and the first stages' with one another (KP)."""
    m, zf = len(q), fit.instruments
    cols = [fit.residual(m)]
    for j in fit.endogenous:
        v = np.zeros(m)
        v[j] = 1.0
        v[zf] -= fit.pi[:, fit.regressors.index(j)]
        cols.append(v)
    reduced = np.zeros(m)
    reduced[0] = 1.0
    reduced[zf] -= coefficients(q, zf, [0])[:, 0]
    cols.append(reduced)
    support = sorted(set(zf) | (set(fit.endogenous) if fit.kappa != 1.0 else set()))
    stages = range(FIRST, FIRST + len(fit.endogenous))
    blocks = ((FIT, FIT), *((a, b) for a in stages for b in stages if a <= b), (len(cols) - 1, len(cols) - 1))
    return Residuals(np.column_stack(cols), support, blocks)


@dataclass(frozen=True)
class RawMeats:
    """Raw meats of :func:`iv_residuals` under the variance ``kind`` (``raw`` for HC1, ``terms``
    for CR1, neither for classical) and what the variance rules need."""

    kind: str
    residuals: Residuals
    n: int
    absorbed: Absorbed
    cluster_names: tuple[str, ...]
    mean_weight: float
    raw: np.ndarray | None = None
    terms: tuple[ClusterTerm, ...] = ()

    def _maps(self, maps: dict[int, np.ndarray]) -> list[np.ndarray]:
        s = self.residuals.support
        return [maps[a][s] if a in maps else np.zeros((len(s), 0)) for a in range(self.residuals.count)]

    def infer(self, beta: np.ndarray, bread: np.ndarray, rss: float, maps: dict[int, np.ndarray],
              k: int | None = None) -> Inference:
        """The inference of coefficients ``beta`` whose scores are residual a's mapped by ``maps[a]``
        (m x k_a over the value columns), stacked in residual order."""
        chosen = self._maps(maps)
        meat = mapped(self.raw, chosen) if self.kind == "hc1" else None
        terms = [replace(t, meat=mapped(t.meat, chosen)) for t in self.terms]
        return infer(beta, bread, rss, self.n, self.absorbed, self.kind, meat=meat, cluster_terms=terms,
                     cluster_names=self.cluster_names, mean_weight=self.mean_weight, k=k)

    def summed(self, maps: dict[int, np.ndarray]) -> np.ndarray:
        """The meat without small-sample factors: sum_i w_i^2 u_i^2 s_i s_i' (HC1) or the
        inclusion-exclusion sum of the cluster terms' meats (CR1)."""
        chosen = self._maps(maps)
        if self.kind == "hc1":
            return mapped(self.raw, chosen)
        return sum((-1) ** (len(t.columns) + 1) * mapped(t.meat, chosen) for t in self.terms)
