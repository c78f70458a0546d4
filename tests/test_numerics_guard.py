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
    assert res.rows["incomplete"] == {"unit_f": 3, "sector_f": 2}
    assert res.rows["dropped_incomplete"] == 5
    ref = lsdv(df[keep], "y", ["x1", "x2"], ["unit"], cov_type="cluster", groups=df.loc[keep, "sector"])
    assert rel(res.coef, ref.params[:2]) < 1e-8
    assert rel(res.std_error, ref.bse[:2]) < 1e-6
