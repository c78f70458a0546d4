"""Standard errors of the estimated effects against statsmodels' regression with a dummy per level.

Reference: statsmodels OLS / WLS of y on the regressors and one dummy for every level of the
effect, without a constant, so that each dummy's coefficient is that level's intercept
mean_g(y) - mean_g(x)'b; its classical and cluster-robust standard errors (statsmodels'
cluster option: G/(G-1) (N-1)/(N-K) with every dummy counted in K) are the references.
Panels from conftest.make_panel (invented, coefficients set there).
"""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import bigpanel
from conftest import make_panel, rel


def dummy_fit(df, effect, weights=None, groups=None):
    dummies = pd.get_dummies(df[effect]).astype(float)
    design = pd.concat([df[["x1", "x2"]], dummies], axis=1)
    model = (sm.WLS(df["y"], design, weights=df[weights]) if weights else sm.OLS(df["y"], design))
    fitted = model.fit(cov_type="cluster", cov_kwds={"groups": pd.factorize(df[groups])[0]}) if groups else model.fit()
    levels = dummies.columns
    coef, se = (pd.Series(getattr(fitted, a)[levels].to_numpy(), index=levels) for a in ("params", "bse"))
    return coef, se


@pytest.mark.parametrize("weights", [None, "w"])
def test_classical_errors_of_one_effect_equal_the_dummy_regression(to_parquet, weights):
    df = make_panel(seed=71)
    df["w"] = 0.5 + (df["sector"] % 4)
    res = bigpanel.fit(to_parquet(df), "y ~ x1 + x2", fe="unit", weights=weights)
    table = res.effects["unit"].to_pandas().set_index("unit")
    coef, se = dummy_fit(df, "unit", weights)
    assert rel(table["effect"].loc[coef.index], coef) < 1e-8
    assert rel(table["std_error"].loc[se.index], se) < 1e-8
    assert "std_error_clustered" not in table
    assert res.extras["effect_errors"]["std_error"].startswith("classical")


def test_clustered_errors_of_an_effect_that_cuts_across_the_clusters(to_parquet):
    # Period effects with sector clusters (every period spans several sectors): statsmodels'
    # CR1 of each period dummy; its factor counts every dummy, as the fit's does here.
    df = make_panel(seed=72)
    res = bigpanel.fit(to_parquet(df), "y ~ x1 + x2", fe="period", cluster="sector", effect_errors=True)
    table = res.effects["period"].to_pandas().set_index("period")
    _, se = dummy_fit(df, "period", groups="sector")
    assert rel(table["std_error_clustered"].loc[se.index], se) < 1e-8
    assert res.extras["effect_errors"]["levels_without_clustered"] == 0
    memory = bigpanel.fit(to_parquet(df), "y ~ x1 + x2", fe="period", cluster="sector", effect_errors=True,
                          engine="memory")
    assert rel(memory.effects["period"].column("std_error_clustered").to_numpy(),
               res.effects["period"].column("std_error_clustered").to_numpy()) < 1e-8


def test_a_level_inside_one_cluster_gets_no_clustered_error(to_parquet):
    # Units nested in regions: every unit's residuals sum to zero inside its one region, so
    # a cluster-robust variance cannot see the error of the unit's own mean.
    df = make_panel(seed=73)
    res = bigpanel.fit(to_parquet(df), "y ~ x1 + x2", fe="unit", cluster="region", effect_errors=True)
    assert "std_error_clustered" not in res.effects["unit"].column_names
    assert res.extras["effect_errors"]["std_error_clustered"].startswith("none: every level of unit")
    # a period that only one sector saw gets none either (sectors 0-8 drawn per row: force one)
    df = make_panel(seed=74)
    df.loc[df["period"] == 0, "sector"] = 3
    res = bigpanel.fit(to_parquet(df), "y ~ x1 + x2", fe="period", cluster="sector", effect_errors=True)
    se = res.effects["period"].to_pandas().set_index("period")["std_error_clustered"]
    assert np.isnan(se.loc[0]) and np.isfinite(se.drop(index=0)).all()
    assert res.extras["effect_errors"]["levels_without_clustered"] == 1


def test_two_effects_report_no_errors_and_say_why(to_parquet):
    res = bigpanel.fit(to_parquet(make_panel(seed=75)), "y ~ x1 + x2", fe=["unit", "period"])
    assert all("std_error" not in t.column_names for t in res.effects.values())
    assert "identified only up to the normalisation" in res.extras["effect_errors"]["note"]
