"""Bad data and awkward inputs: counted drops, quoted names, one-line errors, spilling, determinism."""

import json

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import bigpanel
from bigpanel import BigPanelError
from conftest import lsdv, make_panel, rel


def test_null_nan_inf_dropped_listwise_and_counted(tmp_path):
    # Reference: statsmodels LSDV on the rows complete in every used column.
    df = make_panel(seed=51)
    y = df["y"].to_numpy().copy()
    x1 = df["x1"].to_numpy().copy()
    y[[0, 1]] = [np.nan, np.inf]
    x1[[2, 3, 4]] = [-np.inf, np.nan, np.nan]
    unit = pa.array(df["unit"], mask=np.isin(np.arange(len(df)), [5]))
    sector = pa.array(df["sector"], mask=np.isin(np.arange(len(df)), [6, 7]))
    table = pa.table({"y": pa.array(y, mask=np.isin(np.arange(len(df)), [8])), "x1": x1, "x2": df["x2"],
                      "unit": unit, "sector": sector})
    pq.write_table(table, tmp_path / "bad.parquet")
    res = bigpanel.fit(str(tmp_path / "bad.parquet"), "y ~ x1 + x2", fe="unit", cluster="sector")
    assert res.rows["incomplete"] == {"y": 3, "x1": 3, "unit": 1, "sector": 2}
    assert res.rows["dropped_incomplete"] == 9
    keep = ~np.isin(np.arange(len(df)), range(9))
    ref = lsdv(df[keep], "y", ["x1", "x2"], ["unit"], cov_type="cluster", groups=df.loc[keep, "sector"])
    assert rel(res.coef, ref.params[:2]) < 1e-8


def test_wide_integers_do_not_overflow(tmp_path):
    # BIGINT values near 1e15 (exact as doubles) in 20,000 rows: their integer sum would pass
    # 2^63. They are summed as doubles after a shift, never as overflowing integers.
    rng = np.random.default_rng(52)
    g = np.repeat(np.arange(100), 200)
    x = rng.integers(0, 1000, len(g))
    df = pd.DataFrame({"g": g, "x": (x + 10**15).astype(np.int64), "xs": x})
    df["y"] = (3 * df["xs"] + rng.integers(0, 5, len(g)) + 9 * 10**14).astype(np.int64)
    df.to_parquet(tmp_path / "big.parquet")
    res = bigpanel.fit(str(tmp_path / "big.parquet"), "y ~ x", fe="g")
    ref = bigpanel.fit(str(tmp_path / "big.parquet"), "y ~ xs", fe="g")
    assert rel(res.coef, ref.coef) < 1e-9


def test_awkward_names_and_labels(tmp_path):
    # Column names with spaces, quotes, keywords and unicode; effect levels with unicode and
    # empty strings. Reference: the same fit with plain names.
    df = make_panel(seed=53)
    labels = np.array(["", "ü", "日本", 'q"uote', "it's", "a b", "select"])
    df["level"] = labels[df["unit"] % 7] + (df["unit"] // 7).astype(str)
    odd = df.rename(columns={"y": "log units ü", "x1": 'price "net"', "x2": "select", "level": "group by"})
    odd.to_parquet(tmp_path / "odd.parquet")
    df.to_parquet(tmp_path / "plain.parquet")
    a = bigpanel.fit(str(tmp_path / "odd.parquet"), y="log units ü", x=['price "net"', "select"], fe="group by",
                     cluster="group by", where='"select" > -10')
    b = bigpanel.fit(str(tmp_path / "plain.parquet"), "y ~ x1 + x2", fe="level", cluster="level")
    assert rel(a.coef, b.coef) < 1e-12 and a.names == ['price "net"', "select"]
    levels = set(a.effects["group by"].column("group by").to_pylist())
    assert levels == set(df["level"]) and any(v.startswith("日本") for v in levels) and "0" in levels


@pytest.mark.parametrize("where", ["1=1; DROP TABLE x", "x1 > 0) OR (1=1", "1=1) UNION SELECT 1 --", "(SELECT 1); SELECT 2"])
def test_where_cannot_smuggle_statements(tmp_path, where):
    make_panel(seed=54).to_parquet(tmp_path / "p.parquet")
    with pytest.raises(BigPanelError, match="--where"):
        bigpanel.fit(str(tmp_path / "p.parquet"), "y ~ x1", fe="unit", where=where)


def test_empty_files(tmp_path):
    (tmp_path / "empty.csv").write_text("")
    with pytest.raises(BigPanelError, match="is empty"):
        bigpanel.fit(str(tmp_path / "empty.csv"), "y ~ x", fe="g")
    pd.DataFrame({"y": pd.Series([], dtype=float), "x": pd.Series([], dtype=float), "g": pd.Series([], dtype=int)}
                 ).to_parquet(tmp_path / "none.parquet")
    with pytest.raises(BigPanelError, match="the source is empty"):
        bigpanel.fit(str(tmp_path / "none.parquet"), "y ~ x", fe="g")


def test_glob_with_different_schemas(tmp_path):
    pd.DataFrame({"y": [1.0], "x": [2.0], "g": [1]}).to_parquet(tmp_path / "a.parquet")
    pd.DataFrame({"y": [1.0], "z": [2.0], "g": [1]}).to_parquet(tmp_path / "b.parquet")
    with pytest.raises(BigPanelError, match="Parquet files differ in their columns"):
        bigpanel.fit(str(tmp_path / "*.parquet"), "y ~ x", fe="g")


def test_ragged_csv(tmp_path):
    (tmp_path / "r.csv").write_text("y,x,g\n1,2,3\n4,5\n6,7,8\n")
    with pytest.raises(BigPanelError, match="cannot read CSV .*number of fields"):
        bigpanel.fit(str(tmp_path / "r.csv"), "y ~ x", fe="g")


def test_effect_column_entirely_null(tmp_path):
    df = make_panel(seed=55)
    df["nothing"] = pd.Series([None] * len(df), dtype="Int64")
    df.to_parquet(tmp_path / "p.parquet")
    with pytest.raises(BigPanelError, match="'nothing' is missing or not finite in"):
        bigpanel.fit(str(tmp_path / "p.parquet"), "y ~ x1", fe="nothing")


def _spill_panel(path, rows=3_000_000):
    con = duckdb.connect()
    con.execute(f"""COPY (SELECT i // 2 AS g, (i * 7) % 97 AS h,
                    sin(i) AS x, cos(i * 3) + (i // 2) % 13 * 0.01 + 0.5 * sin(i) AS y
                 FROM range({rows}) r(i)) TO '{path}' (FORMAT parquet)""")
    con.close()


def test_memory_limit_spills_and_gives_the_same_answer(tmp_path):
    # 1.5 million levels: the grouped pass needs more than 200 MB, so DuckDB must spill.
    path = tmp_path / "spill.parquet"
    _spill_panel(path)
    free = bigpanel.fit(str(path), "y ~ x", fe=["g", "h"], variance="hc1")
    tight = bigpanel.fit(str(path), "y ~ x", fe=["g", "h"], variance="hc1", memory_limit="200MB",
                         temp_dir=str(tmp_path / "spill"), threads=1)
    assert rel(tight.coef, free.coef) < 1e-10 and rel(tight.std_error, free.std_error) < 1e-10


def test_same_json_across_runs_and_threads(tmp_path):
    # Parallel sums may add in another order; results must agree to 12 significant digits.
    df = make_panel(seed=56, n_units=400, n_periods=20)
    df.to_parquet(tmp_path / "p.parquet")
    runs = [bigpanel.fit(str(tmp_path / "p.parquet"), "y ~ x1 + x2 + x3", fe=["unit", "period"],
                         cluster="region", threads=t).to_dict() for t in (1, 2, 2)]
    for r in runs[1:]:
        for name, c in r["coefficients"].items():
            for key in ("estimate", "std_error"):
                assert c[key] == pytest.approx(runs[0]["coefficients"][name][key], rel=1e-12)
    assert json.dumps(runs[1]["fixed_effects"]) == json.dumps(runs[0]["fixed_effects"])
