"""Two- and three-way fits against statsmodels LSDV with all dummies."""

import numpy as np
import pandas as pd
import pytest

import bigpanel
from conftest import drop_singletons, dummy_block, lsdv, rel

X = ["x1", "x2"]


def mobility_panel(seed: int) -> pd.DataFrame:
    """Workers x firms x years in two disconnected blocks, unbalanced, with singletons."""
    rng = np.random.default_rng(seed)
    rows = []
    for block in range(2):
        for w in range(40):
            worker = block * 100 + w
            for year in range(int(rng.integers(1, 6))):
                firm = block * 100 + int(rng.integers(0, 8))
                rows.append((worker, firm, 2000 + year + int(rng.integers(0, 3))))
    df = pd.DataFrame(rows, columns=["worker", "firm", "year"])
    wf = rng.normal(size=300)[df["worker"] % 300]
    ff = rng.normal(size=300)[df["firm"] % 300]
    X_ = rng.normal(size=(len(df), 2)) + np.column_stack([wf, ff])
    df["x1"], df["x2"] = X_[:, 0], X_[:, 1]
    df["y"] = 0.7 * df["x1"] - 0.4 * df["x2"] + wf + ff + 0.1 * (df["year"] - 2000) + rng.normal(size=len(df))
    df["office"] = rng.integers(0, 12, len(df))  # a cluster that no effect is nested in
    return df


@pytest.mark.parametrize("fe", [["worker", "firm"], ["worker", "firm", "year"]])
@pytest.mark.parametrize("vcov", ["classical", "hc1", "cr1"])
def test_multiway_matches_lsdv(to_parquet, fe, vcov):
    # Reference: statsmodels OLS on x plus a full-rank dummy block (intercept and every
    # effect's dummies, redundant columns removed by pivoted QR), on the sample left
    # after iteratively removing singletons. Its n - rank equals our N - K - P here:
    # exact for two effects (one redundancy per connected component) and, with a year
    # effect that spans both blocks, exact for three as well.
    df = mobility_panel(seed=3)
    res = bigpanel.fit(to_parquet(df), y="y", x=X, fe=fe, variance=vcov, cluster="office" if vcov == "cr1" else None)
    sample = drop_singletons(df, fe)
    assert res.rows.dropped_singletons == len(df) - len(sample) > 0
    assert res.nobs == len(sample)
    assert res.components == 2
    cov = {"classical": "nonrobust", "hc1": "HC1", "cr1": "cluster"}[vcov]
    ref = lsdv(sample, "y", X, fe, cov_type=cov, groups=sample["office"])
    assert res.absorbed == dummy_block(sample, fe).shape[1]
    assert rel(res.coef, ref.params[:2]) < 1e-6
    assert rel(res.std_error, ref.bse[:2]) < 1e-6
    assert res.solver.converged


def test_keep_singletons(to_parquet):
    # With singletons kept the slopes still equal LSDV on the full sample (statsmodels).
    df = mobility_panel(seed=4)
    res = bigpanel.fit(to_parquet(df), y="y", x=X, fe=["worker", "firm"], singletons="keep")
    ref = lsdv(df, "y", X, ["worker", "firm"])
    assert res.nobs == len(df)
    assert rel(res.coef, ref.params[:2]) < 1e-6
    assert rel(res.std_error, ref.bse[:2]) < 1e-6


def test_interaction_effect(to_parquet):
    # An effect a:b has one level per distinct pair; reference: statsmodels LSDV on the pair labels.
    df = mobility_panel(seed=5)
    df["firm_year"] = df["firm"].astype(str) + "_" + df["year"].astype(str)
    res = bigpanel.fit(to_parquet(df), y="y", x=X, fe=["worker", "firm:year"])
    sample = drop_singletons(df, ["worker", "firm_year"])
    ref = lsdv(sample, "y", X, ["worker", "firm_year"])
    assert rel(res.coef, ref.params[:2]) < 1e-6
    assert rel(res.std_error, ref.bse[:2]) < 1e-6


def test_two_way_effects_reproduce_fitted_values(to_parquet):
    # The estimated effects plus x'b reproduce the LSDV fitted values (statsmodels).
    df = mobility_panel(seed=6)
    res = bigpanel.fit(to_parquet(df), y="y", x=X, fe=["worker", "firm"])
    sample = drop_singletons(df, ["worker", "firm"])
    ref = lsdv(sample, "y", X, ["worker", "firm"])
    fw = res.effects["worker"].to_pandas().set_index("worker")["effect"]
    ff = res.effects["firm"].to_pandas().set_index("firm")["effect"]
    fitted = sample[X].to_numpy() @ res.coef + fw.loc[sample["worker"]].to_numpy() + ff.loc[sample["firm"]].to_numpy()
    assert np.max(np.abs(fitted - ref.fittedvalues)) < 1e-6
    # Stated normalisation: firm effects have a row-weighted mean of zero in each component.
    s = sample.assign(f=ff.loc[sample["firm"]].to_numpy(), block=sample["firm"] // 100)
    assert s.groupby("block")["f"].mean().abs().max() < 1e-9


def test_chain_graph_converges(to_parquet):
    # A deliberately slow case: a long chain of firms where each worker moves between two
    # neighbouring firms. Plain alternating projections need thousands of sweeps here;
    # the accelerated solve must still reach the tolerance. Reference: statsmodels LSDV.
    rng = np.random.default_rng(7)
    rows = []
    n_firms = 150
    for f in range(n_firms - 1):
        for w in range(2):
            worker = 2 * f + w
            for t in range(4):
                rows.append((worker, f + (t % 2)))
    df = pd.DataFrame(rows, columns=["worker", "firm"])
    df["x1"] = rng.normal(size=len(df)) + df["firm"] / 50
    df["x2"] = rng.normal(size=len(df))
    df["y"] = 1.5 * df["x1"] + 0.5 * df["x2"] + df["firm"] / 10 + rng.normal(size=len(df))
    res = bigpanel.fit(to_parquet(df), y="y", x=X, fe=["worker", "firm"])
    ref = lsdv(df, "y", X, ["worker", "firm"])
    assert res.solver.converged
    assert res.solver.iterations < 1000
    assert rel(res.coef, ref.params[:2]) < 1e-6
    assert rel(res.std_error, ref.bse[:2]) < 1e-6


@pytest.mark.parametrize("fe", [["worker", "firm"], ["worker", "firm", "year"]])
def test_in_engine_sweeps_when_pairs_exceed_the_budget(to_parquet, fe):
    # A budget of one byte forces the in-engine path; one connected block so that its
    # conservative one-component count is exact. Reference: statsmodels LSDV, and the
    # group-level path itself.
    df = mobility_panel(seed=9)
    df = df[df["worker"] < 100].reset_index(drop=True)
    path = to_parquet(df)
    slow = bigpanel.fit(path, y="y", x=X, fe=fe, cell_budget=1, variance="hc1", tol=1e-12)
    fast = bigpanel.fit(path, y="y", x=X, fe=fe, variance="hc1")
    assert slow.solver.path.startswith("in-engine") and slow.solver.converged
    assert slow.solver.raw_passes > fast.solver.raw_passes
    sample = drop_singletons(df, fe)
    ref = lsdv(sample, "y", X, fe, cov_type="HC1")
    assert rel(slow.coef, ref.params[:2]) < 1e-6 and rel(slow.std_error, ref.bse[:2]) < 1e-6
    assert rel(slow.coef, fast.coef) < 1e-6
