"""Every source kind gives the same fit; the filter restricts the sample."""

import duckdb
import pytest

import bigpanel
from bigpanel import BigPanelError
from conftest import lsdv, make_panel, rel


@pytest.fixture(scope="module")
def panel():
    return make_panel(seed=31)


def test_csv_table_glob_folder_agree(panel, tmp_path):
    # The Parquet fit is the reference here; it is itself checked against LSDV elsewhere.
    pq_path = tmp_path / "p.parquet"
    panel.to_parquet(pq_path)
    base = bigpanel.fit(str(pq_path), "y ~ x1 + x2", fe="unit", cluster="region")
    csv_path = tmp_path / "p.csv"
    panel.to_csv(csv_path, index=False)
    db_path = tmp_path / "p.duckdb"
    con = duckdb.connect(str(db_path))
    con.register("df", panel)
    con.execute('CREATE TABLE "sales panel" AS SELECT * FROM df')
    con.close()
    folder = tmp_path / "parts"
    folder.mkdir()
    half = len(panel) // 2
    panel.iloc[:half].to_parquet(folder / "a.parquet")
    panel.iloc[half:].to_parquet(folder / "b.parquet")
    for source, table in [(str(csv_path), None), (str(db_path), "sales panel"),
                          (str(folder / "*.parquet"), None), (str(folder), None)]:
        res = bigpanel.fit(source, "y ~ x1 + x2", fe="unit", cluster="region", table=table)
        assert res.nobs == base.nobs
        assert rel(res.coef, base.coef) < 1e-10
        assert rel(res.std_error, base.std_error) < 1e-10


def test_where_filter_equals_subsample(panel, tmp_path):
    # Reference: statsmodels LSDV on the rows the filter keeps.
    path = tmp_path / "p.parquet"
    panel.to_parquet(path)
    res = bigpanel.fit(str(path), "y ~ x1 + x2", fe="unit", where="period < 6 AND x3 > -1")
    sub = panel[(panel["period"] < 6) & (panel["x3"] > -1)]
    from conftest import drop_singletons

    sub = drop_singletons(sub, ["unit"])
    ref = lsdv(sub, "y", ["x1", "x2"], ["unit"])
    assert res.nobs == len(sub)
    assert res.rows.after_filter < res.rows.source == len(panel)
    assert rel(res.coef, ref.params[:2]) < 1e-8


def test_missing_table_and_schema_errors(panel, tmp_path):
    db_path = tmp_path / "p.duckdb"
    duckdb.connect(str(db_path)).close()
    with pytest.raises(BigPanelError, match="table 'sales' not found"):
        bigpanel.fit(str(db_path), "y ~ x1", fe="unit", table="sales")
    with pytest.raises(BigPanelError, match="name the table with --table"):
        bigpanel.fit(str(db_path), "y ~ x1", fe="unit")
    with pytest.raises(BigPanelError, match="no file matches"):
        bigpanel.fit(str(tmp_path / "nothing-*.parquet"), "y ~ x1", fe="unit")
