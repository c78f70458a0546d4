"""Numbers a reader can trust: weight scale, dropped weights, float keys, odd cluster counts, no iterations."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from typer.testing import CliRunner

import bigpanel
from bigpanel.cli import app
from bigpanel.errors import BigPanelError
from conftest import dummy_block, make_panel, rel


def _wls_with_dummies(df, fe):
    """statsmodels WLS of y on x1, x2 and the effect dummies (the weighted LSDV reference)."""
    design = np.hstack([df[["x1", "x2"]].to_numpy(float), dummy_block(df, fe)])
    return sm.WLS(df["y"].to_numpy(float), design, weights=df["w"].to_numpy(float)).fit()


@pytest.mark.parametrize("engine", ["duckdb", "memory"])
def test_weighted_sigma_does_not_depend_on_the_weights_scale(to_parquet, engine):
    df = make_panel(seed=61)
    df["w"] = 0.5 + (df["period"] % 3)
    fe = ["unit", "period"]
    one = bigpanel.fit(to_parquet(df), y="y", x=["x1", "x2"], fe=fe, weights="w", engine=engine, tol=1e-12)
    big = bigpanel.fit(to_parquet(df.assign(w=df["w"] * 100)), y="y", x=["x1", "x2"], fe=fe, weights="w",
                       engine=engine, tol=1e-12)
    assert abs(one.inference.sigma / big.inference.sigma - 1) < 1e-9
    assert rel(one.std_error, big.std_error) < 1e-9
    # Reference: statsmodels WLS with dummies; its scale sum w u^2 / df is divided by the mean weight
    ref = _wls_with_dummies(df, fe)
    assert abs(one.inference.sigma / np.sqrt(ref.scale / df["w"].mean()) - 1) < 1e-7


@pytest.mark.parametrize("engine", ["duckdb", "memory"])
def test_zero_and_negative_weights_are_counted_apart(to_parquet, engine):
    df = make_panel(seed=62)
    df["w"] = 1.0 + (df["period"] % 4)
    df.loc[df.index[:3], "w"] = 0.0
    df.loc[df.index[3:5], "w"] = -1.0
    df.loc[df.index[5:9], "w"] = np.nan
    res = bigpanel.fit(to_parquet(df), y="y", x=["x1", "x2"], fe="unit", weights="w", engine=engine)
    assert res.rows.incomplete == {"w": 4, "w zero or negative": 5}
    assert res.rows.dropped_incomplete == 9
    ref = _wls_with_dummies(df[df["w"] > 0], ["unit"])  # statsmodels WLS on the usable rows
    assert rel(res.coef, ref.params[:2]) < 1e-8


def test_float_effect_columns_must_hold_whole_numbers(to_parquet):
    df = make_panel(seed=63)
    whole = bigpanel.fit(to_parquet(df.assign(g=df["unit"].astype(float))), "y ~ x1 + x2", fe="g")
    plain = bigpanel.fit(to_parquet(df), "y ~ x1 + x2", fe="unit")
    assert rel(whole.coef, plain.coef) < 1e-12
    with pytest.raises(BigPanelError, match="column 'g' .* not whole numbers"):
        bigpanel.fit(to_parquet(df.assign(g=df["unit"] + 0.5 * (df["period"] > 2))), "y ~ x1 + x2", fe="g")
    with pytest.raises(BigPanelError, match="column 'c' .* not whole numbers"):
        bigpanel.fit(to_parquet(df.assign(c=df["x1"])), "y ~ x1 + x2", fe="unit", cluster="c")


def test_warns_when_most_clusters_hold_one_row(to_parquet):
    df = make_panel(seed=64)
    df["row"] = np.arange(len(df))
    res = bigpanel.fit(to_parquet(df), "y ~ x1 + x2", fe="unit", cluster="row")
    assert any("clusters in row" in w and "single row" in w for w in res.warnings)


def test_no_iterations_is_said_plainly(to_parquet):
    df = make_panel(seed=65)
    out = CliRunner().invoke(app, ["fit", to_parquet(df), "y ~ x1 + x2", "--fe", "unit", "--fe", "period",
                                   "--max-iter", "0"])
    assert out.exit_code == 3
    assert "no iterations run" in out.stdout and "no projection was run (--max-iter 0)" in out.stdout
    neg = CliRunner().invoke(app, ["fit", to_parquet(df), "y ~ x1", "--fe", "unit", "--max-iter", "-1"])
    assert neg.exit_code == 2 and "--max-iter must be 0 or more" in neg.stderr


def test_demo_writes_csv_or_refuses(tmp_path):
    out = CliRunner().invoke(app, ["demo", str(tmp_path / "d.csv"), "--rows", "500"])
    assert out.exit_code == 0, out.output
    df = pd.read_csv(tmp_path / "d.csv")
    assert len(df) == 500 and {"store", "log_units", "log_price"} <= set(df.columns)
    bad = CliRunner().invoke(app, ["demo", str(tmp_path / "d.txt")])
    assert bad.exit_code == 2 and "as .parquet or .csv" in bad.stderr and not (tmp_path / "d.txt").exists()


def test_table_option_on_a_file_is_refused(tmp_path):
    out = CliRunner().invoke(app, ["demo", str(tmp_path / "d.csv"), "--rows", "300"])
    assert out.exit_code == 0
    bad = CliRunner().invoke(app, ["fit", str(tmp_path / "d.csv"), "log_units ~ promo", "--fe", "store",
                                   "--table", "sales"])
    assert bad.exit_code == 2 and "drop --table" in bad.stderr and len(bad.stderr.strip().splitlines()) == 1


def test_semicolon_and_headerless_csv(tmp_path):
    df = make_panel(seed=66)
    df.to_csv(tmp_path / "semi.csv", sep=";", index=False)
    df.to_csv(tmp_path / "bare.csv", header=False, index=False)
    runner = CliRunner()
    out = runner.invoke(app, ["fit", str(tmp_path / "semi.csv"), "y ~ x1 + x2", "--fe", "unit"])
    assert out.exit_code == 2 and "give --delimiter ';'" in out.stderr and len(out.stderr.strip().splitlines()) == 1
    res = bigpanel.fit(str(tmp_path / "semi.csv"), "y ~ x1 + x2", fe="unit", delimiter=";")
    ref = bigpanel.fit(write_parquet_path(df, tmp_path), "y ~ x1 + x2", fe="unit")  # the same rows from Parquet
    assert rel(res.coef, ref.coef) < 1e-12 and res.nobs == ref.nobs
    bare = runner.invoke(app, ["fit", str(tmp_path / "bare.csv"), "y ~ x1", "--fe", "unit"])
    assert bare.exit_code == 2 and "looks like data, not a header" in bare.stderr
    desc = runner.invoke(app, ["describe", str(tmp_path / "semi.csv"), "--id", "unit", "--time", "period",
                               "--delimiter", ";", "--json"])
    assert desc.exit_code == 0, desc.output
    bad = runner.invoke(app, ["fit", str(tmp_path / "semi.csv"), "y ~ x1", "--fe", "unit", "--delimiter", ";;"])
    assert bad.exit_code == 2 and "must be one character" in bad.stderr


def write_parquet_path(df, tmp_path):
    path = tmp_path / "plain.parquet"
    df.to_parquet(path, index=False)
    return str(path)
