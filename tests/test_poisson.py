"""The Poisson fit (--model poisson) against statsmodels GLM (Poisson family) with explicit dummies.

References: statsmodels' GLM fit of y on x and the full-rank dummy block (conftest.dummy_block)
gives the coefficients, the fitted means and its model-based errors; the sandwich errors are
computed here in numpy from that fit, with the full design (x and dummies) and the
small-sample factors the README states, so that they do not depend on how statsmodels scales
its own robust variances. Panels are invented (Poisson counts whose coefficients we set).
"""

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from typer.testing import CliRunner

import bigpanel
from bigpanel import BigPanelError
from bigpanel.cli import app
from conftest import FILE_LAYOUTS, dummy_block, in_file_layout, rel

X = ["x1", "x2"]


def count_panel(seed: int, units: int = 40, periods: int = 10, items: int = 5, zero_unit: bool = False) -> pd.DataFrame:
    """Invented unit x period counts, 15% of cells missing, a third effect drawn per row;
    E[y] = exp(1 + 0.5 x1 - 0.3 x2 + unit + period + item effects); x1 moves with the unit effect.
    ``zero_unit``: unit 0's outcome is zero in every row (its effect is minus infinity)."""
    rng = np.random.default_rng(seed)
    unit, period = np.divmod(np.arange(units * periods), periods)
    item = rng.integers(0, items, len(unit))
    a, g, h = rng.normal(0, 0.7, units)[unit], rng.normal(0, 0.5, periods)[period], rng.normal(0, 0.3, items)[item]
    x1 = rng.normal(size=len(unit)) + 0.4 * a
    x2 = rng.normal(size=len(unit))
    y = rng.poisson(np.exp(1.0 + 0.5 * x1 - 0.3 * x2 + a + g + h)).astype(float)
    df = pd.DataFrame({"unit": unit, "period": period, "item": item, "x1": x1, "x2": x2, "y": y,
                       "sector": rng.integers(0, 12, len(unit)), "w": rng.uniform(0.5, 2.0, len(unit))})
    if zero_unit:
        df.loc[df["unit"] == 0, "y"] = 0.0
    return df[rng.random(len(df)) < 0.85].reset_index(drop=True)


def glm(df: pd.DataFrame, fe: list[str], weights: str | None = None):
    """statsmodels GLM (Poisson) on x and the full-rank dummies: (fit, design, prior weights)."""
    design = np.hstack([df[X].to_numpy(float), dummy_block(df, fe)])
    p = df[weights].to_numpy(float) if weights else np.ones(len(df))
    fit = sm.GLM(df["y"].to_numpy(float), design, family=sm.families.Poisson(), freq_weights=p).fit(
        tol=1e-14, maxiter=300)
    return fit, design, p


def sandwich(df: pd.DataFrame, fe: list[str], clusters: list[list[str]] | None = None, weights: str | None = None,
             nested_params: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Coefficients and sandwich errors of x from the GLM fit: B = (Z'WZ)^-1 over the full design Z
    (x and dummies, W = p mu), scores p (y - mu) z; HC1: N / (N - k) with k the design's columns;
    CR1 on each combination of cluster columns (inclusion-exclusion): G / (G - 1) * (N - 1) /
    (N - k_c), k_c = k unless ``nested_params`` says how many the nested effects leave."""
    fit, z, p = glm(df, fe, weights)
    mu = fit.mu
    n, k = z.shape
    bread = np.linalg.inv(z.T @ (z * (p * mu)[:, None]))
    scores = z * (p * (df["y"].to_numpy() - mu))[:, None]
    if clusters is None:
        v = n / (n - k) * bread @ scores.T @ scores @ bread
    else:
        v = np.zeros_like(bread)
        for cols in clusters:
            codes = pd.factorize(pd.MultiIndex.from_frame(df[cols]))[0]
            g = codes.max() + 1
            sums = np.zeros((g, k))
            np.add.at(sums, codes, scores)
            k_c = k if nested_params is None else nested_params
            sign = 1 if len(cols) == 1 else -1
            v += sign * g / (g - 1) * (n - 1) / (n - k_c) * bread @ sums.T @ sums @ bread
    return fit.params[:2], np.sqrt(np.diag(v)[:2])


@pytest.mark.parametrize("fe,strategy", [(["unit"], None), (["unit", "period"], "pair tables"),
                                         (["unit", "period"], "row codes"), (["unit", "period", "item"], "row codes"),
                                         (["period", "item", "unit"], "pair tables")])
def test_matches_glm_with_dummies(to_parquet, fe, strategy):
    # statsmodels GLM with explicit dummies: coefficients to 1e-8, HC1 errors (N / (N - K - P)
    # times the sandwich) to 1e-6, on every strategy that partials the effects out.
    df = count_panel(3)
    assert all((df.groupby(d)["y"].max() > 0).all() for d in fe)  # no level to drop: the GLM's sample
    res = bigpanel.fit(to_parquet(df), "y ~ x1 + x2", fe=fe, model="poisson", strategy=strategy)
    coef, se = sandwich(df, fe)
    assert res.names == X and res.inference.kind == "hc1"
    assert rel(res.coef, coef) < 1e-8
    assert rel(res.std_error, se) < 1e-6
    assert res.nobs == len(df) and res.solver.converged
    if strategy:
        assert res.solver.strategy["name"] == strategy


@pytest.mark.parametrize("layout", FILE_LAYOUTS)
def test_row_codes_whatever_the_file_order(to_parquet, layout):
    # Every IRLS step streams the rows' codes and working weights in the engine's scan order and
    # builds its link tables from the runs that come: units in runs out of code order, two units
    # in two runs each, or no runs at all (period by period: the engine sorts, at every step).
    # Reference: statsmodels GLM with explicit dummies (coefficients 1e-8, HC1 errors 1e-6).
    df = in_file_layout(count_panel(3), layout)
    fe = ["unit", "period", "item"]
    res = bigpanel.fit(to_parquet(df), "y ~ x1 + x2", fe=fe, model="poisson", strategy="row codes")
    coef, se = sandwich(df, fe)
    assert rel(res.coef, coef) < 1e-8
    assert rel(res.std_error, se) < 1e-6
    assert ("IRLS step: working weight of every row, sorted" in res.timings) == (layout == "period by period")


def test_model_variance_and_deviance_match_glm(to_parquet):
    # classical = the Poisson model's own variance (X'WX)^-1: statsmodels' nonrobust errors; the
    # deviance and the constant-only deviance are statsmodels' deviance and null_deviance.
    df = count_panel(5)
    fe = ["unit", "period"]
    res = bigpanel.fit(to_parquet(df), "y ~ x1 + x2", fe=fe, model="poisson", variance="classical")
    fit, _, _ = glm(df, fe)
    assert rel(res.coef, fit.params[:2]) < 1e-8
    assert rel(res.std_error, fit.bse[:2]) < 1e-6
    ps = res.extras["poisson"]
    assert ps["deviance"] == pytest.approx(fit.deviance, rel=1e-8)
    assert ps["null_deviance"] == pytest.approx(fit.null_deviance, rel=1e-10)
    assert ps["deviance_r2"] == pytest.approx(1 - fit.deviance / fit.null_deviance, rel=1e-8)
    # the squared correlation of y and the fitted mean, from statsmodels' fitted means (numpy)
    assert ps["squared_correlation"] == pytest.approx(np.corrcoef(df["y"], fit.mu)[0, 1] ** 2, rel=1e-8)


def test_absorbed_and_collinear_regressors_are_dropped(to_parquet):
    # A unit trait (absorbed by the unit effect) and a copy of x1 scaled by 2 (collinear) are
    # dropped with their reasons, as the linear fit drops them; the rest equals the GLM on x1, x2.
    df = count_panel(4)
    df["trait"] = (df["unit"] % 5).astype(float)
    df["x1_twice"] = 2.0 * df["x1"]
    fe = ["unit", "period"]
    res = bigpanel.fit(to_parquet(df), "y ~ x1 + trait + x2 + x1_twice", fe=fe, model="poisson")
    assert res.names == X
    assert [(d["name"], d["reason"].split(":")[0]) for d in res.dropped] == [
        ("trait", "absorbed"), ("x1_twice", "collinear with the other regressors")]
    coef, se = sandwich(df, fe)
    assert rel(res.coef, coef) < 1e-8 and rel(res.std_error, se) < 1e-6


def test_all_zero_level_is_dropped(to_parquet):
    # Unit 0's outcome is zero in every row: its effect is minus infinity. The fit equals the GLM
    # on the sample without that unit, and its rows are counted under their own reason.
    df = count_panel(7, zero_unit=True)
    fe = ["unit", "period"]
    res = bigpanel.fit(to_parquet(df), "y ~ x1 + x2", fe=fe, model="poisson")
    kept = df[df["unit"] != 0]
    coef, se = sandwich(kept, fe)
    assert rel(res.coef, coef) < 1e-8 and rel(res.std_error, se) < 1e-6
    ps = res.extras["poisson"]
    assert ps["dropped_rows"] == {"outcome zero in every row of a level": int((df["unit"] == 0).sum())}
    assert ps["levels_with_zero_outcome"] == {"unit": 1, "period": 0}
    assert res.nobs == len(kept) and res.fe[0].levels == kept["unit"].nunique()


def test_zero_levels_and_singletons_peel_in_turn(to_parquet):
    # Period 10 holds two rows: one in the all-zero unit 0, one in unit 1. Dropping unit 0 leaves
    # that period a singleton, which goes next; the reference GLM is fitted without both.
    df = count_panel(8, zero_unit=True)
    extra = pd.DataFrame({"unit": [0, 1], "period": [10, 10], "item": [0, 0], "x1": [0.3, -0.2], "x2": [0.1, 0.4],
                          "y": [0.0, 3.0], "sector": [1, 2], "w": [1.0, 1.0]})
    df = pd.concat([df, extra], ignore_index=True)
    fe = ["unit", "period"]
    res = bigpanel.fit(to_parquet(df), "y ~ x1 + x2", fe=fe, model="poisson")
    kept = df[(df["unit"] != 0) & (df["period"] != 10)]
    coef, se = sandwich(kept, fe)
    assert rel(res.coef, coef) < 1e-8 and rel(res.std_error, se) < 1e-6
    assert res.rows.dropped_singletons == 1
    assert res.extras["poisson"]["dropped_rows"]["outcome zero in every row of a level"] == int((df["unit"] == 0).sum())


@pytest.mark.parametrize("singletons", ["drop", "keep"])
def test_singletons_dropped_or_kept(to_parquet, singletons):
    # Unit 99 holds one row with y = 4: dropped, the GLM without it; kept, its effect fits that
    # row exactly and the GLM on every row (its dummy counted in N / (N - K - P)) is the reference.
    df = count_panel(41)
    df = pd.concat([df, pd.DataFrame({"unit": [99], "period": [3], "item": [0], "x1": [0.2], "x2": [0.1], "y": [4.0],
                                      "sector": [1], "w": [1.0]})], ignore_index=True)
    fe = ["unit", "period"]
    res = bigpanel.fit(to_parquet(df), "y ~ x1 + x2", fe=fe, model="poisson", singletons=singletons)
    kept = df if singletons == "keep" else df[df["unit"] != 99]
    coef, se = sandwich(kept, fe)
    assert rel(res.coef, coef) < 1e-8 and rel(res.std_error, se) < 1e-6
    assert res.nobs == len(kept) and res.rows.dropped_singletons == len(df) - len(kept)


@pytest.mark.parametrize("strategy", ["pair tables", "row codes"])
def test_clustered_one_and_two_way(to_parquet, strategy):
    # CR1 on a column no effect is nested in (every dummy counts: k_c = k), one way and two way
    # (Cameron, Gelbach and Miller's inclusion-exclusion), against the numpy sandwich.
    df = count_panel(11)
    df["office"] = np.random.default_rng(2).integers(0, 9, len(df))
    fe = ["unit", "period"]
    path = to_parquet(df)
    one = bigpanel.fit(path, "y ~ x1 + x2", fe=fe, model="poisson", cluster="sector", strategy=strategy)
    coef, se = sandwich(df, fe, clusters=[["sector"]])
    assert rel(one.coef, coef) < 1e-8 and rel(one.std_error, se) < 1e-6
    assert one.inference.df == df["sector"].nunique() - 1
    two = bigpanel.fit(path, "y ~ x1 + x2", fe=fe, model="poisson", cluster=["sector", "office"], strategy=strategy)
    coef, se = sandwich(df, fe, clusters=[["sector"], ["office"], ["sector", "office"]])
    assert rel(two.std_error, se) < 1e-6


@pytest.mark.parametrize("strategy", ["pair tables", "row codes"])
def test_cluster_nesting_an_effect(to_parquet, strategy):
    # Clustered by unit, in which the unit effect is nested: as for the linear fit, its
    # parameters leave the CR1 factor, k_c = K + 1 + (periods - 1).
    df = count_panel(12)
    res = bigpanel.fit(to_parquet(df), "y ~ x1 + x2", fe=["unit", "period"], model="poisson", cluster="unit",
                       strategy=strategy)
    coef, se = sandwich(df, ["unit", "period"], clusters=[["unit"]], nested_params=2 + df["period"].nunique())
    assert rel(res.std_error, se) < 1e-6
    assert res.fe[0].nested_in_cluster


def test_prior_weights_and_filter(to_parquet):
    # --weights as prior weights (statsmodels freq_weights: the same estimating equations), with a
    # filter: the GLM on the filtered rows, sandwich scores p (y - mu) x.
    df = count_panel(13)
    fe = ["unit", "period"]
    res = bigpanel.fit(to_parquet(df), "y ~ x1 + x2", fe=fe, model="poisson", weights="w", where="period < 8")
    kept = df[df["period"] < 8].reset_index(drop=True)
    coef, se = sandwich(kept, fe, weights="w")
    assert rel(res.coef, coef) < 1e-8 and rel(res.std_error, se) < 1e-6


def test_effects_give_the_fitted_means(to_parquet):
    # The effects (normalised as the linear fit's) and the slopes rebuild statsmodels' fitted
    # means; exp_effect is exp(effect).
    df = count_panel(17)
    fe = ["unit", "period", "item"]
    res = bigpanel.fit(to_parquet(df), "y ~ x1 + x2", fe=fe, model="poisson", exponentiate=True)
    fit, _, _ = glm(df, fe)
    eta = df[X].to_numpy() @ res.coef
    for name in fe:
        table = res.effects[name].to_pandas().set_index(name)
        eta = eta + table.loc[df[name], "effect"].to_numpy()
        np.testing.assert_allclose(table["exp_effect"], np.exp(table["effect"]), rtol=1e-15)
    assert rel(np.exp(eta), fit.mu) < 1e-7


def test_gravity_panel_recovers_the_coefficients(to_parquet):
    # Invented gravity data: exports between 20 countries over 8 years with exporter-year,
    # importer-year and pair effects, many zeros, a trade agreement switching on within pairs
    # and a tariff; E[y] = exp(0.4 agreement - 2 log(1 + tariff) + effects). The estimates lie
    # within 4 standard errors of the values we set.
    rng = np.random.default_rng(23)
    c, t = 20, 8
    ex, im, yr = np.meshgrid(np.arange(c), np.arange(c), np.arange(t), indexing="ij")
    keep = ex != im
    ex, im, yr = ex[keep], im[keep], yr[keep]
    pair = ex * c + im
    start = rng.integers(0, 2 * t, c * c)[pair]
    agreement = (yr >= start).astype(float)
    tariff = np.clip(rng.uniform(0.0, 0.3, c * c)[pair] + rng.normal(0, 0.03, len(pair)), 0, None)
    eta = (0.4 * agreement - 2.0 * np.log1p(tariff) + rng.normal(0, 1, (c, t))[ex, yr]
           + rng.normal(0, 1, (c, t))[im, yr] + rng.normal(-0.5, 1, c * c)[pair])
    df = pd.DataFrame({"exporter": ex, "importer": im, "pair": pair, "year": yr, "agreement": agreement,
                       "log_tariff": np.log1p(tariff), "trade": rng.poisson(np.exp(eta)).astype(float)})
    res = bigpanel.fit(to_parquet(df), "trade ~ agreement + log_tariff",
                       fe=["exporter:year", "importer:year", "exporter:importer"], model="poisson",
                       cluster="pair")
    assert (df["trade"] == 0).mean() > 0.2
    assert np.all(np.abs(res.coef - np.array([0.4, -2.0])) < 4 * res.std_error)
    assert res.solver.converged


def test_regressor_separation_is_flagged(to_parquet):
    # x3 is 1 only on rows with y = 0 (inside levels with positive rows): the likelihood rises
    # as its coefficient falls without bound. The fit does not converge within the limit and
    # says that rows may be separated; the command exits 3.
    df = count_panel(29)
    zeros = np.flatnonzero(df["y"].to_numpy() == 0)[:6]
    df["x3"] = 0.0
    df.loc[zeros, "x3"] = 1.0
    path = to_parquet(df)
    res = bigpanel.fit(path, "y ~ x1 + x2 + x3", fe=["unit", "period"], model="poisson", irls_max_iter=25)
    assert not res.solver.converged
    assert any("NOT CONVERGED" in w and "separated" in w for w in res.warnings)
    assert any("fitted mean below" in w for w in res.warnings)
    out = CliRunner().invoke(app, ["fit", path, "y ~ x1 + x2 + x3", "--fe", "unit", "--fe", "period", "--model",
                                   "poisson", "--irls-max-iter", "25", "--quiet"])
    assert out.exit_code == 3


def test_bad_inputs_are_one_line(to_parquet):
    df = count_panel(31)
    df.loc[5, "y"] = -2.5
    path = to_parquet(df)
    out = CliRunner().invoke(app, ["fit", path, "y ~ x1 + x2", "--fe", "unit", "--model", "poisson"])
    assert out.exit_code == 2 and "-2.5" in out.output and "never negative" in out.output
    with pytest.raises(BigPanelError, match="within estimator only"):
        bigpanel.fit(path, "y ~ x1", fe="unit", model="poisson", estimator="between")
    with pytest.raises(BigPanelError, match="unknown model"):
        bigpanel.fit(path, "y ~ x1", fe="unit", model="logit")
    with pytest.raises(BigPanelError, match="irls-tol"):
        bigpanel.fit(path, "x1 ~ x2", fe="unit", model="poisson", irls_tol=0)
    with pytest.raises(BigPanelError, match="does not apply to the within"):
        bigpanel.fit(path, "y ~ x1", fe="unit", exponentiate=True)
    df["y"] = 0.0
    with pytest.raises(BigPanelError, match="zero in every row"):
        bigpanel.fit(to_parquet(df), "y ~ x1", fe="unit", model="poisson")


def test_command_line_and_json(to_parquet, tmp_path):
    df = count_panel(37)
    path = to_parquet(df)
    out = CliRunner().invoke(app, ["fit", path, "y ~ x1 + x2", "--fe", "unit", "--fe", "period", "--model", "poisson",
                                   "--json", "--effects-out", str(tmp_path / "fx"), "--exponentiate"])
    assert out.exit_code == 0, out.output
    doc = json.loads(out.output)
    assert doc["estimator"] == "poisson" and doc["vcov"]["type"] == "hc1"
    assert set(doc["poisson"]) >= {"deviance", "null_deviance", "deviance_r2", "squared_correlation", "iterations",
                                   "converged", "dropped_rows", "raw_passes"}
    assert (tmp_path / "fx" / "effects_unit.parquet").exists()
    text = CliRunner().invoke(app, ["fit", path, "y ~ x1 + x2", "--fe", "unit", "--model", "poisson",
                                    "--save", str(tmp_path / "m.json")]).output
    assert "deviance R-squared" in text and "IRLS" in text
    table = CliRunner().invoke(app, ["table", str(tmp_path / "m.json")]).output
    r2 = json.loads((tmp_path / "m.json").read_text())["poisson"]["deviance_r2"]
    assert [line.split()[-1] for line in table.splitlines() if "deviance R-squared" in line] == [f"{r2:.3f}"]
    assert "poisson" in table
