"""Values a double cannot hold as they are: NaN/inf in key columns, wide integers, extreme scales,
near-perfect fits (issue 19 items 2, 3, 4). References: statsmodels LSDV and numpy least squares."""

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import bigpanel
from bigpanel import BigPanelError
from conftest import lsdv, make_panel, rel


@pytest.mark.parametrize("engine", ["duckdb", "memory"])
def test_nan_and_inf_in_float_effect_and_cluster_columns_drop_the_row(tmp_path, engine):
    # Reference: statsmodels LSDV on the rows whose effect and cluster values are finite.
    df = make_panel(seed=81)
    df["unit_f"] = df["unit"].astype(float)
    df["sector_f"] = df["sector"].astype(float)
    df.loc[[0, 1, 2], "unit_f"] = [np.nan, np.inf, -np.inf]
    df.loc[[3, 4], "sector_f"] = [np.nan, np.inf]
    # numpy arrays keep NaN as NaN in Parquet (pandas would write it as NULL)
    pq.write_table(pa.table({c: pa.array(df[c].to_numpy()) for c in df.columns}), tmp_path / "p.parquet")
    res = bigpanel.fit(str(tmp_path / "p.parquet"), "y ~ x1 + x2", fe="unit_f", cluster="sector_f", engine=engine)
    keep = np.isfinite(df["unit_f"]) & np.isfinite(df["sector_f"])
    assert res.rows.incomplete == {"unit_f": 3, "sector_f": 2}
    assert res.rows.dropped_incomplete == 5
    ref = lsdv(df[keep], "y", ["x1", "x2"], ["unit"], cov_type="cluster", groups=df.loc[keep, "sector"])
    assert rel(res.coef, ref.params[:2]) < 1e-8
    assert rel(res.std_error, ref.bse[:2]) < 1e-6


def _wide_panel(rng, n_groups=50, per=20):
    g = np.repeat(np.arange(n_groups), per)
    x = rng.integers(0, 1000, len(g))
    y = 3 * x + rng.integers(0, 7, len(g)) + 5 * (g % 3)
    return g, x, y


@pytest.mark.parametrize("engine", ["duckdb", "memory"])
@pytest.mark.parametrize("kind, base", [(pa.int64(), 2**62), (pa.uint64(), 2**63 + 2**62), ("hugeint", 2**100)])
def test_integers_beyond_two_to_the_53_keep_every_digit(tmp_path, engine, kind, base):
    # Reference: numpy least squares on the small integers before the (exact) offset was added.
    # A double holds 53 bits, so 2^62 + x loses its last ~9 bits when cast before the shift.
    import duckdb
    from conftest import lsdv

    rng = np.random.default_rng(82)
    g, x, y = _wide_panel(rng)
    small = pd.DataFrame({"g": g, "x": x.astype(float), "y": y.astype(float)})
    path, table = tmp_path / "wide.parquet", None
    if kind == "hugeint":  # Parquet has no 128-bit integer: a DuckDB table keeps the type
        path, table = tmp_path / "wide.duckdb", "t"
        con = duckdb.connect(str(path))
        con.register("small", small)
        con.execute(f"CREATE TABLE t AS SELECT g, CAST(x AS HUGEINT) + {base}::HUGEINT AS x, "
                    f"CAST(y AS HUGEINT) + {base}::HUGEINT AS y FROM small")
        con.close()
    else:
        pq.write_table(pa.table({"g": g, "x": pa.array([int(v) + base for v in x], kind),
                                 "y": pa.array([int(v) + base for v in y], kind)}), path)
    res = bigpanel.fit(str(path), "y ~ x", fe="g", engine=engine, table=table)
    ref = lsdv(small, "y", ["x"], ["g"])
    assert res.names == ["x"]
    assert rel(res.coef, ref.params[:1]) < 1e-10 and rel(res.std_error, ref.bse[:1]) < 1e-8


@pytest.mark.parametrize("engine", ["duckdb", "memory"])
@pytest.mark.parametrize("scale", [1e200, 1e-300])
def test_extreme_scales_give_one_line_not_a_false_answer(tmp_path, engine, scale):
    # Common practice: squares of 1e200 overflow and of 1e-300 underflow a double. The tool
    # must not crash (it raised a numpy ValueError) nor report the regressor as absorbed.
    df = make_panel(seed=83)
    df["y"] *= scale
    df["x1"] *= scale
    df.to_parquet(tmp_path / "s.parquet")
    with pytest.raises(BigPanelError, match=r"column '(y|x1)' holds values near .*rescale") as info:
        bigpanel.fit(str(tmp_path / "s.parquet"), "y ~ x1 + x2", fe="unit", engine=engine)
    assert "\n" not in str(info.value)


def test_overflow_in_the_sums_is_refused(tmp_path):
    # Values of mean zero but magnitude 1e200 pass the shift check; their squares still overflow.
    df = make_panel(seed=84)
    df["x1"] = np.where(np.arange(len(df)) % 2 == 0, 1e200, -1e200)  # mean of the first 1,000: 0
    df.to_parquet(tmp_path / "s.parquet")
    with pytest.raises(BigPanelError, match="overflowed a double"):
        bigpanel.fit(str(tmp_path / "s.parquet"), "y ~ x1 + x2", fe="unit")


@pytest.mark.parametrize("engine", ["duckdb", "memory"])
@pytest.mark.parametrize("case", ["scale 1e8", "jump 1e9"])
def test_nearly_perfect_fit_keeps_its_residual_sum_of_squares(tmp_path, engine, case):
    # Reference: numpy least squares on the unit-demeaned data (demeaned in pandas, then the
    # residuals formed row by row). RSS = q00 - 2 b'q + b'Qb cancels when R-squared is near 1:
    # with x of scale 1e8 the classical s.e. was 44% too large (0 on the memory engine).
    rng = np.random.default_rng(85)
    unit = np.repeat(np.arange(40), 10)
    x = rng.normal(size=len(unit)) * 1e8
    if case == "jump 1e9":
        x = rng.normal(size=len(unit)) + np.where(np.arange(len(unit)) % 10 >= 5, 1e9, 0.0)
    y = x + rng.normal(size=len(unit)) + unit
    df = pd.DataFrame({"unit": unit, "x": x, "y": y})
    df.to_parquet(tmp_path / "p.parquet")
    res = bigpanel.fit(str(tmp_path / "p.parquet"), "y ~ x", fe="unit", engine=engine)
    yd = df["y"] - df.groupby("unit")["y"].transform("mean")
    xd = df["x"] - df.groupby("unit")["x"].transform("mean")
    b = np.linalg.lstsq(xd.to_numpy()[:, None], yd.to_numpy(), rcond=None)[0]
    rss = float(np.sum((yd.to_numpy() - xd.to_numpy() * b[0]) ** 2))
    se = np.sqrt(rss / (len(df) - 1 - 40) / float(xd @ xd))
    assert res.fit.rss == pytest.approx(rss, rel=1e-6)
    assert res.std_error[0] == pytest.approx(se, rel=1e-6)
    assert res.solver.rss_from == "residual pass"


def test_wide_decimal_keeps_its_fraction(tmp_path):
    # Reference: statsmodels LSDV on the same values as doubles. A DECIMAL(20,2) must not go
    # through the integer offset (a cast to an integer would round 1.37 to 1).
    import duckdb
    from conftest import lsdv

    path = tmp_path / "dec.duckdb"
    con = duckdb.connect(str(path))
    con.execute("CREATE TABLE t AS SELECT i % 20 AS g, CAST(sin(i) * 10 AS DECIMAL(20, 2)) AS x, "
                "CAST(sin(i) * 20 + cos(i * 7) AS DOUBLE) AS y FROM range(400) r(i)")
    df = con.execute("SELECT g, CAST(x AS DOUBLE) AS x, y FROM t").df()
    con.close()
    res = bigpanel.fit(str(path), "y ~ x", fe="g", table="t")
    ref = lsdv(df, "y", ["x"], ["g"])
    assert rel(res.coef, ref.params[:1]) < 1e-10


def test_decimal_wider_than_a_double_keeps_its_digits(tmp_path):
    # A DECIMAL(38, 2) near 1e20 varies by a few units: as a double (ulp 16,384 there) the
    # variation would vanish. Reference: statsmodels LSDV on the exact differences from 1e20,
    # computed by DuckDB in the decimal domain.
    import duckdb
    from conftest import lsdv

    path = tmp_path / "wide.duckdb"
    con = duckdb.connect(str(path))
    con.execute("CREATE TABLE t AS SELECT i % 20 AS g, "
                "CAST(100000000000000000000 AS DECIMAL(38, 2)) + CAST(sin(i) * 10 AS DECIMAL(38, 2)) AS x, "
                "CAST(3 * round(sin(i) * 10, 2) + cos(i * 7) AS DOUBLE) AS y FROM range(400) r(i)")
    df = con.execute("SELECT g, CAST(x - CAST(100000000000000000000 AS DECIMAL(38, 2)) AS DOUBLE) AS x, y FROM t").df()
    con.close()
    res = bigpanel.fit(str(path), "y ~ x", fe="g", table="t")
    ref = lsdv(df, "y", ["x"], ["g"])
    assert rel(res.coef, ref.params[:1]) < 1e-9 and rel(res.std_error, ref.bse[:1]) < 1e-9
