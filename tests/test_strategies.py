"""Every strategy of the multi-way path (pair tables, row codes, in-engine sweeps) and the
one-pass one-way fit, against statsmodels LSDV (OLS/WLS with the full-rank dummy block)."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import sparse
from scipy.sparse.linalg import lsqr

import bigpanel
from bigpanel.numerics import rowcodes
from conftest import drop_singletons, dummy_block, lsdv, rel

X = ["x1", "x2"]
STRATEGIES = ["pair tables", "row codes", "in-engine sweeps"]


def unit_period_panel(seed: int, units: int = 40, periods: int = 9, items: int = 6) -> pd.DataFrame:
    """One row per (unit, period) cell, 10% of cells missing, and a third effect drawn at random
    per row (it cuts across units and periods); x moves with the unit and period effects."""
    rng = np.random.default_rng(seed)
    unit, period = np.divmod(np.arange(units * periods), periods)
    df = pd.DataFrame({"unit": unit, "period": period, "item": rng.integers(0, items, len(unit))})
    a, g, h = rng.normal(size=units)[unit], rng.normal(size=periods)[period], rng.normal(size=items)[df["item"]]
    x = rng.normal(size=(len(df), 2)) + np.column_stack([0.5 * a, 0.3 * g])
    df["x1"], df["x2"] = x[:, 0], x[:, 1]
    df["y"] = 0.8 * df["x1"] - 0.3 * df["x2"] + a + g + h + rng.normal(size=len(df)) * (1 + 0.3 * np.abs(x[:, 0]))
    df["region"] = df["unit"] % 5  # coarser than the unit: the unit effect is nested in it
    df["w"] = rng.uniform(0.3, 3.0, len(df))
    return df[rng.random(len(df)) < 0.9].reset_index(drop=True)


def sm_ref(df, fe, vcov, cluster=None, weights=None):
    """statsmodels OLS (or WLS) of y on x and the full-rank dummy block: slopes and s.e.

    statsmodels' CR1 factor counts every dummy, (N - 1) / (N - K_all); ours leaves out the
    effects nested in the cluster (README: P_c), so the reference s.e. are rescaled by
    sqrt((N - K_all) / (N - K - P_c)), with the nesting found here by pandas.
    """
    block = dummy_block(df, fe)
    design = np.hstack([df[X].to_numpy(dtype=float), block])
    model = (sm.WLS(df["y"].to_numpy(), design, weights=df[weights].to_numpy()) if weights
             else sm.OLS(df["y"].to_numpy(), design))
    if vcov != "cr1":
        ref = model.fit(cov_type={"classical": "nonrobust", "hc1": "HC1"}[vcov])
        return ref.params[:2], ref.bse[:2]
    ref = model.fit(cov_type="cluster", cov_kwds={"groups": pd.factorize(df[cluster])[0]})
    nested = [d for d in fe if (df.groupby(d)[cluster].nunique() == 1).all()]
    outside = [d for d in fe if d not in nested]
    p_c = (dummy_block(df, outside).shape[1] if outside else 1) if nested else block.shape[1]
    n, k = len(df), len(X)
    return ref.params[:2], ref.bse[:2] * np.sqrt((n - k - block.shape[1]) / (n - k - p_c))


@pytest.mark.parametrize("strategy", STRATEGIES)
@pytest.mark.parametrize("fe", [["unit", "period"], ["unit", "period", "item"], ["period", "item", "unit"]])
@pytest.mark.parametrize("vcov", ["classical", "hc1", "cr1"])
def test_strategies_match_lsdv_on_a_unit_period_panel(to_parquet, strategy, fe, vcov):
    # Reference: statsmodels LSDV. The panel is connected, so the conservative count of
    # the in-engine path and for third effects is exact; (period, item, unit) puts the
    # largest effect last, which the row-codes path eliminates first.
    df = unit_period_panel(seed=1)
    cluster = "unit" if vcov == "cr1" else None
    res = bigpanel.fit(to_parquet(df), y="y", x=X, fe=fe, variance=vcov, cluster=cluster, strategy=strategy, tol=1e-12)
    coef, se = sm_ref(df, fe, vcov, cluster)
    assert res.solver.strategy["name"] == strategy and res.solver.converged
    assert res.nobs == len(df) and res.absorbed == dummy_block(df, fe).shape[1]
    assert rel(res.coef, coef) < 1e-8
    assert rel(res.std_error, se) < 1e-8


@pytest.mark.parametrize("strategy", ["pair tables", "row codes"])
@pytest.mark.parametrize("vcov", ["classical", "cr1"])
def test_weighted_strategies_match_wls(to_parquet, strategy, vcov):
    # Reference: statsmodels WLS with the full-rank dummy block (analytic weights).
    df = unit_period_panel(seed=2)
    fe = ["unit", "period", "item"]
    cluster = "region" if vcov == "cr1" else None
    res = bigpanel.fit(to_parquet(df), y="y", x=X, fe=fe, variance=vcov, cluster=cluster, weights="w",
                       strategy=strategy, tol=1e-12)
    coef, se = sm_ref(df, fe, vcov, cluster, weights="w")
    assert rel(res.coef, coef) < 1e-8 and rel(res.std_error, se) < 1e-8


def test_row_codes_with_singletons_and_two_components(to_parquet):
    # Workers x firms in two disconnected blocks, with singletons: the row-codes path peels
    # them like the others and counts one redundant level per component (statsmodels LSDV).
    from test_multiway_lsdv import mobility_panel

    df = mobility_panel(seed=3)
    fe = ["worker", "firm", "year"]
    res = bigpanel.fit(to_parquet(df), y="y", x=X, fe=fe, strategy="row codes", tol=1e-12)
    sample = drop_singletons(df, fe)
    ref = lsdv(sample, "y", X, fe)
    coef, se = ref.params[:2], ref.bse[:2]
    assert res.components == 2 and res.nobs == len(sample)
    assert res.absorbed == dummy_block(sample, fe).shape[1]
    assert rel(res.coef, coef) < 1e-8 and rel(res.std_error, se) < 1e-8


def test_the_panel_chooses_its_strategy(to_parquet):
    # One row per cell: units x periods levels could give a pair per row, so pair tables
    # would not compress and the row codes run; with 40 rows per cell they do compress.
    df = unit_period_panel(seed=4)
    res = bigpanel.fit(to_parquet(df), y="y", x=X, fe=["unit", "period"])
    strategy = res.solver.strategy
    assert strategy["name"] == "row codes" and "unit x period" in strategy["reason"]
    assert strategy["levels"] == {"unit": 40, "period": 9} and strategy["pairs_at_most"] == {"unit x period": 360}
    many = pd.concat([df] * 40, ignore_index=True)
    many["x1"] += np.random.default_rng(0).normal(size=len(many))
    res = bigpanel.fit(to_parquet(many), y="y", x=X, fe=["unit", "period"])
    assert res.solver.strategy["name"] == "pair tables"
    coef = lsdv(many, "y", X, ["unit", "period"]).params[:2]
    assert rel(res.coef, coef) < 1e-8
    assert res.solver.raw_passes == 2  # per-level statistics, pairs of levels (cross-products from them)


def test_nearly_perfect_fit_keeps_its_digits(to_parquet):
    # y = x + tiny noise: RSS = y~'y~ - b'X~'y~ would cancel almost every digit, so it is
    # taken from a residual pass. Reference: statsmodels LSDV.
    df = unit_period_panel(seed=6)
    df["y"] = 1e3 * df["x1"] + 1e3 * df["x2"] + df["unit"] + 1e-6 * np.random.default_rng(1).normal(size=len(df))
    res = bigpanel.fit(to_parquet(df), y="y", x=X, fe=["unit", "period"], tol=1e-12)
    assert res.solver.rss_from == "residual pass"
    ref = lsdv(df, "y", X, ["unit", "period"])
    coef, se = ref.params[:2], ref.bse[:2]
    assert rel(res.coef, coef) < 1e-8 and rel(res.std_error, se) < 1e-6


@pytest.mark.parametrize("cluster", [None, "unit", "region"])
def test_one_way_in_one_pass(to_parquet, cluster):
    # One effect, classical errors or clustered on it or on a column it nests in: the reduction's level
    # co-moments give everything, one pass over the rows. Reference: statsmodels LSDV.
    df = unit_period_panel(seed=7)
    res = bigpanel.fit(to_parquet(df), y="y", x=X, fe="unit", cluster=cluster)
    assert res.solver.raw_passes == 1
    assert res.solver.cross_products_from.startswith("level co-moments")
    coef, se = sm_ref(df, ["unit"], "cr1" if cluster else "classical", cluster)
    assert rel(res.coef, coef) < 1e-10 and rel(res.std_error, se) < 1e-10


def test_one_way_clustered_across_levels_reads_the_rows_again(to_parquet):
    # A cluster that cuts across the units needs per-cluster sums of rows: a second pass.
    df = unit_period_panel(seed=8)
    res = bigpanel.fit(to_parquet(df), y="y", x=X, fe="unit", cluster="period")
    assert res.solver.raw_passes == 2 and res.solver.cross_products_from == "demeaned rows"
    coef, se = sm_ref(df, ["unit"], "cr1", "period")
    assert rel(res.coef, coef) < 1e-10 and rel(res.std_error, se) < 1e-10


def chain_panel(n_firms: int = 120) -> pd.DataFrame:
    """Workers who move only between neighbouring firms (a chain): slow to converge."""
    rng = np.random.default_rng(12)
    rows = [(2 * f + w, f + (t % 2), t) for f in range(n_firms - 1) for w in range(2) for t in range(4)]
    df = pd.DataFrame(rows, columns=["worker", "firm", "year"])
    df["x1"] = rng.normal(size=len(df)) + df["firm"] / 40
    df["x2"] = rng.normal(size=len(df))
    df["y"] = 1.5 * df["x1"] + 0.5 * df["x2"] + df["firm"] / 10 + rng.normal(size=len(df))
    return df


@pytest.mark.parametrize("strategy, preconditioner", [("pair tables", None), ("row codes", "dense"),
                                                      ("row codes", "diagonal")])
def test_chain_mobility_graph_converges(to_parquet, monkeypatch, strategy, preconditioner):
    # Reference: an exact sparse least-squares solve (scipy's LSQR to 1e-14 on y and x with
    # the worker and firm dummies), then the slopes from the residualised columns. The row
    # codes' Schur system is preconditioned by its dense Cholesky factor (120 firms: two
    # iterations at most) or, when that is not formed, by its diagonal (many iterations).
    if preconditioner == "diagonal":
        monkeypatch.setattr(rowcodes, "DENSE_LEVELS", 0)
    df = chain_panel()
    res = bigpanel.fit(to_parquet(df), y="y", x=X, fe=["worker", "firm"], strategy=strategy, tol=1e-8)
    assert res.solver.converged and 0 < res.solver.iterations < 2000
    if preconditioner == "dense":
        assert res.solver.iterations <= 2
    elif preconditioner == "diagonal":
        assert res.solver.iterations > 20
    n = len(df)
    dummies = sparse.hstack([sparse.csr_matrix((np.ones(n), (np.arange(n), df[c].to_numpy()))) for c in ("worker", "firm")])
    resid = {}
    for col in ["y", *X]:
        v = df[col].to_numpy()
        resid[col] = v - dummies @ lsqr(dummies, v, atol=1e-14, btol=1e-14, iter_lim=100_000)[0]
    beta = np.linalg.lstsq(np.column_stack([resid[c] for c in X]), resid["y"], rcond=None)[0]
    assert rel(res.coef, beta) < 1e-6


def test_the_solver_reports_its_budget_and_allocation(to_parquet):
    df = unit_period_panel(seed=9)
    res = bigpanel.fit(to_parquet(df), y="y", x=X, fe=["unit", "period"])
    s = res.solver
    assert s.python_budget_bytes > 0 and 0 < s.largest_python_allocation_bytes < s.python_budget_bytes
    with pytest.raises(bigpanel.BigPanelError, match="unknown strategy"):
        bigpanel.fit(to_parquet(df), y="y", x=X, fe=["unit", "period"], strategy="fastest")


def test_python_memory_option(tmp_path):
    # --python-memory sets the budget: 1 byte leaves nothing for numpy, so the projections run
    # in the engine, with the same slopes as statsmodels LSDV; a bad size is one line, exit 2.
    from typer.testing import CliRunner

    from bigpanel.cli import app
    from conftest import write_parquet

    df = unit_period_panel(seed=13)
    path = write_parquet(df, tmp_path / "p.parquet")
    out = CliRunner().invoke(app, ["fit", path, "y ~ x1 + x2", "--fe", "unit", "--fe", "period",
                                   "--python-memory", "1B", "--json", "--tol", "1e-12"])
    assert out.exit_code == 0, out.output
    import json

    res = json.loads(out.stdout)
    assert res["solver"]["strategy"]["name"] == "in-engine sweeps" and res["solver"]["python_budget_bytes"] == 1
    coef = lsdv(df, "y", X, ["unit", "period"]).params[:2]
    assert rel([res["coefficients"][x]["estimate"] for x in X], coef) < 1e-8
    bad = CliRunner().invoke(app, ["fit", path, "y ~ x1", "--fe", "unit", "--python-memory", "lots"])
    assert bad.exit_code == 2 and "--python-memory 'lots' is not a size" in bad.output
