"""The row-codes pass without the engine's sort: rows grouped by the largest effect in the
order the file holds them, levels split over a few runs, rows that are not grouped at all,
link tables shortened to runs of one level, and the threaded products; every fit against
statsmodels LSDV (OLS with the full-rank dummy block)."""

import numpy as np
import pandas as pd
import pytest
from scipy import sparse

import bigpanel
import bigpanel.rowcodes as rowcodes
from bigpanel.reduce import RowCodes
from conftest import rel
from test_strategies import X, sm_ref, unit_period_panel

SORTED = "level codes of every row, sorted"


def fit_codes(path: str, fe: list[str], vcov: str = "classical", cluster: str | None = None):
    return bigpanel.fit(path, y="y", x=X, fe=fe, variance=vcov, cluster=cluster, strategy="row codes", tol=1e-12)


@pytest.mark.parametrize("layout", ["units reversed", "two units split", "period by period"])
def test_row_order_of_the_file(to_parquet, layout):
    # The unit (the largest effect) comes in runs whose order is not the code order, two
    # units come in two runs each, or the file is written period by period (no runs at
    # all: the engine sorts in a second pass). Reference: statsmodels LSDV.
    df = unit_period_panel(seed=21)
    if layout == "units reversed":
        df = df.sort_values(["unit", "period"], ascending=[False, True])
    elif layout == "two units split":
        late = df["unit"].isin([3, 17]) & (df["period"] >= 5)
        df = pd.concat([df[~late], df[late]])
    else:
        df = df.sort_values(["period", "unit"])
    res = fit_codes(to_parquet(df.reset_index(drop=True)), ["unit", "period", "item"])
    coef, se = sm_ref(df, ["unit", "period", "item"], "classical")
    assert (SORTED in res.timings) == (layout == "period by period")
    assert rel(res.coef, coef) < 1e-8 and rel(res.std_error, se) < 1e-8


def spells_panel(seed: int, workers: int = 60, years: int = 8, firms: int = 12) -> pd.DataFrame:
    """Workers x years, each worker in one firm per spell of two to four years (the rows of a
    worker in one firm follow each other), a sector effect drawn per row; synthetic, with the
    slopes 0.6 and -0.3 set here."""
    rng = np.random.default_rng(seed)
    rows = []
    for w in range(workers):
        firm, left = int(rng.integers(firms)), int(rng.integers(2, 5))
        for year in range(years):
            if left == 0:
                firm, left = int(rng.integers(firms)), int(rng.integers(2, 5))
            rows.append((w, firm, year, int(rng.integers(4))))
            left -= 1
    df = pd.DataFrame(rows, columns=["worker", "firm", "year", "sector"])
    a, f = rng.normal(size=workers)[df["worker"]], rng.normal(size=firms)[df["firm"]]
    x = rng.normal(size=(len(df), 2)) + np.column_stack([0.5 * a, 0.4 * f])
    df["x1"], df["x2"] = x[:, 0], x[:, 1]
    df["y"] = 0.6 * df["x1"] - 0.3 * df["x2"] + a + f + 0.1 * df["year"] + rng.normal(size=len(df))
    return df


def test_runs_of_one_firm_become_one_link(to_parquet):
    # A worker's consecutive years in one firm are one nonzero of the worker x firm table, holding
    # their count: the table equals the product of the explicit dummy matrices (scipy), with
    # fewer nonzeros. The fit agrees with statsmodels LSDV, classical and clustered by worker.
    df = spells_panel(seed=22)
    rows = np.bincount(df["worker"])
    codes = {1: df["firm"].to_numpy(dtype=np.int32), 2: df["year"].to_numpy(dtype=np.int32)}
    links = rowcodes.build_links(RowCodes(0, codes, None), [rows, np.bincount(df["firm"]), np.bincount(df["year"])])
    n = len(df)
    dummies = [sparse.csr_matrix((np.ones(n), (np.arange(n), df[c].to_numpy()))) for c in ("worker", "firm", "year")]
    assert links.link[1].nnz < 0.75 * n and 1 not in links.unit
    assert abs(links.link[1] - dummies[0].T @ dummies[1]).max() == 0
    assert abs(links.link[2] - dummies[0].T @ dummies[2]).max() == 0
    path = to_parquet(df)
    for vcov, cluster in (("classical", None), ("cr1", "worker")):
        res = fit_codes(path, ["worker", "firm", "year"], vcov, cluster)
        coef, se = sm_ref(df, ["worker", "firm", "year"], vcov, cluster)
        assert rel(res.coef, coef) < 1e-8 and rel(res.std_error, se) < 1e-8


def test_threaded_products_add_as_one_thread(to_parquet, monkeypatch):
    # Splitting the value columns over threads leaves every sum as it was: the same bits as
    # without threads, and the slopes of statsmodels LSDV.
    df = spells_panel(seed=23)
    path = to_parquet(df)
    fe = ["worker", "firm", "sector"]
    plain = fit_codes(path, fe)
    monkeypatch.setattr(rowcodes, "THREADED_LEVELS", 1)
    threaded = fit_codes(path, fe)
    coef, se = sm_ref(df, fe, "classical")
    assert np.array_equal(plain.coef, threaded.coef) and np.array_equal(plain.std_error, threaded.std_error)
    assert rel(threaded.coef, coef) < 1e-8 and rel(threaded.std_error, se) < 1e-8


def test_a_worker_in_two_runs_still_links_the_firms(to_parquet):
    # Two blocks of firms joined by one worker alone, whose rows come in two runs (the first
    # at the top of the file, the rest at the bottom): the firms form one connected component,
    # so one firm level is redundant, not two. Reference: statsmodels LSDV (its rank).
    rng = np.random.default_rng(24)
    rows = [(w, (w // 30) * 5 + int(rng.integers(5)), year) for w in range(60) for year in range(6)]
    mover_a = [(60, 2, year) for year in range(3)]
    mover_b = [(60, 7, year) for year in range(3, 6)]
    df = pd.DataFrame(mover_a + rows + mover_b, columns=["worker", "firm", "year"])
    a, f = rng.normal(size=61)[df["worker"]], rng.normal(size=10)[df["firm"]]
    x = rng.normal(size=(len(df), 2)) + np.column_stack([0.5 * a, 0.4 * f])
    df["x1"], df["x2"] = x[:, 0], x[:, 1]
    df["y"] = 0.6 * df["x1"] - 0.3 * df["x2"] + a + f + rng.normal(size=len(df))
    res = fit_codes(to_parquet(df), ["worker", "firm"])
    coef, se = sm_ref(df, ["worker", "firm"], "classical")
    assert SORTED not in res.timings and res.components == 1
    assert rel(res.coef, coef) < 1e-8 and rel(res.std_error, se) < 1e-8
