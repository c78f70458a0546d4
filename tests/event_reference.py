"""A direct numpy implementation of the imputation estimator and its conservative variance
(Borusyak, Jaravel and Spiess 2024, Review of Economic Studies, Theorem 3 construction), with
explicit dummy matrices, for the event-study tests. Nothing here uses bigpanel.

Step 1: OLS (minimum-norm least squares) of y on unit, period and further dummies and the
controls over the untreated rows. Step 2: tau = y - z'lambda on the treated rows whose row z
lies in the row space of the untreated design (estimable). Step 3: weighted averages by event
time and over all imputed rows. Implied weights on the untreated rows:
v_0 = -Z_0 (Z_0'Z_0)^+ Z_1'w_1. Variance: the sum over clusters of (sum v eps)^2, eps the
untreated residual, or tau less its cohort x event time average weighted by w^2 on treated
rows. Pre-trend: OLS on the untreated rows with lead dummies added, cluster-robust sandwich
G/(G-1) (N-1)/(N-K-P_c), P_c the rank of the dummy block less the unit dummies' G_1 - 1 when
the units are nested in the clusters (bigpanel's README states the rule; common practice),
and the Wald statistic of the leads.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats


def _dummies(values: pd.Series, levels: list) -> np.ndarray:
    return (values.to_numpy()[:, None] == np.array(levels, dtype=object)[None, :]).astype(float)


def event_times(df: pd.DataFrame, time: str, first: str, dates: bool) -> np.ndarray:
    """k = t - E for integer periods; rank(t) - (periods before E) for dates (NaN: never treated)."""
    if not dates:
        return (df[time] - df[first]).to_numpy(dtype=float)
    periods = np.sort(df[time].unique())
    rank = {p: i for i, p in enumerate(periods)}
    out = np.full(len(df), np.nan)
    has = df[first].notna().to_numpy()
    out[has] = [rank[t] - int((periods < e).sum()) for t, e in zip(df[time][has], df[first][has])]
    return out


def reference(df: pd.DataFrame, y: str, unit: str, time: str, first: str, x: list[str] = (),
              fe: list[str] = (), weights: str | None = None, cluster: str | None = None,
              lo: int = -5, hi: int = 10, dates: bool = False) -> dict:
    """Estimates, covariance and pre-trend test of the module docstring."""
    cluster = cluster or unit
    used = [y, unit, time, *x, *fe, cluster]
    df = df.dropna(subset=list(dict.fromkeys(used))).reset_index(drop=True)
    k = event_times(df, time, first, dates)
    treated = df[first].notna().to_numpy() & (df[time] >= df[first]).fillna(False).to_numpy()
    d0, d1 = df[~treated].reset_index(drop=True), df[treated].reset_index(drop=True)
    k0, k1 = k[~treated], k[treated]
    cols = [unit, time, *fe]
    levels = [sorted(d0[c].unique()) for c in cols]
    D0 = np.hstack([_dummies(d0[c], lv) for c, lv in zip(cols, levels)])
    D1 = np.hstack([_dummies(d1[c], lv) for c, lv in zip(cols, levels)])
    Z0 = np.hstack([D0, d0[list(x)].to_numpy(float)]) if x else D0
    Z1 = np.hstack([D1, d1[list(x)].to_numpy(float)]) if x else D1
    y0, y1 = d0[y].to_numpy(float), d1[y].to_numpy(float)
    pinv = np.linalg.pinv(Z0)
    lam = pinv @ y0
    resid0 = y0 - Z0 @ lam
    present = np.all([d1[c].isin(lv).to_numpy() for c, lv in zip(cols, levels)], axis=0)
    estimable = present & (np.abs(Z1 - Z1 @ pinv @ Z0).max(axis=1) < 1e-8)
    w1 = d1[weights].to_numpy(float) if weights else np.ones(len(d1))
    ok = estimable & np.isfinite(w1) & (w1 > 0)
    tau = y1 - Z1 @ lam
    ks = [kk for kk in range(0, hi + 1) if np.any(ok & (k1 == kk))]
    masks = [ok & (k1 == kk) for kk in ks] + [ok]
    W = np.column_stack([np.where(m, w1, 0.0) / np.where(m, w1, 0.0).sum() for m in masks])
    tau = np.where(ok, tau, 0.0)
    est = W.T @ tau
    V0 = -Z0 @ np.linalg.pinv(Z0.T @ Z0) @ Z1.T @ W  # implied weights on untreated rows
    cells = pd.Series(list(zip(d1[first], k1)))
    tbar = np.zeros(len(d1))
    for key in cells[ok].unique():
        m = ok & (cells == key).to_numpy()
        tbar[m] = (w1[m] ** 2 * tau[m]).sum() / (w1[m] ** 2).sum()
    eps1 = np.where(ok, tau - tbar, 0.0)
    clusters = pd.concat([d0[cluster], d1[cluster]]).to_numpy()
    contrib = np.vstack([V0 * resid0[:, None], W * eps1[:, None]])
    codes = pd.factorize(clusters)[0]
    S = np.vstack([np.bincount(codes, weights=contrib[:, h]) for h in range(contrib.shape[1])]).T
    V = S.T @ S
    out = {"k": ks, "estimate": est, "vcov": V, "se": np.sqrt(np.diag(V)), "imputed": int(ok.sum()),
           "rows_by_k": [int(m.sum()) for m in masks[:-1]], "implied": V0}
    out["pretrend"] = _pretrend(d0, k0, D0, x, y0, cluster, unit, lo)
    return out


def _pretrend(d0: pd.DataFrame, k0: np.ndarray, D0: np.ndarray, x: list[str], y0: np.ndarray, cluster: str,
              unit: str, lo: int) -> dict | None:
    leads = [a for a in range(lo, 0) if np.any(k0 == a)]
    if not leads:
        return None
    L = np.column_stack([(k0 == a).astype(float) for a in leads])
    R = np.hstack([d0[list(x)].to_numpy(float), L]) if x else L
    Wd = np.hstack([D0, R])
    A = np.linalg.pinv(Wd)
    theta = A @ y0
    u = y0 - Wd @ theta
    maps = A[D0.shape[1]:]  # the rows of the regressors' coefficients
    codes = pd.factorize(d0[cluster])[0]
    G = codes.max() + 1
    scores = np.vstack([np.bincount(codes, weights=maps[j] * u) for j in range(maps.shape[0])]).T
    n, kreg = len(y0), R.shape[1]
    rank = np.linalg.matrix_rank(D0)
    nested = d0.groupby(unit)[cluster].nunique().max() == 1
    p_c = rank - (d0[unit].nunique() - 1) if nested else rank
    factor = G / (G - 1) * (n - 1) / (n - kreg - p_c)
    V = factor * scores.T @ scores
    b = theta[D0.shape[1]:][-len(leads):]
    VL = V[-len(leads):, -len(leads):]
    wald = float(b @ np.linalg.solve(VL, b))
    return {"leads": leads, "estimate": b, "se": np.sqrt(np.diag(VL)), "statistic": wald,
            "p_value": float(stats.chi2.sf(wald, len(leads))), "rows": [int((k0 == a).sum()) for a in leads]}
