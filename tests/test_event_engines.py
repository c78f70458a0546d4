"""The event study on PostgreSQL and Spark: the same estimates, errors and counts as on DuckDB
(which test_event.py checks against a direct numpy implementation of the published estimator).
Invented data (tests/test_event.py's staggered panel). Skipped with BIGPANEL_SKIP_SERVERS=1."""

import datetime as dt

import numpy as np
import pandas as pd
import pytest

import bigpanel
from conftest import rel, write_parquet
from test_engines import panel, parquet_file, pg_url, spark_on  # noqa: F401 - the session's servers
from test_event import staggered

pytestmark = pytest.mark.server
TIGHT = 1e-12


def _same(res, ref) -> None:
    # different summation orders in the engines: agreement to 1e-9 (observed about 1e-13)
    for a, b in zip([*res.event_time, res.overall], [*ref.event_time, ref.overall]):
        assert (a.k, a.rows, a.estimated_by) == (b.k, b.rows, b.estimated_by)
        assert abs(a.estimate - b.estimate) < 1e-9 * max(1.0, abs(b.estimate))
        assert abs(a.std_error - b.std_error) < 1e-9 * b.std_error
    assert rel(res.covariance, ref.covariance) < 1e-9
    assert abs(res.pretrend["statistic"] - ref.pretrend["statistic"]) < 1e-9 * ref.pretrend["statistic"]
    assert res.rows == ref.rows and res.panel == ref.panel


def test_event_on_postgres(pg_url, tmp_path):  # noqa: F811 - the fixture imported above
    import psycopg

    df = staggered(seed=21, units=50, periods=10)
    treated = (df.year >= df.adopt).fillna(False).to_numpy()
    imputable = treated & (df.store >= 3).to_numpy() & (df.year < 2009).to_numpy()
    df.loc[df.index[imputable][:2], "w"] = 0.0
    columns = {"store": "integer", "year": "integer", "adopt": "integer", "x": "double precision",
               "y": "double precision", "w": "double precision"}
    with psycopg.connect(pg_url, autocommit=True) as con:
        con.execute("DROP TABLE IF EXISTS adoption")
        con.execute("CREATE TABLE adoption (" + ", ".join(f"{c} {t}" for c, t in columns.items()) + ")")
        with con.cursor().copy(f"COPY adoption ({', '.join(columns)}) FROM STDIN") as copy:
            for row in df[list(columns)].astype(object).values.tolist():
                copy.write_row([None if pd.isna(v) else v for v in row])
    kw = dict(y="y", unit="store", time="year", first_treated="adopt", x="x", weights="w", horizon="-2:4",
              where="y > -4", tol=TIGHT)
    ref = bigpanel.event(write_parquet(df[list(columns)], tmp_path / "a.parquet"), **kw)
    res = bigpanel.event(pg_url, table="adoption", **kw)
    _same(res, ref)
    assert res.solver["engine"] == "postgresql" and res.rows["excluded"]["w zero or negative"] == 2


def test_event_on_spark_with_dates(spark_on, tmp_path):  # noqa: F811 - the fixture imported above
    df = staggered(seed=22, units=40, periods=9)
    start = dt.date(2020, 1, 6)
    df["week"] = df.year.map(lambda y: start + dt.timedelta(weeks=int(3 * (y - 2000) + (y > 2004))))
    df["first"] = df.adopt.map(lambda a: None if pd.isna(a) else start + dt.timedelta(weeks=int(3 * (a - 2000)) - 1))
    path = write_parquet(df.drop(columns=["adopt", "year"]), tmp_path / "d.parquet")
    kw = dict(y="y", unit="store", time="week", first_treated="first", x="x", fe="shelf", cluster="region",
              horizon="-2:3", tol=TIGHT)
    ref = bigpanel.event(path, **kw)
    res = bigpanel.event(path, engine="spark", **kw)
    _same(res, ref)
    assert res.solver["engine"] == "spark" and res.design["event_time_unit"] == "difference of period ranks"
    assert np.isfinite(res.overall.estimate)
