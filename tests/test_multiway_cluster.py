"""Two-way clustered errors against a direct numpy computation of the inclusion-exclusion formula."""

import numpy as np
import pandas as pd
import pytest

import bigpanel
from conftest import dummy_block, lsdv, make_panel, rel


def cgm_reference(df, y, xs, fe, clusters, nested=False):
    """Cameron-Gelbach-Miller V = V_a + V_b - V_ab from LSDV residuals, each term CR1
    with its own G and k (all dummies counted: no effect is nested in these clusters; with
    ``nested``, k counts the slopes and the intercept but not the effect's other dummies,
    common practice for an effect nested in every cluster column)."""
    design = np.hstack([df[xs].to_numpy(float), dummy_block(df, fe)])
    yv = df[y].to_numpy(float)
    coef, *_ = np.linalg.lstsq(design, yv, rcond=None)
    u = yv - design @ coef
    n, k = design.shape
    counted = len(xs) + 1 if nested else k
    bread = np.linalg.inv(design.T @ design)
    total = np.zeros_like(bread)
    for cols, sign in [((clusters[0],), 1), ((clusters[1],), 1), (tuple(clusters), -1)]:
        codes = pd.factorize(pd.MultiIndex.from_frame(df[list(cols)]))[0]
        g = codes.max() + 1
        scores = np.zeros((g, k))
        np.add.at(scores, codes, design * u[:, None])
        total += sign * (g / (g - 1)) * ((n - 1) / (n - counted)) * bread @ scores.T @ scores @ bread
    return coef[: len(xs)], np.sqrt(np.diag(total)[: len(xs)])


@pytest.mark.parametrize("engine", ["duckdb", "memory"])
@pytest.mark.parametrize("fe", [["unit"], ["unit", "period"]])
def test_two_way_clustering_matches_numpy(to_parquet, engine, fe):
    df = make_panel(seed=61)
    df["office"] = np.random.default_rng(1).integers(0, 15, len(df))
    res = bigpanel.fit(to_parquet(df), y="y", x=["x1", "x2"], fe=fe, cluster=["sector", "office"], engine=engine)
    coef, se = cgm_reference(df, "y", ["x1", "x2"], fe, ["sector", "office"])
    assert rel(res.coef, coef) < 1e-8
    assert rel(res.std_error, se) < 1e-8
    assert res.inference.clusters == {"sector": df["sector"].nunique(), "office": df["office"].nunique()}
    assert res.inference.df == min(res.inference.clusters.values()) - 1


def test_an_interaction_nested_in_both_cluster_columns(to_parquet):
    # One effect per (sector, office) cell, clustered two ways on sector and office: each
    # cluster column nests the effect, so the fit reads the level co-moments; the sector
    # and office clusters hold several cells each (not a cluster per level). Reference:
    # the numpy CGM formula on the LSDV residuals with one dummy per cell.
    df = make_panel(seed=61)
    df["office"] = np.random.default_rng(1).integers(0, 6, len(df))
    res = bigpanel.fit(to_parquet(df), y="y", x=["x1", "x2"], fe="sector:office", cluster=["sector", "office"])
    df["cell"] = pd.factorize(pd.MultiIndex.from_frame(df[["sector", "office"]]))[0]
    coef, se = cgm_reference(df, "y", ["x1", "x2"], ["cell"], ["sector", "office"], nested=True)
    assert res.solver.cross_products_from == "level co-moments (no row pass)"
    assert rel(res.coef, coef) < 1e-8
    assert rel(res.std_error, se) < 1e-8


def test_one_cluster_column_is_the_plain_cr1(to_parquet):
    # Reference: statsmodels cluster-robust LSDV (one column: inclusion-exclusion has one term).
    df = make_panel(seed=62)
    res = bigpanel.fit(to_parquet(df), y="y", x=["x1", "x2"], fe="unit", cluster=["sector"])
    ref = lsdv(df, "y", ["x1", "x2"], ["unit"], cov_type="cluster", groups=df["sector"])
    assert rel(res.std_error, ref.bse[:2]) < 1e-8


def test_eigenvalue_fix_is_reported(to_parquet):
    # Two nearly identical cluster columns make V_a + V_b - V_ab close to V_a; with a
    # handful of clusters the difference can turn indefinite. Either way the matrix
    # returned is positive semi-definite and the fix is reported when applied.
    df = make_panel(seed=63, n_units=30)
    df["a"] = df["unit"] % 4
    df["b"] = (df["unit"] + df["period"]) % 3
    res = bigpanel.fit(to_parquet(df), y="y", x=["x1", "x2", "x3"], fe="period", cluster=["a", "b"])
    assert np.linalg.eigvalsh(res.vcov).min() >= -1e-15
    assert res.inference.psd_fixed == any("eigenvalues were set to zero" in w for w in res.warnings)
