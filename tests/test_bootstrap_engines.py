"""The wild bootstrap on PostgreSQL and Spark: the same seed gives the same p-values as DuckDB.

The draws are made in Python from the seed; the engines only supply the per-cluster sums, which
agree to about 1e-14, so every p-value (a share of the draws) must be equal (asserted to 1e-12).
Skipped with BIGPANEL_SKIP_SERVERS=1 (the servers of test_engines).
"""

import numpy as np
import pytest

import bigpanel
from test_engines import FORMULA, fit_on, panel, parquet_file, pg_url, spark_on  # noqa: F401 - session fixtures

pytestmark = pytest.mark.server

CASES = {  # stores are nested in the 20 regions; weeks cut across them
    "store effects": dict(fe=["store"], cluster="region"),
    "store and week effects": dict(fe=["store", "week"], cluster="region"),
}


@pytest.mark.parametrize("engine", ["postgres", "spark"])
@pytest.mark.parametrize("case", list(CASES))
def test_webb_p_values_equal_duckdb(engine, case, request, parquet_file):  # noqa: F811
    kw = dict(**CASES[case], wild_bootstrap=True, bootstrap_weights="webb", draws=999, seed=11, tol=1e-12)
    ref = bigpanel.fit(parquet_file, FORMULA, **kw)
    res = fit_on(engine, request, parquet_file, kw)
    p = [[r.to_dict()["coefficients"][n]["bootstrap_p_value"] for n in ref.names] for r in (ref, res)]
    assert np.max(np.abs(np.subtract(*p))) <= 1e-12
    assert res.extras["bootstrap"]["effects_cutting_across"] == ref.extras["bootstrap"]["effects_cutting_across"]
