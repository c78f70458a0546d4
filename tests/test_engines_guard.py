"""Issue 19's numeric and filter guards on PostgreSQL (skipped with BIGPANEL_SKIP_SERVERS=1).

References: statsmodels LSDV (conftest.lsdv) on the same values computed in pandas.
"""

import numpy as np
import pandas as pd
import pytest

import bigpanel
from bigpanel import BigPanelError
from conftest import lsdv, rel
from test_engines import panel, pg_url  # noqa: F401 - the session's PostgreSQL server and its data

pytestmark = pytest.mark.server


def _load(url: str, name: str, columns: dict[str, str], rows: list[tuple]) -> None:
    import psycopg

    with psycopg.connect(url, autocommit=True) as con:
        con.execute(f"DROP TABLE IF EXISTS {name}")
        con.execute(f"CREATE TABLE {name} (" + ", ".join(f"{c} {t}" for c, t in columns.items()) + ")")
        with con.cursor().copy(f"COPY {name} ({', '.join(columns)}) FROM STDIN") as copy:
            for row in rows:
                copy.write_row(row)


def test_bigint_near_two_to_the_62_on_postgres(pg_url):
    # The integer offset is subtracted in NUMERIC(38, 0) there (sqlglot has no 128-bit integer).
    rng = np.random.default_rng(95)
    g = np.repeat(np.arange(30), 10)
    x = rng.integers(0, 1000, len(g))
    y = 3 * x + rng.integers(0, 7, len(g))
    big = 2**62 + 99
    _load(pg_url, "wide", {"g": "integer", "x": "bigint", "y": "bigint"},
          [(int(a), int(b) + big, int(c) + big) for a, b, c in zip(g, x, y)])
    res = bigpanel.fit(pg_url, "y ~ x", fe="g", table="wide")
    ref = lsdv(pd.DataFrame({"g": g, "x": x.astype(float), "y": y.astype(float)}), "y", ["x"], ["g"])
    assert rel(res.coef, ref.params[:1]) < 1e-10


def test_nan_in_a_float_effect_on_postgres(pg_url):
    rng = np.random.default_rng(96)
    unit = np.repeat(np.arange(30), 10).astype(float)
    x = rng.normal(size=len(unit))
    y = 2 * x + unit + rng.normal(size=len(unit))
    unit[[0, 1]] = [np.nan, np.inf]
    _load(pg_url, "nankey", {"unit": "double precision", "x": "double precision", "y": "double precision"},
          list(zip(unit.tolist(), x.tolist(), y.tolist())))
    res = bigpanel.fit(pg_url, "y ~ x", fe="unit", table="nankey")
    keep = np.isfinite(unit)
    ref = lsdv(pd.DataFrame({"unit": unit[keep], "x": x[keep], "y": y[keep]}), "y", ["x"], ["unit"])
    assert res.rows.incomplete == {"unit": 2}
    assert rel(res.coef, ref.params[:1]) < 1e-8


def test_server_functions_are_refused_on_postgres(pg_url):
    with pytest.raises(BigPanelError, match="pg_read_file"):
        bigpanel.fit(pg_url, "y ~ x1", fe="store", table="sales", where="length(pg_read_file('/etc/passwd')) > 0")
