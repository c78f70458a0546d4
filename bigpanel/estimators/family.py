"""The panel estimators beside the within one: between, first differences, random effects, Hausman.

All of them read the rows through the same SQL views as the within fit
(``bp_sample``, shifted by ``bp_shift``) and reduce them to small matrices; the
one column given with ``fe`` names the unit.

* **between**: OLS of the unit means of y on a constant and the unit means of
  x, one observation per unit (G of them); df = G - K - 1.
* **fd** (first differences): OLS of y_it - y_i,t-1 on a constant and the
  differenced regressors, over pairs of rows of a unit in consecutive periods
  (the periods present in the sample ranked once, so a step over a period that
  the unit misses is a gap: dropped and counted); df = N_fd - K - 1.
* **random** (feasible GLS, Swamy-Arora variance components): with the within
  residual variance s_e^2 = RSS_within / (N - G - K_w) and the between
  regression on unit means weighted by T_i (the projection of the rows on the
  unit dummies), s_u^2 = (RSS_between - (G - K - 1) s_e^2) / (N - tr[(X'PX)^-1
  X'P Z Z'P X]), which for a balanced panel is RSS_between/T/(G-K-1) - s_e^2/T;
  negative values are set to zero and reported. theta_i = 1 - sqrt(s_e^2 /
  (T_i s_u^2 + s_e^2)); OLS of y - theta_i ybar_i on (1 - theta_i) and
  x - theta_i xbar_i; df = N - K - 1.
* **Mundlak** (regression-based Hausman): the GLS regression with the unit
  means of the time-varying regressors added, as (1 - theta_i) xbar_i, and a
  Wald F test that their coefficients are zero, with errors clustered by unit;
  valid under heteroskedasticity and within-unit correlation.
* **Hausman**: H = (b_W - b_R)' (V_W - V_R)^-1 (b_W - b_R) on the regressors
  both estimate, chi-squared with as many df; when V_W - V_R is not positive
  definite, its pseudo-inverse on the positive eigenvalues is used, df is their
  number, and a note says so. It compares iid variances, so with robust errors
  it is not computed and a note says why.

**Analytic weights** (``weights``, w_it > 0, read as Var(e_it) = s^2 / w_it) enter
every estimator as weighted least squares, so that constant weights give the
unweighted fit:

* between: the unit means are weighted means, xbar_i = sum_t w_it x_it / W_i with
  W_i = sum_t w_it, and unit i weighs W_i / T_i (its rows' mean weight) in the
  regression of the means;
* fd: a difference weighs 2 / (1/w_it + 1/w_i,t-1), the harmonic mean of its two
  rows' weights (the precision of e_it - e_i,t-1 up to the factor 2);
* random: the same algebra on the rows scaled by sqrt(w_it), i.e. T_i replaced by
  W_i / wbar (wbar the mean weight, so sigma_e is the error s.d. of a row of mean
  weight), s_e^2 from the weighted within fit, the between regression weighted by
  W_i on the weighted means, theta_i = 1 - sqrt(s_e^2 / (W_i/wbar s_u^2 + s_e^2)), then
  the weighted regression of y - theta_i ybar_i on (1 - theta_i) and x - theta_i xbar_i
  (the GLS fit with Omega_i = s_e^2 diag(wbar / w_it) + s_u^2 11'). Mundlak and the
  Hausman contrast use these weighted fits.

In each, s^2 = sum w u^2 / df with df counted in rows, and the robust scores are
w u x (weighted least squares' sandwich).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pyarrow as pa
from scipy import stats

from ..numerics.dof import NO_EFFECTS
from ..engines.base import Engine
from ..errors import BigPanelError
from ..numerics.inference import Inference, infer
from ..passes.moments import ClusterTerm
from ..passes.moments import cross_products, meat_cluster, meat_hc
from ..passes.reduce import Start, create_views, start
from ..numerics.solve import solve_slopes
from ..model.spec import Spec
from ..sql.text import join, render



@dataclass(frozen=True)
class FamilyFit:
    """Estimates of one of the estimators above, with their variance and extras."""

    names: list[str]
    coef: np.ndarray
    inf: Inference
    nobs: int
    df_resid: int
    rss: float
    r2: float
    extras: dict[str, Any]
    dropped: list[dict[str, str]]
    cluster_counts: dict[str, int]


def _inference(spec: Spec, eng: Engine, keep: list[int], slopes: Any, n: int,
               mean_weight: float) -> tuple[Inference, list[ClusterTerm]]:
    meat, terms = None, []
    if spec.vcov == "hc1":
        meat = meat_hc(eng, spec, keep, slopes.beta)
    elif spec.vcov == "cluster":
        terms = meat_cluster(eng, spec, keep, slopes.beta)
    inf = infer(slopes.beta, slopes.bread, slopes.rss, n, NO_EFFECTS, spec.vcov, meat=meat,
                cluster_terms=terms, cluster_names=spec.cluster, mean_weight=mean_weight)
    return inf, terms


def _with_constant(spec: Spec, eng: Engine, k: int, shift: np.ndarray, extras: dict,
                   unit_constant: bool = False) -> FamilyFit:
    """OLS on the view bp_tilde: e0 the outcome, e1..eK the regressors, e(K+1) the constant's column.

    The constant is reported on the original scale, const = c + m_y - m_x'b (m the
    shifts), with its variance from the gradient (1, -m_x). The F test is on the
    slopes only. With weights and a constant column of ones (``unit_constant``:
    between, first differences), its weighted square sum is the total weight, and
    the residual s.e. is that of a row of mean weight (independent of the weights'
    scale, as in the within fit).
    """
    mom = cross_products(eng, spec, k + 2)
    mean_weight = float(mom.q[k + 1, k + 1]) / mom.n if spec.weights and unit_constant else 1.0
    slopes = solve_slopes(mom.q, mom.n, np.zeros(k + 2), np.diag(mom.q))
    names_all = [spec.y, *spec.x, "const"]
    keep = slopes.keep
    if k + 1 not in keep:
        raise BigPanelError("the constant is collinear with the regressors")
    raw, terms = _inference(spec, eng, keep, slopes, mom.n, mean_weight)
    counts = {spec.cluster[t.columns[0]]: t.n_clusters for t in terms if len(t.columns) == 1}
    c = keep.index(k + 1)
    grad = np.eye(len(keep))
    grad[c] = [1.0 if j == k + 1 else -shift[j] for j in keep]
    beta = grad @ slopes.beta
    beta[c] += shift[0]
    v = grad @ raw.vcov @ grad.T
    se = np.sqrt(np.maximum(np.diag(v), 0.0))
    t = beta / se
    crit = stats.t.ppf(0.975, raw.df)
    slope_idx = [a for a in range(len(keep)) if a != c]
    if slope_idx:
        b, vs = beta[slope_idx], v[np.ix_(slope_idx, slope_idx)]
        f_stat = float(b @ np.linalg.pinv(vs) @ b) / len(slope_idx)
        f_p = float(stats.f.sf(f_stat, len(slope_idx), raw.df))
    else:
        f_stat, f_p = float("nan"), float("nan")
    inf = Inference(v, se, t, 2 * stats.t.sf(np.abs(t), raw.df), beta - crit * se, beta + crit * se, raw.df,
                    f_stat, (float(len(slope_idx)), raw.df), f_p, raw.sigma, raw.small_sample, raw.psd_fixed)
    tss = mom.q[0, 0] - mom.q[0, k + 1] ** 2 / mom.q[k + 1, k + 1]
    dropped = [{"name": names_all[j], "reason": why} for j, why in slopes.dropped]
    return FamilyFit([names_all[j] for j in keep], beta, inf, mom.n, mom.n - len(keep), slopes.rss,
                     1.0 - slopes.rss / tss if tss > 0 else float("nan"), extras, dropped, counts)


def _unit_table(eng: Engine, spec: Spec) -> pa.Table:
    """One grouped pass: per unit (in key order) the keys, row count n, total weight nw (n when
    unweighted), shifted means (weighted means sum(w v) / sum(w) when weighted) and cluster range."""
    keys = join(spec.key_aliases(0), ", ")
    if spec.weights:
        means = ["sum(w) AS nw"]
        means += [f"sum(w * ({v} - s.m{j})) / sum(w) AS b{j}" for j, v in enumerate(spec.value_aliases)]
    else:
        means = ["count(*) AS nw"] + [f"avg({v} - s.m{j}) AS b{j}" for j, v in enumerate(spec.value_aliases)]
    for c in spec.cluster_aliases:
        means += [f"min({c}) AS {c}_min", f"max({c}) AS {c}_max"]
    eng.execute("unit means", render("unit_means", keys=keys, means=join(means)), raw=True)
    return eng.arrow("fetch unit means", render("unit_table", keys=keys))


def _columns(tab: pa.Table) -> dict[str, np.ndarray]:
    return {name: tab.column(name).to_numpy(zero_copy_only=False) for name in tab.column_names}


def between(eng: Engine, spec: Spec, shift: np.ndarray) -> FamilyFit:
    """Regression of unit means (see the module docstring), solved in numpy on the unit table."""
    units = _columns(_unit_table(eng, spec))
    m = len(spec.value_aliases)
    means = np.column_stack([units[f"b{j}"] for j in range(m)])
    g = len(means)
    cols = {f"e{j}": means[:, j] for j in range(m)}
    cols[f"e{m}"] = np.ones(g)
    for c in spec.cluster_aliases:
        if not (units[f"{c}_min"] == units[f"{c}_max"]).all():
            raise BigPanelError("between-unit errors clustered by a column need every unit inside one cluster")
        cols[c] = units[f"{c}_min"]
    if spec.weights:
        cols["w"] = units["nw"] / units["n"]
    eng.put_table("bp_between", pa.table(cols))
    eng.execute("between view", render("between_view"))
    return _with_constant(spec, eng, m - 1, shift, {"units": g, "sample_rows": int(units["n"].sum())}, True)


def random_effects(eng: Engine, spec: Spec, shift: np.ndarray, sigma_e2: float) -> tuple[FamilyFit, dict]:
    """Swamy-Arora variance components, then the GLS fit (see the module docstring)."""
    table = _unit_table(eng, spec)
    units = _columns(table)
    m = len(spec.value_aliases)
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
    clipped = sigma_u2 < 0
    sigma_u2 = max(sigma_u2, 0.0)
    theta = 1.0 - np.sqrt(sigma_e2 / (t_i * sigma_u2 + sigma_e2))
    keys = table.select(spec.key_aliases(0)).append_column("theta", pa.array(theta))
    keys = keys.append_column("uid", pa.array(np.arange(g, dtype=np.int64)))
    for j in range(m):
        keys = keys.append_column(f"b{j}", pa.array(means[:, j]))
    eng.put_table("bp_theta", keys)
    cols = [f"{v} - s.m{j} - u.theta * u.b{j} AS e{j}" for j, v in enumerate(spec.value_aliases)]
    cols.append(f"1 - u.theta AS e{m}")
    cols += spec.cluster_aliases + (["w"] if spec.weights else [])
    eng.execute("quasi-demeaned view", render("quasi_demeaned", columns=join(cols), keys=join(spec.key_aliases(0), ", ")))
    components = {
        "method": "Swamy-Arora",
        "sigma_u": float(np.sqrt(sigma_u2)),
        "sigma_e": float(np.sqrt(sigma_e2)),
        "theta": {"min": float(theta.min()), "median": float(np.median(theta)), "max": float(theta.max())},
        "sigma_u_clipped_at_zero": bool(clipped),
    }
    extras = {"random_effects": components, "units": g, "sample_rows": rows}
    return _with_constant(spec, eng, m - 1, shift, extras), components


def mundlak(eng: Engine, spec: Spec, shift: np.ndarray, varying: list[str]) -> dict[str, Any]:
    """Regression-based Hausman test: add (1 - theta_i) xbar_i of the time-varying regressors to the
    GLS regression and test their coefficients jointly, errors clustered by unit (Wald F on (K_w, G - 1)).

    Reads the quasi-demeaning table ``bp_theta`` left by :func:`random_effects`, whose unit
    number ``uid`` is the cluster (so a unit given by several columns works too).
    """
    m = len(spec.value_aliases)
    index = [spec.x.index(name) + 1 for name in varying]
    cols = [f"{v} - s.m{j} - u.theta * u.b{j} AS e{j}" for j, v in enumerate(spec.value_aliases)]
    cols += [f"(1 - u.theta) * u.b{j} AS e{m + a}" for a, j in enumerate(index)]
    cols += [f"1 - u.theta AS e{m + len(index)}", "u.uid AS cl1"]
    cols += ["w"] if spec.weights else []
    eng.execute("drop the quasi-demeaned view", render("drop_tilde"))
    eng.execute("augmented quasi-demeaned view",
                render("quasi_demeaned", columns=join(cols), keys=join(spec.key_aliases(0), ", ")))
    augmented = replace(spec, x=(*spec.x, *[f"mean {name}" for name in varying]), cluster=(spec.fe_names[0],),
                        vcov="cluster")
    shifts = np.concatenate([shift, shift[index]])
    fit = _with_constant(augmented, eng, m - 1 + len(index), shifts, {})
    picked = [fit.names.index(f"mean {name}") for name in varying if f"mean {name}" in fit.names]
    gamma, v = fit.coef[picked], fit.inf.vcov[np.ix_(picked, picked)]
    f_stat = float(gamma @ np.linalg.pinv(v) @ gamma) / len(picked)
    return {"statistic": f_stat, "df": [len(picked), fit.inf.df], "p_value": float(stats.f.sf(f_stat, len(picked), fit.inf.df)),
            "regressors": varying, "form": "F, errors clustered by unit"}


def first_differences(eng: Engine, spec: Spec, shift: np.ndarray) -> FamilyFit:
    """OLS on within-unit first differences over consecutive periods (see the module docstring)."""
    if not spec.time:
        raise BigPanelError("--estimator first-difference needs --time COL to order the rows within a unit")
    m = len(spec.value_aliases)
    keys = join(spec.key_aliases(0), ", ")
    diffs = [f"{v} - lag({v}) OVER by_unit AS e{j}" for j, v in enumerate(spec.value_aliases)]
    diffs.append(f"1.0 AS e{m}")
    diffs += [f"{c}" for c in spec.cluster_aliases]
    if spec.weights:
        diffs.append("2.0 / (1.0 / w + 1.0 / lag(w) OVER by_unit) AS w")
    eng.execute("period ranks", render("fd_periods"), raw=True)
    eng.execute("first differences", render("first_differences", diffs=join(diffs), keys=keys), raw=True)
    counts = eng.one("difference counts", render("fd_counts"))
    if counts["repeated"]:
        raise BigPanelError(
            f"{counts['repeated']:,} rows repeat a (unit, period) key: first differences need one row per unit and period"
        )
    eng.execute("differenced view", render("fd_view"))
    extras = {"first_difference": {"usable": int(counts["usable"]), "dropped_gaps": int(counts["gaps"]),
                                   "first_rows": int(counts["first_rows"])},
              "sample_rows": int(counts["usable"] + counts["gaps"] + counts["first_rows"])}
    return _with_constant(spec, eng, m - 1, np.zeros(m), extras, True)


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


def hausman_test(within: Any, fam: FamilyFit, vcov: str) -> dict[str, Any]:
    """Hausman contrast between a within result and a random-effects fit, on their common slopes."""
    common = [n for n in within.names if n in fam.names and n != "const"]
    if vcov != "iid":
        return {"statistic": None, "df": None, "p_value": None, "regressors": common,
                "note": "not computed: the contrast form compares iid variances; refit with --variance classical"}
    if not common:
        raise BigPanelError("the within and random-effects fits share no time-varying regressor to compare")
    iw = [within.names.index(n) for n in common]
    ir = [fam.names.index(n) for n in common]
    out = hausman(within.coef[iw], within.vcov[np.ix_(iw, iw)], fam.coef[ir], fam.inf.vcov[np.ix_(ir, ir)])
    out["regressors"] = common
    return out


def run_family(
    eng: Engine, spec: Spec, source_kind: str, estimator: str, sigma_e2: float | None
) -> tuple[FamilyFit, Start]:
    """Open the views, take the shifts, and run ``estimator`` (between, first-difference or random-effects)."""
    if len(spec.fe) != 1:
        raise BigPanelError(f"--estimator {estimator} takes exactly one --fe: the unit (one column, or columns joined by :)")
    create_views(eng, spec, materialize=source_kind == "csv")
    first = start(eng, spec, source_kind)
    if estimator == "between":
        return between(eng, spec, first.shift), first
    if estimator == "first-difference":
        return first_differences(eng, spec, first.shift), first
    return random_effects(eng, spec, first.shift, float(sigma_e2))[0], first

