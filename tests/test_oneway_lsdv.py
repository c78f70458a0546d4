"""One-way within fits against statsmodels OLS with group dummies (LSDV)."""

import numpy as np
import pytest

import bigpanel
from conftest import lsdv, make_panel, rel

X = ["x1", "x2", "x3"]


@pytest.fixture(scope="module")
def panel():
    return make_panel(seed=1)


@pytest.mark.parametrize("vcov", ["classical", "hc1"])
def test_slopes_and_errors_match_lsdv(panel, to_parquet, vcov):
    # Reference: statsmodels OLS with unit dummies; nonrobust and HC1 both use n - k with k
    # counting the dummies, which is our N - K - G.
    path = to_parquet(panel)
    res = bigpanel.fit(path, y="y", x=X, fe="unit", variance=vcov)
    ref = lsdv(panel, "y", X, ["unit"], cov_type={"classical": "nonrobust", "hc1": "HC1"}[vcov])
    assert rel(res.coef, ref.params[:3]) < 1e-8
    assert rel(res.std_error, ref.bse[:3]) < 1e-8
    if vcov == "classical":
        assert rel(res.p, ref.pvalues[:3]) < 1e-6
        assert res.fit.df_resid == int(ref.df_resid)
        # Overall R-squared of the full model equals the LSDV R-squared (common practice).
        assert abs(res.fit.r2_full_model - ref.rsquared) < 1e-10


def test_cluster_not_nested(panel, to_parquet):
    # Reference: statsmodels cluster-robust (CR1: G/(G-1) * (N-1)/(N-k), k with all dummies).
    # sector cuts across units, so the unit effect is not nested and its levels count in k.
    path = to_parquet(panel)
    res = bigpanel.fit(path, y="y", x=X, fe="unit", cluster="sector")
    ref = lsdv(panel, "y", X, ["unit"], cov_type="cluster", groups=panel["sector"])
    assert res.fe[0].nested_in_cluster is False
    assert rel(res.coef, ref.params[:3]) < 1e-8
    assert rel(res.std_error, ref.bse[:3]) < 1e-8
    assert min(res.inference.clusters.values()) == panel["sector"].nunique()
    assert res.inference.df == min(res.inference.clusters.values()) - 1


@pytest.mark.parametrize("cluster", ["unit", "region"])
def test_cluster_nested(panel, to_parquet, cluster):
    # Reference: statsmodels CR1 on LSDV counts every dummy in k. Our stated rule leaves
    # the levels of an effect nested in the cluster out of k (only the intercept stays),
    # so the reference is rescaled by sqrt(((N-1)/(N-K-1)) / ((N-1)/(N-K-G))).
    path = to_parquet(panel)
    res = bigpanel.fit(path, y="y", x=X, fe="unit", cluster=cluster)
    ref = lsdv(panel, "y", X, ["unit"], cov_type="cluster", groups=panel[cluster])
    n, k, g = len(panel), 3, panel["unit"].nunique()
    adjust = np.sqrt((n - k - g) / (n - k - 1))
    assert res.fe[0].nested_in_cluster is True
    assert rel(res.std_error, ref.bse[:3] * adjust) < 1e-8


def test_recovered_intercepts_equal_lsdv_dummies(panel, to_parquet):
    # Common practice: a_g = mean_g(y) - mean_g(x)'b equals the coefficient of group g's
    # dummy in an LSDV regression with one dummy per group and no separate intercept.
    import pandas as pd
    import statsmodels.api as sm

    path = to_parquet(panel)
    res = bigpanel.fit(path, y="y", x=X, fe="unit")
    dummies = pd.get_dummies(panel["unit"]).to_numpy(dtype=float)
    design = np.hstack([panel[X].to_numpy(), dummies])
    ref = sm.OLS(panel["y"].to_numpy(), design).fit()
    table = res.effects["unit"].to_pandas().sort_values("unit")
    assert rel(table["effect"].to_numpy(), ref.params[3:]) < 1e-8
    means = panel.groupby("unit")[["y", *X]].mean().sort_index()
    direct = means["y"] - means[X].to_numpy() @ res.coef
    assert rel(table["effect"].to_numpy(), direct.to_numpy()) < 1e-9


def test_string_and_date_effects(panel, to_parquet):
    # The effect column's type does not matter (common practice); reference is the integer fit.
    df = panel.copy()
    df["unit_name"] = "store-" + df["unit"].astype(str)
    df["unit_date"] = np.datetime64("2020-01-01") + df["unit"].to_numpy().astype("timedelta64[D]")
    base = bigpanel.fit(to_parquet(df), y="y", x=X, fe="unit")
    for col in ["unit_name", "unit_date"]:
        res = bigpanel.fit(to_parquet(df), y="y", x=X, fe=col)
        assert rel(res.coef, base.coef) < 1e-12
        assert rel(res.std_error, base.std_error) < 1e-12
