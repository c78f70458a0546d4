"""Weighted fits: within against statsmodels WLS with dummies; between, first differences and
random effects against statsmodels WLS on the transformed data and a direct numpy GLS with the
error covariance written out (the weighted forms stated in bigpanel.family)."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import linalg

import bigpanel
from conftest import dummy_block, make_panel, rel


def sm_fit(model, vcov: str, groups=None):
    if vcov == "cr1":
        return model.fit(cov_type="cluster", cov_kwds={"groups": pd.factorize(groups)[0]})
    return model.fit(cov_type={"classical": "nonrobust", "hc1": "HC1"}[vcov])


@pytest.mark.parametrize("engine", ["duckdb", "memory"])
@pytest.mark.parametrize("fe", [["unit"], ["unit", "period"]])
@pytest.mark.parametrize("vcov", ["classical", "hc1", "cr1"])
def test_weighted_within_matches_wls_with_dummies(to_parquet, engine, fe, vcov):
    # Reference: statsmodels WLS of y on x and the full-rank dummy block, analytic weights;
    # its HC1 and cluster errors use the weighted scores, as ours do.
    df = make_panel(seed=81)
    df["w"] = np.random.default_rng(3).uniform(0.2, 5.0, len(df))
    res = bigpanel.fit(to_parquet(df), y="y", x=["x1", "x2"], fe=fe, weights="w", variance=vcov,
                       cluster="sector" if vcov == "cr1" else None, engine=engine)
    design = np.hstack([df[["x1", "x2"]].to_numpy(), dummy_block(df, fe)])
    model = sm.WLS(df["y"].to_numpy(), design, weights=df["w"].to_numpy())
    ref = sm_fit(model, vcov, df["sector"])
    assert rel(res.coef, ref.params[:2]) < 1e-7
    assert rel(res.std_error, ref.bse[:2]) < 1e-7


def test_nonpositive_weights_are_dropped_and_counted(to_parquet):
    df = make_panel(seed=82)
    df["w"] = 1.0
    df.loc[df.index[:4], "w"] = [0.0, -1.0, np.nan, np.inf]
    res = bigpanel.fit(to_parquet(df), y="y", x=["x1"], fe="unit", weights="w")
    assert res.rows.incomplete == {"w": 2, "w zero or negative": 2}  # missing and non-positive apart
    plain = bigpanel.fit(to_parquet(df.iloc[4:]), y="y", x=["x1"], fe="unit")
    assert rel(res.coef, plain.coef) < 1e-10


def weighted_panel(seed: int) -> pd.DataFrame:
    df = make_panel(seed=seed)
    df["w"] = np.random.default_rng(seed + 1).uniform(0.2, 5.0, len(df))
    return df


@pytest.mark.parametrize("vcov", ["classical", "hc1", "cr1"])
def test_weighted_between_matches_wls_on_weighted_means(to_parquet, vcov):
    # Reference: statsmodels WLS of the weighted unit means on a constant, each unit weighted by
    # its rows' mean weight; clustered by region, which holds whole units.
    df = weighted_panel(91)
    res = bigpanel.fit(to_parquet(df), y="y", x=["x1", "x2"], fe="unit", estimator="between", weights="w",
                       variance=vcov, cluster="region" if vcov == "cr1" else None)
    cols = ["y", "x1", "x2"]
    wsum = df.groupby("unit")["w"].sum()
    means = df[cols].mul(df["w"], axis=0).groupby(df["unit"]).sum().div(wsum, axis=0)
    unit_w = wsum / df.groupby("unit").size()
    model = sm.WLS(means["y"], sm.add_constant(means[["x1", "x2"]]), weights=unit_w)
    ref = sm_fit(model, vcov, df.groupby("unit")["region"].first())
    assert rel(res.coef, ref.params[["x1", "x2", "const"]]) < 1e-9
    assert rel(res.std_error, ref.bse[["x1", "x2", "const"]]) < 1e-9


@pytest.mark.parametrize("vcov", ["classical", "hc1", "cr1"])
def test_weighted_first_differences_match_wls_on_differences(to_parquet, vcov):
    # Reference: statsmodels WLS of the differences over consecutive periods (the panel has gaps,
    # which are dropped), each weighted by the harmonic mean of its two rows' weights.
    df = weighted_panel(93)
    res = bigpanel.fit(to_parquet(df), y="y", x=["x1", "x2"], fe="unit", estimator="first-difference", time="period",
                       weights="w", variance=vcov, cluster="unit" if vcov == "cr1" else None)
    s = df.sort_values(["unit", "period"])
    g = s.groupby("unit")
    d = g[["y", "x1", "x2", "period"]].diff()
    d["wd"] = 2.0 / (1.0 / s["w"] + 1.0 / g["w"].shift())
    d["unit"] = s["unit"]
    d = d[d["period"] == 1]
    model = sm.WLS(d["y"], sm.add_constant(d[["x1", "x2"]]), weights=d["wd"])
    ref = sm_fit(model, vcov, d["unit"])
    assert res.nobs == len(d) and res.extras["first_difference"]["dropped_gaps"] > 0
    assert rel(res.coef, ref.params[["x1", "x2", "const"]]) < 1e-9
    assert rel(res.std_error, ref.bse[["x1", "x2", "const"]]) < 1e-9


def weighted_gls_reference(df: pd.DataFrame, xs: list[str]) -> dict:
    """Swamy-Arora and GLS written out with N x N matrices on rows scaled by sqrt(w / wbar)."""
    w = (df["w"] / df["w"].mean()).to_numpy()
    codes = pd.factorize(df["unit"])[0]
    n, g, k = len(df), codes.max() + 1, len(xs)
    x = np.column_stack([df[xs].to_numpy(), np.ones(n)])
    y = df["y"].to_numpy()
    dummies = np.zeros((n, g))
    dummies[np.arange(n), codes] = 1.0
    # s_e^2 from the weighted within fit (WLS with unit dummies), df N - G - K
    within = sm.WLS(y, np.column_stack([df[xs].to_numpy(), dummies]), weights=w).fit()
    s_e2 = within.ssr / (n - g - k)
    # between regression in the scaled space: P projects on the scaled unit dummies
    r = np.sqrt(w)
    z = dummies * r[:, None]
    proj = z @ np.linalg.solve(z.T @ z, z.T)
    px, py = proj @ (x * r[:, None]), proj @ (y * r)
    resid_maker = np.eye(n) - px @ np.linalg.pinv(px)
    rss_b = float(py @ resid_maker @ py)
    s_u2 = (rss_b - (g - k - 1) * s_e2) / np.trace(resid_maker @ z @ z.T)
    omega = np.diag(s_e2 / w) + s_u2 * (dummies @ dummies.T)
    oi = linalg.inv(omega)
    bread = linalg.inv(x.T @ oi @ x)
    b = bread @ x.T @ oi @ y
    u = y - x @ b
    vcov = float(u @ oi @ u) / (n - k - 1) * bread
    t_w = np.bincount(codes, weights=w)[codes]
    theta = 1 - np.sqrt(s_e2 / (t_w * s_u2 + s_e2))
    return {"coef": b, "se": np.sqrt(np.diag(vcov)), "vcov": vcov, "sigma_u": np.sqrt(s_u2),
            "sigma_e": np.sqrt(s_e2), "theta": theta, "within": within}


def test_weighted_random_effects_match_gls_with_the_covariance_written_out(to_parquet):
    # Reference: weighted_gls_reference above (N x N projection and Omega matrices, no
    # quasi-demeaning), and the Hausman contrast of the two weighted iid fits.
    df = weighted_panel(95)
    xs = ["x1", "x2"]
    res = bigpanel.fit(to_parquet(df), y="y", x=xs, fe="unit", estimator="random-effects", weights="w", hausman=True)
    ref = weighted_gls_reference(df, xs)
    comp = res.extras["random_effects"]
    assert rel([comp["sigma_u"], comp["sigma_e"]], [ref["sigma_u"], ref["sigma_e"]]) < 1e-9
    assert rel(res.coef, ref["coef"]) < 1e-9 and rel(res.std_error, ref["se"]) < 1e-9
    assert comp["theta"]["min"] == pytest.approx(ref["theta"].min(), rel=1e-9)
    assert comp["theta"]["max"] == pytest.approx(ref["theta"].max(), rel=1e-9)
    # Here V_W - V_R has a negative eigenvalue: the stated rule inverts it on its positive ones.
    diff = ref["within"].params[:2] - ref["coef"][:2]
    eig, vec = np.linalg.eigh(ref["within"].cov_params()[:2, :2] - ref["vcov"][:2, :2])
    keep = eig > 0
    stat = float(((vec[:, keep].T @ diff) ** 2 / eig[keep]).sum())
    h = res.extras["hausman"]
    assert h["statistic"] == pytest.approx(stat, rel=1e-7) and h["df"] == keep.sum() == 1 and "note" in h


@pytest.mark.parametrize("vcov", ["hc1", "cr1"])
def test_weighted_random_effects_robust_errors(to_parquet, vcov):
    # Reference: statsmodels WLS (weights w) of y - theta_i ybar_i on x - theta_i xbar_i and
    # 1 - theta_i, the weighted unit means and theta_i from weighted_gls_reference; its HC1 and
    # cluster errors. With the cluster version, the Mundlak F on the added (1 - theta_i) xbar_i.
    df = weighted_panel(97)
    xs = ["x1", "x2"]
    res = bigpanel.fit(to_parquet(df), y="y", x=xs, fe="unit", estimator="random-effects", weights="w", variance=vcov,
                       cluster="unit" if vcov == "cr1" else None, hausman=True)
    theta = weighted_gls_reference(df, xs)["theta"]
    cols = ["y", *xs]
    wsum = df.groupby("unit")["w"].transform("sum")
    means = df[cols].mul(df["w"], axis=0).groupby(df["unit"]).transform("sum").div(wsum, axis=0)
    z = np.column_stack([df[xs].to_numpy() - theta[:, None] * means[xs].to_numpy(), 1 - theta])
    ys = df["y"].to_numpy() - theta * means["y"].to_numpy()
    ref = sm_fit(sm.WLS(ys, z, weights=df["w"]), vcov, df["unit"])
    assert rel(res.coef, ref.params) < 1e-9 and rel(res.std_error, ref.bse) < 1e-9
    aug = np.column_stack([z[:, :2], (1 - theta)[:, None] * means[xs].to_numpy(), z[:, 2]])
    fit = sm_fit(sm.WLS(ys, aug, weights=df["w"]), "cr1", df["unit"])
    gamma, v = fit.params[2:4], fit.cov_params()[2:4, 2:4]
    assert res.extras["mundlak"]["statistic"] == pytest.approx(float(gamma @ np.linalg.solve(v, gamma)) / 2, rel=1e-8)


@pytest.mark.parametrize("estimator", ["between", "first-difference", "random-effects"])
def test_constant_weights_give_the_unweighted_fit(to_parquet, estimator):
    # Invariance (common practice): analytic weights only matter up to a common factor.
    df = make_panel(seed=99)
    df["w"] = 3.7
    path = to_parquet(df)
    kw = dict(y="y", x=["x1", "x2"], fe="unit", estimator=estimator, time="period" if estimator == "first-difference" else None)
    weighted = bigpanel.fit(path, weights="w", **kw)
    plain = bigpanel.fit(path, **kw)
    assert rel(weighted.coef, plain.coef) < 1e-10 and rel(weighted.std_error, plain.std_error) < 1e-10
    if estimator == "random-effects":
        assert weighted.extras["random_effects"]["sigma_e"] == pytest.approx(
            plain.extras["random_effects"]["sigma_e"], rel=1e-10)


@pytest.mark.parametrize("estimator", ["between", "first-difference"])
def test_weighted_sigma_does_not_depend_on_the_weights_scale(to_parquet, estimator):
    # Analytic weights w and 100 w describe the same model (common practice): the slopes, their
    # errors and the residual s.e. (that of a row of mean weight) agree to 1e-9.
    df = make_panel(seed=84)
    df["w"] = np.random.default_rng(5).uniform(0.2, 5.0, len(df))
    kw = dict(y="y", x=["x1", "x2"], fe="unit", estimator=estimator, time="period" if estimator != "between" else None)
    one = bigpanel.fit(to_parquet(df), **kw, weights="w")
    big = bigpanel.fit(to_parquet(df.assign(w=100 * df["w"])), **kw, weights="w")
    assert rel(one.coef, big.coef) < 1e-9 and rel(one.std_error, big.std_error) < 1e-9
    assert abs(one.inference.sigma / big.inference.sigma - 1) < 1e-9
