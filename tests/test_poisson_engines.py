"""The Poisson fit on PostgreSQL and on Spark SQL gives the DuckDB fit (itself checked against
statsmodels GLM in test_poisson.py); skipped with BIGPANEL_SKIP_SERVERS=1.

The outcome is a count made from the engine test panel in SQL, round(exp(y / 4)) (many zeros),
set to zero in every row of store S000 (a level the fit drops).
"""

import pytest

import bigpanel
from conftest import rel
from test_engines import fit_on, panel, parquet_file, pg_url, spark_on  # noqa: F401 - the session's servers and data

pytestmark = pytest.mark.server
FORMULA = "{CASE WHEN store = 'S000' THEN 0 ELSE round(exp(y / 4)) END} ~ x1 + x2 + promo"
CASES = {
    "two-way, a filter, cluster region": dict(fe=["store", "week"], cluster="region", where="week >= 3"),
    "three-way, prior weights, hc1": dict(fe=["store", "week", "item"], weights="w"),
}
TIGHT = dict(tol=1e-12, irls_tol=1e-12)  # so that the engines' summation orders, not the stopping rules, differ
# Spark runs one case: each of its queries costs about 0.3 s on two cores, and a fit makes about 50


@pytest.mark.parametrize("engine,case", [("postgres", case) for case in CASES] + [("spark", next(iter(CASES)))])
def test_poisson_same_fit_as_duckdb(engine, case, request, parquet_file):  # noqa: F811 - the fixture
    kw = dict(model="poisson", **CASES[case], **TIGHT)
    ref = bigpanel.fit(parquet_file, FORMULA, **kw)
    res = fit_on(engine, request, parquet_file, kw, FORMULA)
    assert res.names == ref.names and res.nobs == ref.nobs and res.rows == ref.rows
    assert rel(res.coef, ref.coef) < 1e-9
    assert rel(res.std_error, ref.std_error) < 1e-9
    mine, theirs = res.extras["poisson"], ref.extras["poisson"]
    assert mine["dropped_rows"] == theirs["dropped_rows"]
    assert mine["deviance"] == pytest.approx(theirs["deviance"], rel=1e-9)
    assert theirs["dropped_rows"]["outcome zero in every row of a level"] > 0  # the zero levels are exercised
