"""Tests that come with an IV fit: overidentifying restrictions and Anderson-Rubin.

With Zf = [X1, Z] every instrument, u the fit's residuals and g = Zf'Wu:

* Overidentification (more excluded instruments L than endogenous regressors m; df L - m):
  under classical errors Sargan's (1958) statistic N g'(Zf'WZf)^-1 g / u'Wu; otherwise
  Hansen's (1982) J, the minimised two-step efficient GMM criterion
  J = g2' S^-1 g2 with S the meat of the fit's residuals on Zf (sum of w^2 u^2 zf zf', or the
  clusters' summed scores, with inclusion-exclusion for several cluster columns; no
  small-sample factor), b2 = (X'WZf S^-1 Zf'WX)^-1 X'WZf S^-1 Zf'Wy and g2 = Zf'W(y - X b2).
  S is taken with its negative eigenvalues set to zero and inverted on the rest.
* Anderson and Rubin (1949): the test that every endogenous coefficient is zero, the
  F test that the excluded instruments' coefficients are zero in the reduced form of y on
  Zf, under the fit's variance, on (L, df) degrees of freedom; it keeps its size however
  weak the instruments are.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy import linalg, stats

from .inference import with_variance
from .iv_variance import FIT, RawMeats, coefficients, inverse, selection
from .kclass import KClass


def _psd_inverse(a: np.ndarray) -> np.ndarray:
    w, v = np.linalg.eigh((a + a.T) / 2.0)
    keep = w > w.max() * 1e-12
    return (v[:, keep] / w[keep]) @ v[:, keep].T


def overidentification(q: np.ndarray, fit: KClass, meats: RawMeats) -> dict[str, Any] | None:
    """Sargan's or Hansen's statistic (see the module docstring); None when exactly identified."""
    df = len(fit.excluded) - len(fit.endogenous)
    if df <= 0:
        return None
    m, zf, x = len(q), fit.instruments, fit.regressors
    u = fit.residual(m)
    if meats.kind == "classical":
        g = q[zf] @ u
        stat, test = meats.n * float(g @ inverse(q, zf) @ g) / float(u @ q @ u), "Sargan"
    else:
        s_inv = _psd_inverse(meats.summed({FIT: selection(m, zf)}))
        qxz = q[np.ix_(x, zf)]
        b2 = linalg.lstsq(qxz @ s_inv @ qxz.T, qxz @ s_inv @ q[zf, 0], cond=None)[0]
        g2 = q[zf, 0] - qxz.T @ b2
        stat, test = float(g2 @ s_inv @ g2), "Hansen J"
    return {"test": test, "statistic": stat, "df": df, "p_value": float(stats.chi2.sf(stat, df))}


def anderson_rubin(q: np.ndarray, fit: KClass, meats: RawMeats) -> dict[str, Any]:
    """The Anderson-Rubin F test that every endogenous coefficient is zero (module docstring)."""
    m, zf = len(q), fit.instruments
    delta = coefficients(q, zf, [0])[:, 0]
    r = np.zeros(m)
    r[0], r[zf] = 1.0, -delta
    inf = meats.infer(delta, inverse(q, zf), float(r @ q @ r), {meats.residuals.count - 1: selection(m, zf)})
    inf = with_variance(inf, delta, inf.vcov, tested=list(range(len(fit.exogenous), len(zf))))
    return {"null": "every endogenous coefficient is 0", "statistic": inf.f_stat, "df": list(inf.f_df),
            "p_value": inf.f_p}
