"""Demeaned cross-products of two or more effects without the row pass: from the solved effects
and the level sums (classical and HC1 errors), or from one pass grouped by an effect that the
clusters nest; and the bound that sends a fit back to the row pass when they would lose
digits. References: statsmodels LSDV (OLS or WLS with the full-rank dummy block)."""

import pytest

import bigpanel
import bigpanel.estimators.sql_backend as sql_backend
from conftest import rel
from test_strategies import X, sm_ref, unit_period_panel

SOLVED = "solved effects and level sums (no row pass)"
NESTED = "co-moments per level of an effect the clusters nest (one row pass)"


def fit(path, fe, strategy, vcov="classical", cluster=None, weights=None):
    return bigpanel.fit(path, y="y", x=X, fe=fe, variance=vcov, cluster=cluster, weights=weights,
                        strategy=strategy, tol=1e-12)


@pytest.mark.parametrize("strategy", ["pair tables", "row codes"])
@pytest.mark.parametrize("fe", [["unit", "period"], ["period", "item", "unit"]])
@pytest.mark.parametrize("vcov, passes", [("classical", 2), ("hc1", 3)])
@pytest.mark.parametrize("weights", [None, "w"])
def test_cross_products_from_the_solved_effects(to_parquet, strategy, fe, vcov, passes, weights):
    # No pass after the effects are solved (HC1: its meat pass only). Reference: statsmodels
    # LSDV, WLS when weighted.
    df = unit_period_panel(seed=31)
    res = fit(to_parquet(df), fe, strategy, vcov, weights=weights)
    coef, se = sm_ref(df, fe, vcov, weights=weights)
    assert res.solver.cross_products_from == SOLVED and res.solver.raw_passes == passes
    assert rel(res.coef, coef) < 1e-8 and rel(res.std_error, se) < 1e-8


@pytest.mark.parametrize("strategy", ["pair tables", "row codes"])
@pytest.mark.parametrize("cluster, weights", [("unit", None), ("region", "w")])
def test_clusters_that_nest_an_effect(to_parquet, strategy, cluster, weights):
    # Clustered by the unit, or by a region that nests it: one pass grouped by the unit, which
    # joins only the other effects' tables. Reference: statsmodels LSDV / WLS, CR1.
    df = unit_period_panel(seed=32)
    fe = ["unit", "period", "item"]
    res = fit(to_parquet(df), fe, strategy, "cr1", cluster, weights)
    coef, se = sm_ref(df, fe, "cr1", cluster, weights=weights)
    assert res.solver.cross_products_from == NESTED and res.solver.raw_passes == 3
    assert rel(res.coef, coef) < 1e-8 and rel(res.std_error, se) < 1e-8


def far_levels(seed: int):
    """The panel and the same panel with y shifted by 1e6 per unit and x1 by 1e5 per period:
    the effects absorb the shifts exactly, so the slopes and errors are those of the first
    panel, but t'Wt is 1e12 times the demeaned sums of squares (the cancelling terms lose
    about 12 digits)."""
    df = unit_period_panel(seed=seed)
    far = df.copy()
    far["y"] += 1e6 * far["unit"]
    far["x1"] += 1e5 * far["period"]
    return df, far


@pytest.mark.parametrize("vcov, cluster", [("classical", None), ("cr1", "unit")])
def test_the_bound_sends_lost_digits_to_the_row_pass(to_parquet, monkeypatch, vcov, cluster):
    # Reference: statsmodels LSDV on the panel without the shifts (same slopes and errors in
    # exact arithmetic). The bound picks the row pass and keeps 1e-8; the cancelling sums,
    # forced, are off by more than 1e-6 (the loss the bound predicts is real). On the row
    # codes, whose exact elimination of the unit removes its shift; the pair tables share the
    # bound (sql_backend._accurate), but their iterations on such columns keep only about 1e-4
    # in the errors whatever the cross-products (so before this path too).
    strategy = "row codes"
    df, far = far_levels(seed=33)
    path = to_parquet(far)
    fe = ["unit", "period"]
    coef, se = sm_ref(df, fe, vcov, cluster)
    res = fit(path, fe, strategy, vcov, cluster)
    assert res.solver.cross_products_from == "demeaned rows"
    assert rel(res.coef, coef) < 1e-8 and rel(res.std_error, se) < 1e-8
    monkeypatch.setattr(sql_backend, "_accurate", lambda q, size: True)
    forced = fit(path, fe, strategy, vcov, cluster)
    assert forced.solver.cross_products_from != "demeaned rows"
    assert max(rel(forced.coef, coef), rel(forced.std_error, se)) > 1e-6
