"""Panels held by the program: a DuckDB connection with a view or a relation, Arrow, pandas, polars.

Every kind gives the numbers of the same fit read from a Parquet file, which is itself checked
against statsmodels' LSDV here; a fit in the caller's connection leaves no object behind and
changes no setting, on success, on error and on interrupt. Data: the generated panel of
conftest.make_panel (invented data, coefficients set by us).
"""

import duckdb
import numpy as np
import pyarrow as pa
import pyarrow.dataset as ds
import pytest

import bigpanel
from bigpanel import BigPanelError
from bigpanel.engines.guest import leftovers, rename
from conftest import lsdv, make_panel, rel

polars = pytest.importorskip("polars")

MODEL = dict(formula="y ~ x1 + x2", fe=["unit", "period"], cluster="region")
SAME = 1e-12  # the same rows in the same order through the same SQL: equal up to summation order


@pytest.fixture(scope="module")
def panel(tmp_path_factory):
    df = make_panel(seed=41)
    path = tmp_path_factory.mktemp("inprocess") / "panel.parquet"
    df.to_parquet(path)
    return df, str(path)


@pytest.fixture(scope="module")
def base(panel):
    df, path = panel
    res = bigpanel.fit(path, **MODEL)
    # Reference: statsmodels OLS with unit and period dummies, clustered by region (LSDV, CR1).
    ref = lsdv(df, "y", ["x1", "x2"], ["unit", "period"], cov_type="cluster", groups=df["region"])
    assert rel(res.coef, ref.params[:2]) < 1e-6  # iterated two-way fit against LSDV (README's claim)
    return res


def objects(con):
    """Everything a connection holds that is not DuckDB's own: views, tables, macros, and the settings."""
    things = con.execute(
        "SELECT 'view', database_name, schema_name, view_name FROM duckdb_views() WHERE NOT internal "
        "UNION ALL SELECT 'table', database_name, schema_name, table_name FROM duckdb_tables() "
        "UNION ALL SELECT 'macro', database_name, schema_name, function_name FROM duckdb_functions() "
        "WHERE function_type LIKE '%macro%' AND NOT internal ORDER BY ALL").fetchall()
    settings = con.execute("SELECT name, value FROM duckdb_settings() ORDER BY name").fetchall()
    return things, settings


def assert_same(res, base):
    assert res.nobs == base.nobs
    assert rel(res.coef, base.coef) < SAME
    assert rel(res.std_error, base.std_error) < SAME
    assert rel(res.vcov, base.vcov) < SAME


def test_frames_give_the_file_numbers(panel, base):
    df, path = panel
    table = pa.Table.from_pandas(df, preserve_index=False)
    for source in (table, ds.dataset(path), df, polars.from_pandas(df), polars.from_pandas(df).lazy()):
        res = bigpanel.fit(source, **MODEL)
        assert_same(res, base)
        assert res.call["source"] is None and not res.call["rerunnable"]


def test_connection_view_registered_frame_and_relation(panel, base):
    df, path = panel
    con = duckdb.connect()
    con.execute(f"CREATE VIEW sales AS SELECT * FROM read_parquet('{path}')")
    con.register("sales_frame", df)
    before = objects(con)
    for table in ("sales", "sales_frame", "main.sales", con.sql("SELECT * FROM sales")):
        assert_same(bigpanel.fit(con, **MODEL, table=table), base)
    # the in-memory engine loads the columns through the same connection: compared with itself on the file
    in_memory = bigpanel.fit(path, **MODEL, engine="memory")
    assert_same(bigpanel.fit(con, **MODEL, table="sales", engine="memory"), in_memory)
    assert objects(con) == before  # nothing left behind, no setting changed
    assert leftovers(con) == []


def test_relation_of_the_default_connection(panel, base):
    _, path = panel
    res = bigpanel.fit(duckdb.sql(f"SELECT * FROM read_parquet('{path}')"), **MODEL)
    assert_same(res, base)
    assert leftovers(duckdb.default_connection()) == []


def test_caller_objects_named_like_ours_are_untouched(panel, base):
    # the caller's own bp_source and bp_filtered tables: the fit's names are private, so neither is replaced
    df, _ = panel
    con = duckdb.connect()
    con.register("frame", df)
    con.execute("CREATE TABLE bp_filtered AS SELECT * FROM frame")
    con.execute("CREATE TEMP TABLE bp_source AS SELECT 42 AS answer")
    before = objects(con)
    assert_same(bigpanel.fit(con, **MODEL, table="bp_filtered"), base)
    assert objects(con) == before
    assert con.execute("SELECT * FROM bp_source").fetchall() == [(42,)]


def test_error_and_interrupt_leave_nothing(panel):
    df, path = panel
    con = duckdb.connect()
    con.execute(f"CREATE VIEW sales AS SELECT * FROM read_parquet('{path}')")
    before = objects(con)
    with pytest.raises(BigPanelError, match="nope"):
        bigpanel.fit(con, "y ~ nope", fe="unit", table="sales")
    assert objects(con) == before

    def stop(step: str) -> None:
        if step.startswith("pass 2"):
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        bigpanel.fit(con, **MODEL, table="sales", on_step=stop)
    assert objects(con) == before
    assert con.execute("SELECT count(*) FROM sales").fetchone()[0] == len(df)  # the connection still works


def test_statements_use_private_names():
    sql = "CREATE OR REPLACE TEMP VIEW bp_tilde AS SELECT \"bp_col\", 'bp_text' FROM bp_sample -- bp_comment"
    out = rename(sql, "bigpanel_00_")
    assert out == ("CREATE OR REPLACE TEMP VIEW bigpanel_00_tilde AS SELECT \"bp_col\", 'bp_text' "
                   "FROM bigpanel_00_sample -- bp_comment")


@pytest.mark.parametrize("call, needle", [
    (lambda con, rel_: bigpanel.fit(con, "y ~ x1", fe="unit"), "needs table="),
    (lambda con, rel_: bigpanel.fit(con, "y ~ x1", fe="unit", table="missing"), "no table or view 'missing'"),
    (lambda con, rel_: bigpanel.fit(rel_, "y ~ x1", fe="unit"), "belongs to a connection bigpanel was not given"),
    (lambda con, rel_: bigpanel.fit(duckdb.connect(), "y ~ x1", fe="unit", table=rel_), "belongs to a connection"),
    (lambda con, rel_: bigpanel.fit(con, "y ~ x1", fe="unit", table="frame", threads=1), "set it there"),
    (lambda con, rel_: bigpanel.fit(pa.table({"y": [1.0]}), "y ~ x1", fe="unit", delimiter=";"), "CSV files"),
    (lambda con, rel_: bigpanel.fit(pa.table({"y": [1.0]}), "y ~ x1", fe="unit", engine="spark"), "read by DuckDB"),
    (lambda con, rel_: bigpanel.fit(pa.table({"y": [1.0]}), "y ~ x1", fe="unit", table="t"), "is itself the table"),
    (lambda con, rel_: bigpanel.fit({"y": [1.0]}, "y ~ x1", fe="unit"), "cannot read a builtins.dict"),
])
def test_bad_in_process_sources_are_one_line(panel, call, needle):
    df, _ = panel
    con = duckdb.connect()
    con.register("frame", df)
    with pytest.raises(BigPanelError, match=needle) as caught:
        call(con, con.sql("SELECT * FROM frame"))
    assert "\n" not in str(caught.value)


def test_relation_filter_is_the_rows_it_selects(panel):
    # a relation that filters is the filtered panel: the same numbers as where= on the file
    df, path = panel
    con = duckdb.connect()
    con.register("frame", df)
    res = bigpanel.fit(con, **MODEL, table=con.sql("SELECT * FROM frame WHERE period < 8"))
    ref = bigpanel.fit(path, **MODEL, where="period < 8")
    assert_same(res, ref)
    assert not np.allclose(res.coef, bigpanel.fit(path, **MODEL).coef, rtol=1e-6)


def test_panel_estimators_and_describe_in_a_connection(panel):
    # between, first differences and random effects make tables of their own (unit means, periods,
    # quasi-demeaning): the same numbers as from the file, and none of those tables left behind
    from bigpanel.describe import describe_panel

    _, path = panel
    con = duckdb.connect()
    con.execute(f"CREATE VIEW sales AS SELECT * FROM read_parquet('{path}')")
    before = objects(con)
    for kw in (dict(estimator="between"), dict(estimator="first-difference", time="period"),
               dict(estimator="random-effects", hausman=True)):
        model = dict(formula="y ~ x1 + x2", fe="unit", **kw)
        assert_same(bigpanel.fit(con, **model, table="sales"), bigpanel.fit(path, **model))
    here = describe_panel(con, "unit", "period", table="sales", effects=("unit", "period")).to_dict()
    there = describe_panel(path, "unit", "period", effects=("unit", "period")).to_dict()
    assert {k: v for k, v in here.items() if k != "source"} == {k: v for k, v in there.items() if k != "source"}
    assert objects(con) == before


def test_pandas_object_columns_are_converted_once_and_numbers_shared(panel):
    from bigpanel.engines.inprocess import scannable

    df, _ = panel
    days = np.datetime64("2024-01-01") + df["period"].to_numpy().astype("timedelta64[D]")
    dated = df.assign(day=pa.array(days).to_pandas(date_as_object=True))
    assert dated["day"].dtype == object
    table = scannable(dated, "pandas DataFrame")
    assert isinstance(table, pa.Table) and str(table.schema.field("day").type) == "date32[day]"
    # the float column is shared with the frame, not copied
    assert table.column("y").chunk(0).buffers()[1].address == dated["y"].to_numpy().__array_interface__["data"][0]
    assert scannable(df, "pandas DataFrame") is df  # no object column: registered as it is
    mixed = df.assign(odd=[1, "a"] * (len(df) // 2) + [1] * (len(df) % 2))
    assert scannable(mixed, "pandas DataFrame") is mixed  # Arrow cannot convert it: DuckDB reads it as it is
    assert_same(bigpanel.fit(dated, **MODEL), bigpanel.fit(df, **MODEL))
    by_day = bigpanel.fit(dated, "y ~ x1 + x2", fe=["unit", "day"], cluster="region")
    assert_same(by_day, bigpanel.fit(df, **MODEL))  # day is period under another name


def test_an_interrupt_while_batches_stream_is_an_interrupt():
    # DuckDB's interrupt between two Arrow batches of a streamed pass (the row codes) reaches
    # Python as pyarrow's OSError; the engine must report it as KeyboardInterrupt, not a traceback.
    from bigpanel.engines.duckdb import DuckDBEngine

    con = duckdb.connect()
    eng = DuckDBEngine(con)
    batches = eng.stream("rows", "SELECT i, random() AS x FROM range(20000000) t(i) WHERE i % 3 <> 1", raw=True)
    next(batches)
    con.interrupt()
    with pytest.raises(KeyboardInterrupt):
        for _ in batches:
            pass


def test_a_query_interrupted_inside_duckdb_leaves_nothing():
    # DuckDB's own interrupt (what Ctrl-C in a notebook does) while a pass over the rows runs
    import threading

    con = duckdb.connect()
    con.execute("CREATE TABLE big AS SELECT i % 5000 AS unit, i % 97 AS period, random() AS x1, random() AS y "
                "FROM range(1000000) t(i)")
    before = objects(con)

    def interrupt_soon(step: str) -> None:
        if step.startswith("pass 2"):
            threading.Timer(0.02, con.interrupt).start()

    try:
        bigpanel.fit(con, "y ~ x1", fe=["unit", "period"], table="big", on_step=interrupt_soon)
    except KeyboardInterrupt:
        pass
    else:
        pytest.skip("the pass finished before the interrupt arrived")
    assert objects(con) == before
