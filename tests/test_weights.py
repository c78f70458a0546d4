"""Weighted within fits against statsmodels WLS with dummies."""

import numpy as np
import pytest
import statsmodels.api as sm

import bigpanel
from conftest import dummy_block, make_panel, rel


@pytest.mark.parametrize("engine", ["duckdb", "memory"])
@pytest.mark.parametrize("fe", [["unit"], ["unit", "period"]])
@pytest.mark.parametrize("vcov", ["iid", "hc1", "cluster"])
def test_weighted_within_matches_wls_with_dummies(to_parquet, engine, fe, vcov):
    # Reference: statsmodels WLS of y on x and the full-rank dummy block, analytic weights;
    # its HC1 and cluster errors use the weighted scores, as ours do.
    df = make_panel(seed=81)
    df["w"] = np.random.default_rng(3).uniform(0.2, 5.0, len(df))
    res = bigpanel.fit(to_parquet(df), y="y", x=["x1", "x2"], fe=fe, weights="w", vcov=vcov,
                       cluster="sector" if vcov == "cluster" else None, engine=engine)
    design = np.hstack([df[["x1", "x2"]].to_numpy(), dummy_block(df, fe)])
    model = sm.WLS(df["y"].to_numpy(), design, weights=df["w"].to_numpy())
    if vcov == "cluster":
        ref = model.fit(cov_type="cluster", cov_kwds={"groups": df["sector"].to_numpy()})
    else:
        ref = model.fit(cov_type={"iid": "nonrobust", "hc1": "HC1"}[vcov])
    assert rel(res.coef, ref.params[:2]) < 1e-7
    assert rel(res.std_error, ref.bse[:2]) < 1e-7


def test_nonpositive_weights_are_dropped_and_counted(to_parquet):
    df = make_panel(seed=82)
    df["w"] = 1.0
    df.loc[df.index[:4], "w"] = [0.0, -1.0, np.nan, np.inf]
    res = bigpanel.fit(to_parquet(df), y="y", x=["x1"], fe="unit", weights="w")
    assert res.rows["incomplete"] == {"w": 4}
    plain = bigpanel.fit(to_parquet(df.iloc[4:]), y="y", x=["x1"], fe="unit")
    assert rel(res.coef, plain.coef) < 1e-10
