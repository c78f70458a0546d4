"""The in-memory engine against statsmodels LSDV, and against the SQL path."""

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import bigpanel
from conftest import drop_singletons, lsdv, make_panel, rel, write_parquet
from test_multiway_lsdv import mobility_panel


@pytest.mark.parametrize("fe", [["worker"], ["worker", "firm"], ["worker", "firm", "year"]])
@pytest.mark.parametrize("vcov", ["classical", "hc1", "cr1"])
def test_memory_engine_matches_lsdv(to_parquet, fe, vcov):
    # Reference: statsmodels OLS with the full-rank dummy block, on the singleton-free sample.
    df = mobility_panel(seed=8)
    cluster = "office" if vcov == "cr1" else None
    res = bigpanel.fit(to_parquet(df), y="y", x=["x1", "x2"], fe=fe, variance=vcov, cluster=cluster, engine="memory")
    sample = drop_singletons(df, fe)
    cov = {"classical": "nonrobust", "hc1": "HC1", "cr1": "cluster"}[vcov]
    ref = lsdv(sample, "y", ["x1", "x2"], fe, cov_type=cov, groups=sample["office"])
    assert res.nobs == len(sample)
    assert rel(res.coef, ref.params[:2]) < 1e-6
    assert rel(res.std_error, ref.bse[:2]) < 1e-6
    assert res.solver.engine == "memory"


def test_memory_and_sql_agree_on_everything(to_parquet):
    df = make_panel(seed=41)
    df["name"] = "u-" + df["unit"].astype(str)
    df.loc[df.index[:7], "x1"] = np.nan
    path = to_parquet(df)
    kw = dict(y="y", x=["x1", "x2", "x3"], fe=["name", "period", "sector:region"], cluster="region")
    # The SQL path on pair tables runs the same solver as the in-memory engine, so even the
    # effects, which three effects leave identified only up to the normalisation, agree.
    a = bigpanel.fit(path, **kw, strategy="pair tables")
    b = bigpanel.fit(path, **kw, engine="memory")
    assert a.nobs == b.nobs and a.rows == b.rows
    assert rel(a.coef, b.coef) < 1e-9 and rel(a.std_error, b.std_error) < 1e-9
    for name in a.effects:
        ea, eb = a.effects[name].to_pandas(), b.effects[name].to_pandas()
        assert ea.drop(columns="effect").equals(eb.drop(columns="effect"))
        assert np.max(np.abs(ea["effect"] - eb["effect"])) < 1e-8
    # The strategy chosen here (row codes: unit x period pairs do not compress) solves another
    # way; its slopes and the row sums of its effects (the identified part) agree.
    c = bigpanel.fit(path, **kw, tol=1e-12)
    assert c.solver.strategy["name"] == "row codes"
    assert rel(c.coef, b.coef) < 1e-9 and rel(c.std_error, b.std_error) < 1e-9
    sample = df[np.isfinite(df["x1"])]
    assert np.max(np.abs(_effect_sums(c, sample) - _effect_sums(b, sample))) < 1e-8


def _effect_sums(res, df):
    """Each row's sum of its levels' estimated effects."""
    total = np.zeros(len(df))
    for name, table in res.effects.items():
        effects = table.to_pandas()
        cols = name.split(":")
        total += df[cols].merge(effects, on=cols, how="left")["effect"].to_numpy()
    return total


@settings(max_examples=10, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(seed=st.integers(0, 10_000), frac=st.floats(0.3, 0.9), n_fe=st.integers(1, 3))
def test_sql_on_a_subsample_equals_memory_fit(tmp_path, seed, frac, n_fe):
    # A random subsample through the SQL path equals the in-memory fit of the same rows.
    df = mobility_panel(seed=seed % 50).sample(frac=frac, random_state=seed)
    path = write_parquet(df, tmp_path / "sub.parquet")
    fe = ["worker", "firm", "year"][:n_fe]
    try:
        a = bigpanel.fit(path, y="y", x=["x1", "x2"], fe=fe, variance="hc1")
    except bigpanel.BigPanelError:
        with pytest.raises(bigpanel.BigPanelError):
            bigpanel.fit(path, y="y", x=["x1", "x2"], fe=fe, variance="hc1", engine="memory")
        return
    b = bigpanel.fit(path, y="y", x=["x1", "x2"], fe=fe, variance="hc1", engine="memory")
    assert a.nobs == b.nobs
    assert rel(a.coef, b.coef) < 1e-8 and rel(a.std_error, b.std_error) < 1e-8
