"""The row-codes pass without the engine's sort: rows grouped by the largest effect in the
order the file holds them, levels split over a few runs, rows that are not grouped at all,
link tables shortened to runs of one level, and the threaded products; every fit against
statsmodels LSDV (OLS with the full-rank dummy block)."""

import numpy as np
import pandas as pd
import pytest
from scipy import sparse
from scipy.sparse.csgraph import connected_components

import bigpanel
import bigpanel.numerics.rowcodes as rowcodes
from bigpanel.passes.reduce import RowCodes
from conftest import FILE_LAYOUTS, in_file_layout, rel
from test_strategies import X, sm_ref, unit_period_panel

SORTED = "level codes of every row, sorted"


def fit_codes(path: str, fe: list[str], vcov: str = "classical", cluster: str | None = None):
    return bigpanel.fit(path, y="y", x=X, fe=fe, variance=vcov, cluster=cluster, strategy="row codes", tol=1e-12)


@pytest.mark.parametrize("layout", FILE_LAYOUTS)
def test_row_order_of_the_file(to_parquet, layout):
    # The unit (the largest effect) comes in runs whose order is not the code order, two
    # units come in two runs each, or the file is written period by period (no runs at
    # all: the engine sorts in a second pass). Reference: statsmodels LSDV.
    df = in_file_layout(unit_period_panel(seed=21), layout)
    res = fit_codes(to_parquet(df), ["unit", "period", "item"])
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
    # fewer nonzeros; so does the worker x year table kept as all ones but its missing cells.
    # The fit agrees with statsmodels LSDV, classical and clustered by worker.
    df = spells_panel(seed=22)
    rows = np.bincount(df["worker"])
    codes = {1: df["firm"].to_numpy(dtype=np.int32), 2: df["year"].to_numpy(dtype=np.int32)}
    links = rowcodes.build_links(RowCodes(0, codes, None), [rows, np.bincount(df["firm"]), np.bincount(df["year"])])
    n = len(df)
    dummies = [sparse.csr_matrix((np.ones(n), (np.arange(n), df[c].to_numpy()))) for c in ("worker", "firm", "year")]
    assert links.link[1].nnz < 0.75 * n and 1 not in links.unit
    for e in (1, 2):  # the year table, every cell held once, is all ones but its missing cells
        table = links.times({e: np.eye(df[("worker", "firm", "year")[e]].nunique())})
        assert np.array_equal(table, (dummies[0].T @ dummies[e]).toarray())
        assert np.array_equal(links.transposed_times(np.eye(len(rows)))[e], table.T)
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


def two_blocks(visits: str) -> pd.DataFrame:
    """Two blocks of firms joined by one worker (60) alone, whose two rows are the first and
    the last of the panel; synthetic, slopes 0.6 and -0.3 set here. Workers stay six years in
    one firm of their block (a sparse worker x firm table), or visit every firm of their block
    once (a table kept as all ones but its missing cells)."""
    rng = np.random.default_rng(24)
    if visits == "years in one firm":
        rows = [(w, (w // 30) * 5 + int(rng.integers(5)), year) for w in range(60) for year in range(6)]
    else:
        rows = [(w, f, f) for w in range(40) for f in range(5)]
        rows += [(w, f, f) for w in range(40, 60) for f in range(5, 8)]
    df = pd.DataFrame([(60, 2, 0)] + rows + [(60, 7, 1)], columns=["worker", "firm", "year"])
    a, f = rng.normal(size=61)[df["worker"]], rng.normal(size=10)[df["firm"]]
    x = rng.normal(size=(len(df), 2)) + np.column_stack([0.5 * a, 0.4 * f])
    df["x1"], df["x2"] = x[:, 0], x[:, 1]
    df["y"] = 0.6 * df["x1"] - 0.3 * df["x2"] + a + f + rng.normal(size=len(df))
    return df


@pytest.mark.parametrize("visits", ["years in one firm", "each firm once"])
def test_a_worker_in_two_runs_still_links_the_firms(to_parquet, visits):
    # The worker's rows come in two runs, one per block: the link tables get a row per run, and
    # the firms still form one connected component, as scipy finds on the explicit worker x firm
    # dummies; so one firm level is redundant, not two. Reference for the fit: statsmodels LSDV.
    df = two_blocks(visits)
    worker, firm = df["worker"].to_numpy(), df["firm"].to_numpy()
    starts = np.flatnonzero(np.diff(worker, prepend=-1))
    runs = (worker[starts].astype(np.int32), np.diff(np.append(starts, len(df))))
    rc = RowCodes(0, {1: firm.astype(np.int32)}, None, runs)
    links = rowcodes.build_links(rc, [np.bincount(worker), np.bincount(firm)])
    n = len(df)
    both = sparse.csr_matrix((np.ones(n), (worker, firm)))
    found, _ = connected_components(sparse.bmat([[None, both], [both.T, None]]), directed=False)
    assert len(runs[0]) == 62 and found == 1 and rowcodes.components(links, [61, 10])[0] == 1
    res = fit_codes(to_parquet(df), ["worker", "firm"])
    coef, se = sm_ref(df, ["worker", "firm"], "classical")
    assert res.components == 1
    assert rel(res.coef, coef) < 1e-8 and rel(res.std_error, se) < 1e-8


@pytest.mark.parametrize("table", ["dense", "sparse"])
def test_components_found_chunk_by_chunk(monkeypatch, to_parquet, table):
    # The firms' components are found from the edges a few at a time (chunks of 2, 4, 8 ...
    # edges): the two blocks are linked only by the worker's second run, whose edge comes
    # last, so stopping at the first chunk that leaves the blocks apart, or skipping the
    # rest before one component is reached, would count two. References: scipy's components
    # on the explicit worker x firm dummies, statsmodels LSDV for the slopes.
    monkeypatch.setattr(rowcodes, "EDGE_CHUNK", 32)
    if table == "sparse":
        monkeypatch.setattr(rowcodes, "DENSE_PAIRS", 0)
    df = two_blocks("years in one firm")
    worker, firm = df["worker"].to_numpy(), df["firm"].to_numpy()
    both = sparse.csr_matrix((np.ones(len(df)), (worker, firm)))
    found, _ = connected_components(sparse.bmat([[None, both], [both.T, None]]), directed=False)
    res = fit_codes(to_parquet(df), ["worker", "firm"])
    coef, se = sm_ref(df, ["worker", "firm"], "classical")
    assert found == 1 and res.components == 1
    assert rel(res.coef, coef) < 1e-8 and rel(res.std_error, se) < 1e-8
    unlinked = df[df["worker"] != 60]  # without the linking worker: two blocks
    res = fit_codes(to_parquet(unlinked), ["worker", "firm"])
    coef, se = sm_ref(unlinked, ["worker", "firm"], "classical")
    assert res.components == 2
    assert rel(res.coef, coef) < 1e-8 and rel(res.std_error, se) < 1e-8


@pytest.mark.parametrize("linking_rows", [True, False])
def test_components_of_rows_holding_half_the_levels(linking_rows):
    # Every unit holds half the periods (kept as its missing cells): rows of 0-4, rows of 5-9 and,
    # when ``linking_rows``, rows of 4-8, which link the two halves through period 4 and 5-8 (one
    # component, else two). Reference: scipy's components on the explicit unit x period dummies.
    spans = [range(0, 5)] * 6 + [range(5, 10)] * 6 + ([range(4, 9)] * 3 if linking_rows else [])
    unit = np.concatenate([np.full(len(s), u) for u, s in enumerate(spans)]).astype(np.int32)
    period = np.concatenate([np.array(s) for s in spans]).astype(np.int32)
    links = rowcodes.build_links(RowCodes(0, {1: period.copy()}, None), [np.bincount(unit), np.bincount(period)])
    both = sparse.csr_matrix((np.ones(len(unit)), (unit, period)))
    found, labels = connected_components(sparse.bmat([[None, both], [both.T, None]]), directed=False)
    n_comp, got = links.groups[1]
    assert not isinstance(links.link[1], sparse.csr_matrix)  # the missing-cells form
    assert n_comp == found == (1 if linking_rows else 2)
    ref = labels[len(spans):]
    assert all(len(set(got[ref == c])) == 1 for c in set(ref)) and len(set(got)) == found


@pytest.mark.parametrize("way", ["sparse", "dense blocks"])
@pytest.mark.parametrize("weighted", [False, True])
def test_schur_matrix_equals_the_dummies(monkeypatch, way, weighted):
    # S = D_s'W D_s - D_s'W D_B (D_B'W D_B)^-1 D_B'W D_s for the periods (kept as their missing
    # cells when unweighted) and a third effect (a plain table), from the link tables by sparse
    # products or by dense blocks of units (a few units per block, the last one short, so that
    # the blocks' buffers are refilled); reference: numpy on the explicit dummies (1e-10).
    monkeypatch.setattr(rowcodes, "SPARSE_SLOWER", 0.0 if way == "sparse" else 1e12)
    monkeypatch.setattr(rowcodes, "DENSE_CHUNK", 64)
    rng = np.random.default_rng(31)
    cells = [(u, t) for u in range(30) for t in range(8) if rng.random() > 0.2]
    unit, period = (np.array(c, dtype=np.int32) for c in zip(*cells))
    item = rng.integers(0, 5, len(unit)).astype(np.int32)
    w = rng.uniform(0.5, 2.0, len(unit)) if weighted else None
    rc = RowCodes(0, {1: period.copy(), 2: item.copy()}, None if w is None else w.copy())
    links = rowcodes.build_links(rc, [np.bincount(unit), np.bincount(period), np.bincount(item)])
    weights = np.ones(len(unit)) if w is None else w
    counts = [np.bincount(c, weights=weights) for c in (unit, period, item)]
    got = rowcodes.schur_matrix(links, counts)
    d_b = np.eye(30)[unit]
    d_s = np.hstack([np.eye(8)[period], np.eye(5)[item]])
    ww = weights[:, None]
    ref = d_s.T @ (ww * d_s) - d_s.T @ (ww * d_b) @ np.linalg.solve(d_b.T @ (ww * d_b), d_b.T @ (ww * d_s))
    assert isinstance(links.link[1], sparse.csr_matrix) == weighted  # the periods as missing cells unless weighted
    assert np.abs(got - ref).max() < 1e-10 * np.abs(ref).max()


@pytest.mark.parametrize("weights", ["none", "fixed", "per row"])
def test_schur_diagonal_equals_the_dummies(weights):
    # The diagonal preconditioner's S diagonal from the link tables: unweighted (periods kept as
    # their missing cells), weighted with the tables built once (--weights), and weighted per row
    # as the Poisson steps build them (every C_e holds the row weights). Reference: the diagonal
    # of the dummies' Schur complement, numpy (1e-12). A unit holds each item in one row at most:
    # with two nonzeros in one cell the diagonal is the preconditioner's approximation.
    rng = np.random.default_rng(32)
    cells = [(u, t) for u in range(30) for t in range(8) if rng.random() > 0.2]
    unit, period = (np.array(c, dtype=np.int32) for c in zip(*cells))
    item = (unit + period) % 9
    w = None if weights == "none" else rng.uniform(0.5, 2.0, len(unit))
    rc = RowCodes(0, {1: period.copy(), 2: item.copy()}, None if w is None else w.copy())
    links = rowcodes.build_links(rc, [np.bincount(unit), np.bincount(period), np.bincount(item)],
                                 fixed=weights != "per row")
    ww = np.ones(len(unit)) if w is None else w
    counts = [np.bincount(c, weights=ww) for c in (unit, period, item)]
    d_b, d_s = np.eye(30)[unit], np.hstack([np.eye(8)[period], np.eye(9)[item]])
    ref = d_s.T @ (ww[:, None] * d_s) - d_s.T @ (ww[:, None] * d_b) @ np.linalg.solve(
        d_b.T @ (ww[:, None] * d_b), d_b.T @ (ww[:, None] * d_s))
    assert np.abs(rowcodes.schur_diagonal(links, counts) - np.diag(ref)).max() < 1e-12 * np.abs(ref).max()
