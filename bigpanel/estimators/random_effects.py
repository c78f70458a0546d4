"""Random effects (feasible GLS with Swamy-Arora variance components), Mundlak and Hausman tests.

* **random effects**: with the within residual variance s_e^2 = RSS_within / (N - G - K_w)
  and the between regression on unit means weighted by T_i (the projection of the rows on
  the unit dummies), s_u^2 = (RSS_between - (G - K - 1) s_e^2) / (N - tr[(X'PX)^-1 X'P Z Z'P X]),
  which for a balanced panel is RSS_between/T/(G-K-1) - s_e^2/T; negative values are set to
  zero and reported. theta_i = 1 - sqrt(s_e^2 / (T_i s_u^2 + s_e^2)); OLS of y - theta_i ybar_i
  on (1 - theta_i) and x - theta_i xbar_i; df = N - K - 1.
* **Mundlak** (regression-based Hausman): the GLS regression with the unit means of the
  time-varying regressors added, as (1 - theta_i) xbar_i, and a Wald F test that their
  coefficients are zero, with errors clustered by unit; valid under heteroskedasticity and
  within-unit correlation.
* **Hausman**: H = (b_W - b_R)' (V_W - V_R)^-1 (b_W - b_R) on the regressors both estimate,
  chi-squared with as many df; when V_W - V_R is not positive definite, its pseudo-inverse on
  the positive eigenvalues is used, df is their number, and a note says so. It compares
  classical variances, so with robust errors it is not computed and a note says why.

With analytic weights (Var(e_it) = s^2 / w_it) the same algebra runs on the rows scaled by
sqrt(w_it): T_i is replaced by W_i / wbar (wbar the mean weight, so sigma_e is the error s.d.
of a row of mean weight), s_e^2 comes from the weighted within fit, the between regression
is weighted by W_i on the weighted means, theta_i = 1 - sqrt(s_e^2 / (W_i/wbar s_u^2 + s_e^2)),
then the weighted regression of y - theta_i ybar_i on (1 - theta_i) and x - theta_i xbar_i
(the GLS fit with Omega_i = s_e^2 diag(wbar / w_it) + s_u^2 11'). Mundlak and the Hausman
contrast use these weighted fits.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any

import numpy as np
import pyarrow as pa
from scipy import stats

from ..errors import BigPanelError
from ..passes.panel import columns, quasi_demeaned_view, unit_table
from ..passes.reduce import Start
from ..results.result import FitResult
from .base import Session
from .transformed import PanelEstimator, PanelOutcome, TransformedFit, ols_with_constant
from .within import Within


def variance_components(units: dict[str, np.ndarray], m: int, sigma_e2: float) -> dict[str, Any]:
    """Swamy-Arora s_u^2 and theta_i from the unit table (see the module docstring)."""
    rows = int(units["n"].sum())
    mean_w = float(units["nw"].sum()) / rows
    t_i = units["nw"].astype(float) / mean_w
    sigma_e2 = sigma_e2 / mean_w
    n, g = t_i.sum(), len(t_i)
    means = np.column_stack([units[f"b{j}"] for j in range(m)])
    xbar = np.column_stack([means[:, 1:], np.ones(g)])
    xtpx = (xbar * t_i[:, None]).T @ xbar
    coef = np.linalg.lstsq(xtpx, (xbar * t_i[:, None]).T @ means[:, 0], rcond=None)[0]
    rss_b = float(t_i @ (means[:, 0] - xbar @ coef) ** 2)
    k = xbar.shape[1] - 1
    trace = float(np.trace(np.linalg.pinv(xtpx) @ ((xbar * (t_i**2)[:, None]).T @ xbar)))
    sigma_u2 = (rss_b - (g - k - 1) * sigma_e2) / (n - trace)
    theta = 1.0 - np.sqrt(sigma_e2 / (t_i * max(sigma_u2, 0.0) + sigma_e2))
    return {"sigma_u2": max(sigma_u2, 0.0), "sigma_e2": sigma_e2, "clipped": sigma_u2 < 0, "theta": theta,
            "means": means, "rows": rows}


def hausman(b_w: np.ndarray, v_w: np.ndarray, b_r: np.ndarray, v_r: np.ndarray) -> dict[str, Any]:
    """The contrast test of the module docstring on matched coefficient vectors."""
    diff = b_w - b_r
    dv = (v_w - v_r + (v_w - v_r).T) / 2
    eig, vec = np.linalg.eigh(dv)
    positive = eig > 1e-12 * max(abs(eig).max(), 1e-300)
    inv = (vec[:, positive] / eig[positive]) @ vec[:, positive].T
    stat = float(diff @ inv @ diff)
    df = int(positive.sum())
    out = {"statistic": stat, "df": df, "p_value": float(stats.chi2.sf(stat, df)) if df else None}
    if not positive.all():
        out["note"] = "V_within - V_random is not positive definite: pseudo-inverse on its positive eigenvalues"
    return out


def hausman_test(within: FitResult, fit: TransformedFit, variance: str) -> dict[str, Any]:
    """Hausman contrast between a within result and a random-effects fit, on their common slopes."""
    common = [n for n in within.names if n in fit.names and n != "const"]
    if variance != "classical":
        return {"statistic": None, "df": None, "p_value": None, "regressors": common,
                "note": "not computed: the contrast form compares classical variances; refit with --variance classical"}
    if not common:
        raise BigPanelError("the within and random-effects fits share no time-varying regressor to compare")
    iw = [within.names.index(n) for n in common]
    ir = [fit.names.index(n) for n in common]
    out = hausman(within.coef[iw], within.vcov[np.ix_(iw, iw)], fit.coef[ir], fit.inf.vcov[np.ix_(ir, ir)])
    out["regressors"] = common
    return out


def mundlak(session: Session, shift: np.ndarray, varying: list[str]) -> dict[str, Any]:
    """Regression-based Hausman test: add (1 - theta_i) xbar_i of the time-varying regressors to the
    GLS regression and test their coefficients jointly, errors clustered by unit (Wald F on (K_w, G - 1)).

    Reads the quasi-demeaning table ``bp_theta`` left by the random-effects step, whose unit
    number ``uid`` is the cluster (so a unit given by several columns works too).
    """
    spec, m = session.spec, len(session.spec.value_aliases)
    index = [spec.x.index(name) + 1 for name in varying]
    extra = [f"(1 - u.theta) * u.b{j} AS e{m + a}" for a, j in enumerate(index)]
    extra += [f"1 - u.theta AS e{m + len(index)}", "u.uid AS cl1"] + (["w"] if spec.weights else [])
    quasi_demeaned_view(session.eng, spec, extra)
    augmented = replace(spec, x=(*spec.x, *[f"mean {name}" for name in varying]), cluster=(spec.fe_names[0],),
                        variance="cr1")
    fit = ols_with_constant(session.eng, augmented, m - 1 + len(index), np.concatenate([shift, shift[index]]))
    picked = [fit.names.index(f"mean {name}") for name in varying if f"mean {name}" in fit.names]
    gamma, v = fit.coef[picked], fit.inf.vcov[np.ix_(picked, picked)]
    f_stat = float(gamma @ np.linalg.pinv(v) @ gamma) / len(picked)
    return {"statistic": f_stat, "df": [len(picked), fit.inf.df],
            "p_value": float(stats.f.sf(f_stat, len(picked), fit.inf.df)), "regressors": varying,
            "form": "F, errors clustered by unit"}


class RandomEffects(PanelEstimator):
    """GLS with Swamy-Arora components (see the module docstring); ``hausman`` adds the
    Hausman and Mundlak tests against the within fit, which runs first for s_e^2 (with the
    stopping rule ``tol``, ``max_iter`` of its projections)."""

    name = "random-effects"
    options = {"hausman": False, "tol": 1e-8, "max_iter": 10_000}

    def prepare(self) -> FitResult:
        return Within(self.request, singletons="keep", tol=self.settings["tol"],
                      max_iter=self.settings["max_iter"]).fit()

    def passes_before(self, before: FitResult) -> int:
        return before.solver.raw_passes

    def estimate(self, session: Session, first: Start, within: FitResult) -> PanelOutcome:
        table = unit_table(session.eng, session.spec)
        m = len(session.spec.value_aliases)
        vc = variance_components(columns(table), m, within.fit.rss / within.fit.df_resid)
        theta, g = vc["theta"], len(vc["theta"])
        units = table.select(session.spec.key_aliases(0)).append_column("theta", pa.array(theta))
        units = units.append_column("uid", pa.array(np.arange(g, dtype=np.int64)))
        for j in range(m):
            units = units.append_column(f"b{j}", pa.array(vc["means"][:, j]))
        weight = ["w"] if session.spec.weights else []
        quasi_demeaned_view(session.eng, session.spec, [f"1 - u.theta AS e{m}", *session.spec.cluster_aliases, *weight],
                            units)
        fit = ols_with_constant(session.eng, session.spec, m - 1, first.shift)
        extras: dict[str, Any] = {"random_effects": {
            "method": "Swamy-Arora", "sigma_u": float(np.sqrt(vc["sigma_u2"])),
            "sigma_e": float(np.sqrt(vc["sigma_e2"])), "sigma_u_clipped_at_zero": bool(vc["clipped"]),
            "theta": {"min": float(theta.min()), "median": float(np.median(theta)), "max": float(theta.max())},
        }, "units": g}
        if self.settings["hausman"]:
            extras["mundlak"] = mundlak(session, first.shift, [n for n in within.names if n in session.spec.x])
            extras["hausman"] = hausman_test(within, fit, session.spec.variance)
        return PanelOutcome(fit, vc["rows"], g, extras)
