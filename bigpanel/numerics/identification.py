"""First stages and the strength of the instruments: partial F, Cragg-Donald, Kleibergen-Paap.

With the effects and the exogenous regressors X1 partialled out (FWL: every statistic
below is the one of the regression with X1 included), let Pi_z (L x m) hold the
coefficients of the L excluded instruments in the first stages of the m endogenous
regressors, Z~'Z~ = ((Q_zz^-1) restricted to the excluded rows)^-1 the partialled
instruments' cross-products, and S_vv = V'WV / (N - |Zf| - P) the first-stage residuals'
covariance (the within fit's degrees of freedom with |Zf| = K1 + L regressors).

* Partial F of endogenous regressor l: the Wald test that its excluded-instrument
  coefficients are all zero, divided by L, under the fit's variance (classical, HC1 or
  CR1, with their small-sample factors), on (L, df) degrees of freedom; the partial
  R-squared is 1 - v_l'Wv_l / x_l'M_X1 W x_l.
* Cragg-Donald (Cragg and Donald 1993; in the form of Stock and Yogo 2005): the smallest
  eigenvalue of Theta'Theta, Theta = G Pi_z F with G = (Z~'Z~)^(1/2) and F = S_vv^(-1/2)
  (symmetric roots), is the Wald statistic of rank(Pi_z) = m - 1; divided by L it is the
  Cragg-Donald F, which equals the partial F when m = 1.
* Kleibergen-Paap rk Wald (Kleibergen and Paap 2006, section 3): with the SVD
  Theta = U S V', q = m - 1, U_2 = U[:, q:], U_22 = U[q:, q:], V_2 = V[:, q:],
  V_22 = V[q:, q:], A = U_2 U_22^-1 (U_22 U_22')^(1/2), B = (V_22 V_22')^(1/2) V_22'^-1 V_2',
  lambda = A' Theta B' and Omega = (B kron A') (F kron G) W (F kron G)' (B kron A')' with W
  the robust (HC1 or CR1) covariance of vec(Pi_z), rk = vec(lambda)' Omega^-1 vec(lambda).
  Under classical errors W = S_vv kron (Z~'Z~)^-1 and rk is the Cragg-Donald statistic.
  rk / L is the rk Wald F; it equals the robust partial F when m = 1.
* Under-identification: rank(Pi_z) = m - 1 tested by rk (Cragg-Donald's under classical
  errors), chi-squared with L - m + 1 degrees of freedom.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy import linalg, stats

from .inference import with_variance
from .iv_variance import FIRST, RawMeats, inverse, selection
from .kclass import KClass, partial_out
from .stock_yogo import critical_values

VARIANCE_NAMES = {"classical": "classical", "hc1": "HC1", "cr1": "CR1"}


def _root(a: np.ndarray, power: float) -> np.ndarray:
    """a^power of a symmetric positive semi-definite matrix (eigenvalues below zero set to zero)."""
    w, v = np.linalg.eigh((a + a.T) / 2.0)
    w = np.maximum(w, 0.0)
    with np.errstate(divide="ignore"):
        return (v * np.where(w > 0, w ** power, 0.0)) @ v.T


def rank_wald(theta: np.ndarray, cov: np.ndarray) -> float:
    """Kleibergen and Paap's rk Wald statistic of rank(Theta) = m - 1 with cov the covariance of vec(Theta)."""
    m = theta.shape[1]
    u, _, vt = np.linalg.svd(theta, full_matrices=True)
    v, q = vt.T, m - 1
    u22, v22 = u[q:, q:], v[q:, q:]
    a = u[:, q:] @ linalg.pinv(u22) @ _root(u22 @ u22.T, 0.5)
    b = _root(v22 @ v22.T, 0.5) @ linalg.pinv(v22.T) @ v[:, q:].T
    lam = (a.T @ theta @ b.T).reshape(-1, order="F")
    t = np.kron(b, a.T)
    return float(lam @ linalg.pinvh(t @ cov @ t.T) @ lam)


def first_stages(q: np.ndarray, fit: KClass, meats: RawMeats, names: list[str]) -> dict[str, Any]:
    """Per endogenous regressor: the excluded instruments' coefficients and errors, the partial F
    (with its variance type and df) and the partial R-squared (see the module docstring)."""
    m, zf = len(q), fit.instruments
    tested = list(range(len(fit.exogenous), len(zf)))
    bread, out = inverse(q, zf), {}
    for a, j in enumerate(fit.endogenous):
        pi = fit.pi[:, fit.regressors.index(j)]
        r = np.zeros(m)
        r[j], r[zf] = 1.0, -pi
        rss = float(r @ q @ r)
        inf = meats.infer(pi, bread, rss, {FIRST + a: selection(m, zf)})
        inf = with_variance(inf, pi, inf.vcov, tested=tested)
        out[names[j]] = {
            "coefficients": {names[zf[i]]: {"estimate": float(pi[i]), "std_error": float(inf.std_error[i])}
                             for i in tested},
            "partial_f": inf.f_stat, "df": list(inf.f_df), "p_value": inf.f_p,
            "variance": VARIANCE_NAMES[meats.kind],
            "partial_r2": 1.0 - rss / float(partial_out(q, [j], fit.exogenous)[0, 0]),
        }
    return out


def _theta(q: np.ndarray, fit: KClass, dof: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Theta = G Pi_z F, and G, F (see the module docstring)."""
    zf = fit.instruments
    rows = list(range(len(fit.exogenous), len(zf)))
    cols = [fit.regressors.index(j) for j in fit.endogenous]
    pi_z = fit.pi[np.ix_(rows, cols)]
    g = _root(linalg.pinvh(inverse(q, zf)[np.ix_(rows, rows)]), 0.5)
    f = _root(partial_out(q, fit.endogenous, zf) / dof, -0.5)
    return g @ pi_z @ f, g, f


def identification(q: np.ndarray, fit: KClass, meats: RawMeats, liml: bool) -> dict[str, Any]:
    """The weak-identification statistic (Cragg-Donald F under classical errors, Kleibergen-Paap
    rk Wald F otherwise) with the Stock-Yogo critical values, and the under-identification test."""
    m, n_excl, zf = len(fit.endogenous), len(fit.excluded), fit.instruments
    dof = meats.n - len(zf) - meats.absorbed.total
    theta, g, f = _theta(q, fit, dof)
    if meats.kind == "classical":
        stat, name = float(np.linalg.eigvalsh(theta.T @ theta)[0]), "Cragg-Donald"
    else:
        bread = linalg.block_diag(*[inverse(q, zf)] * m)
        pis = np.concatenate([fit.pi[:, fit.regressors.index(j)] for j in fit.endogenous])
        sel = selection(len(q), zf)
        inf = meats.infer(pis, bread, float("nan"), {FIRST + a: sel for a in range(m)}, k=len(zf))
        rows = [a * len(zf) + i for a in range(m) for i in range(len(fit.exogenous), len(zf))]
        fg = np.kron(f, g)
        stat, name = rank_wald(theta, fg @ inf.vcov[np.ix_(rows, rows)] @ fg.T), "Kleibergen-Paap rk"
    df = n_excl - m + 1
    weak = {"statistic": f"{name} Wald F", "value": stat / n_excl,
            "stock_yogo": critical_values(m, n_excl, liml)}
    if meats.kind != "classical" and weak["stock_yogo"]:
        weak["note"] = "Stock-Yogo values are tabulated for independent errors: a rough guide here"
    under = {"test": f"{name} Wald", "null": "the instruments do not identify the endogenous regressors "
             f"(rank {m - 1})", "statistic": stat, "df": df, "p_value": float(stats.chi2.sf(stat, df))}
    return {"weak_identification": weak, "underidentification": under}
