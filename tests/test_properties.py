"""Invariances that must hold exactly (up to rounding) for any data: hypothesis property tests."""

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import bigpanel
from conftest import rel, write_parquet

SETTINGS = settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])


def panel(seed: int, two_way: bool) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    n = 150
    df = pd.DataFrame({"g": rng.integers(0, 12, n), "h": rng.integers(0, 6, n)})
    df["x1"] = rng.normal(size=n) + df["g"] * 0.2
    df["x2"] = rng.normal(size=n) * 3 + df["h"] * 0.1
    df["y"] = df["x1"] - 0.5 * df["x2"] + df["g"] * 0.3 + (df["h"] * 0.2 if two_way else 0) + rng.normal(size=n)
    return df


def fit(df, tmp_path, name, **kw):
    return bigpanel.fit(write_parquet(df, tmp_path / f"{name}.parquet"), **kw)


FE = st.sampled_from([["g"], ["g", "h"]])


@SETTINGS
@given(seed=st.integers(0, 10_000), fe=FE, perm_seed=st.integers(0, 10_000))
def test_row_order_does_not_matter(tmp_path, seed, fe, perm_seed):
    # Common practice: the estimator is a function of the set of rows.
    df = panel(seed, len(fe) > 1)
    a = fit(df, tmp_path, "a", y="y", x=["x1", "x2"], fe=fe, variance="hc1")
    shuffled = df.sample(frac=1.0, random_state=perm_seed)
    b = fit(shuffled, tmp_path, "b", y="y", x=["x1", "x2"], fe=fe, variance="hc1")
    assert rel(a.coef, b.coef) < 1e-9 and rel(a.std_error, b.std_error) < 1e-9


@SETTINGS
@given(seed=st.integers(0, 10_000), fe=FE)
def test_regressor_order_permutes_results(tmp_path, seed, fe):
    df = panel(seed, len(fe) > 1)
    a = fit(df, tmp_path, "a", y="y", x=["x1", "x2"], fe=fe)
    b = fit(df, tmp_path, "a", y="y", x=["x2", "x1"], fe=fe)
    assert rel(a.coef, b.coef[::-1]) < 1e-9 and rel(a.std_error, b.std_error[::-1]) < 1e-9


@SETTINGS
@given(seed=st.integers(0, 10_000), fe=FE, shift=st.integers(-1000, 1000))
def test_relabelled_levels(tmp_path, seed, fe, shift):
    # Renaming levels (here: integers to shifted strings) changes nothing.
    df = panel(seed, len(fe) > 1)
    a = fit(df, tmp_path, "a", y="y", x=["x1", "x2"], fe=fe, cluster="g")
    relabelled = df.assign(g=("L" + (df["g"] * 7 + shift).astype(str)))
    b = fit(relabelled, tmp_path, "b", y="y", x=["x1", "x2"], fe=fe, cluster="g")
    assert rel(a.coef, b.coef) < 1e-9 and rel(a.std_error, b.std_error) < 1e-9


@SETTINGS
@given(seed=st.integers(0, 10_000), fe=FE, consts=st.lists(st.floats(-1e4, 1e4), min_size=12, max_size=12))
def test_per_level_constants_in_y(tmp_path, seed, fe, consts):
    # Adding any constant per level of an absorbed effect to y leaves the slopes unchanged.
    df = panel(seed, len(fe) > 1)
    a = fit(df, tmp_path, "a", y="y", x=["x1", "x2"], fe=fe)
    b = fit(df.assign(y=df["y"] + np.array(consts)[df["g"]]), tmp_path, "b", y="y", x=["x1", "x2"], fe=fe)
    assert rel(a.coef, b.coef) < 1e-6 and rel(a.std_error, b.std_error) < 1e-6


@SETTINGS
@given(seed=st.integers(0, 10_000), fe=FE, c=st.floats(1e-3, 1e3))
def test_scaling_a_regressor(tmp_path, seed, fe, c):
    # x1 -> c x1 scales its slope and standard error by 1/c and leaves the other alone.
    df = panel(seed, len(fe) > 1)
    a = fit(df, tmp_path, "a", y="y", x=["x1", "x2"], fe=fe, variance="hc1")
    b = fit(df.assign(x1=df["x1"] * c), tmp_path, "b", y="y", x=["x1", "x2"], fe=fe, variance="hc1")
    assert rel(b.coef * [c, 1], a.coef) < 1e-8 and rel(b.std_error * [c, 1], a.std_error) < 1e-8
