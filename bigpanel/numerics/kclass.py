"""k-class instrumental-variables estimates (2SLS and LIML) from the demeaned cross-products.

Q = E'WE holds the weighted cross-products of the demeaned value columns: the outcome
y, the regressors X = [X1 exogenous, X2 endogenous] (in the model's order) and the
excluded instruments Z. All instruments are Zf = [X1, Z]; P_Z projects on Zf and
M_Z = I - P_Z. The k-class estimate (Theil 1958; Nagar 1959) is

    b(kappa) = H^-1 X'(I - kappa M_Z) y,   H = X'(I - kappa M_Z) X = (1 - kappa) Q_xx + kappa Q_xz Q_zz^-1 Q_zx.

kappa = 1 is two-stage least squares. LIML (limited-information maximum likelihood,
Anderson and Rubin 1949) takes kappa as the smallest root of det(W1 - kappa W) = 0 with
Y = [y, X2], W = Y'M_Z Y (residuals on every instrument) and W1 = Y'M_X1 Y (on the
exogenous regressors only); kappa >= 1, and kappa = 1 when there are as many excluded
instruments as endogenous regressors, where LIML is 2SLS (textbook form: Davidson and
MacKinnon 1993, Estimation and Inference in Econometrics, section 18.5, from memory).

Residuals use the actual regressors, u = y - X b. The first-stage coefficients are
Pi = Q_zz^-1 Q_zx (Zf x X; an exogenous regressor is its own fitted value). With kappa
held at its estimate, b - beta = H^-1 sum_i ((1 - kappa) x_i + kappa xhat_i) w_i u_i with
xhat = Pi'zf, so the score map from value columns to score columns is
(1 - kappa) [X rows: I] + kappa [Zf rows: Pi] and the bread is H^-1; the classical
variance is s^2 H^-1 with s^2 = u'Wu / (N - K - P), the degrees of freedom of the
within fit. Everything is solved on the columns scaled to unit sum of squares.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import linalg

from .solve import condition_number


@dataclass(frozen=True)
class KClass:
    """A k-class fit. Index lists are value columns: ``regressors`` (X, model order),
    ``exogenous`` (X1) and ``endogenous`` (X2) among them, ``excluded`` (Z); ``pi`` holds the
    first-stage coefficients (rows ``instruments`` = X1 then Z, columns X)."""

    regressors: list[int]
    exogenous: list[int]
    endogenous: list[int]
    excluded: list[int]
    kappa: float
    beta: np.ndarray
    bread: np.ndarray
    pi: np.ndarray
    rss: float
    condition: float

    @property
    def instruments(self) -> list[int]:
        """Every instrument Zf: the exogenous regressors, then the excluded instruments."""
        return self.exogenous + self.excluded

    def score_map(self, m: int) -> np.ndarray:
        """The m x K map from value columns to score columns (see the module docstring)."""
        out = np.zeros((m, len(self.regressors)))
        out[self.regressors, :] += (1.0 - self.kappa) * np.eye(len(self.regressors))
        out[self.instruments, :] += self.kappa * self.pi
        return out

    def residual(self, m: int) -> np.ndarray:
        """The residual u = y - X b as coefficients over the m value columns."""
        r = np.zeros(m)
        r[0] = 1.0
        r[self.regressors] = -self.beta
        return r


def partial_out(q: np.ndarray, cols: list[int], on: list[int]) -> np.ndarray:
    """Cross-products of ``cols`` after projecting them on ``on``: Q_cc - Q_co Q_oo^-1 Q_oc."""
    block = q[np.ix_(cols, cols)]
    if not on:
        return block
    return block - q[np.ix_(cols, on)] @ linalg.lstsq(q[np.ix_(on, on)], q[np.ix_(on, cols)], cond=None)[0]


def liml_kappa(q: np.ndarray, exogenous: list[int], instruments: list[int], endogenous: list[int]) -> float:
    """The smallest root of det(Y'M_X1 Y - kappa Y'M_Z Y) = 0, Y = [y, X2] (Anderson and Rubin 1949)."""
    ys = [0, *endogenous]
    w = partial_out(q, ys, instruments)
    w1 = partial_out(q, ys, exogenous)
    return float(linalg.eigh(w1, w, eigvals_only=True)[0])


def kclass(q: np.ndarray, regressors: list[int], endogenous: list[int], excluded: list[int],
           liml: bool) -> KClass:
    """The k-class fit of column 0 of ``q`` on ``regressors`` (``endogenous`` among them)
    with the excluded instruments ``excluded``: 2SLS, or LIML when ``liml``."""
    exogenous = [j for j in regressors if j not in endogenous]
    zf = exogenous + excluded
    s = 1.0 / np.sqrt(np.diag(q))
    qs = q * np.outer(s, s)
    kappa = liml_kappa(qs, exogenous, zf, endogenous) if liml else 1.0
    pi_s = linalg.lstsq(qs[np.ix_(zf, zf)], qs[np.ix_(zf, regressors)], cond=None)[0]
    projected = qs[np.ix_(regressors, zf)] @ pi_s
    h = (1.0 - kappa) * qs[np.ix_(regressors, regressors)] + kappa * projected
    rhs = (1.0 - kappa) * qs[regressors, 0] + kappa * pi_s.T @ qs[zf, 0]
    sx = s[regressors]
    beta = linalg.lstsq(h, rhs, cond=None)[0] * sx / s[0]
    bread = linalg.pinvh(h) * np.outer(sx, sx)
    pi = pi_s * np.outer(s[zf], 1.0 / sx)
    r = np.zeros(len(q))
    r[0], r[regressors] = 1.0, -beta
    d = np.sqrt(np.abs(np.diag(h)))
    return KClass(regressors, exogenous, endogenous, excluded, kappa, beta, bread, pi, max(float(r @ q @ r), 0.0),
                  condition_number(h / np.outer(d, d)))
