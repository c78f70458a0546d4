"""The row filter is a row expression over the source's columns and nothing more (issue items 1, 5, 15).

References: statsmodels LSDV on the rows the filter keeps, selected in pandas.
"""

import duckdb
import numpy as np
import pytest

import bigpanel
from bigpanel import BigPanelError
from bigpanel.engines.duckdb import connect
from conftest import lsdv, make_panel, rel

SECRET = "S3cr3tInTheEnvironment"


@pytest.fixture
def panel(tmp_path):
    df = make_panel(seed=71)
    df["name"] = np.where(df["unit"] % 2 == 0, "north", "south")
    path = tmp_path / "p.parquet"
    df.to_parquet(path)
    (tmp_path / "other.csv").write_text("a\n1\n")
    return df, str(path), tmp_path


@pytest.mark.parametrize("where, refused", [
    ("CAST(read_text('/proc/self/environ') AS INTEGER) > 0", "read_text"),
    ("length(CAST(read_blob('/proc/self/environ') AS VARCHAR)) > 0", "read_blob"),
    ("(SELECT count(*) FROM read_csv('OTHER')) > 0", "subquery"),
    ("x1 IN (SELECT a FROM 'OTHER')", "subquery"),
    ("EXISTS (SELECT 1 FROM glob('/*'))", "subquery"),
    ("(SELECT count(*) FROM query('SELECT 1')) = 1", "subquery"),
    ("current_setting('memory_limit') <> ''", "current_setting"),
    ("getenv('BIGPANEL_TEST_SECRET') <> ''", "getenv"),
    ("x1 > 0 AND (SELECT 1 FROM read_parquet('https://example.invalid/a.parquet')) = 1", "subquery"),
    ("main.abs(x1) > 0", "abs"),
    ("COLUMNS(*) IS NOT NULL", "star"),
    ("$1 = 1", "parameter"),
    ("bp_shift.m0 > 0", "bp_shift.m0"),
])
def test_filter_refuses_anything_but_row_expressions(panel, monkeypatch, where, refused):
    # Every one of these read a file, a setting or the environment (or ran a query) before the
    # allow-list; each is now refused with one line naming the refused part.
    df, path, tmp = panel
    monkeypatch.setenv("BIGPANEL_TEST_SECRET", SECRET)
    where = where.replace("OTHER", str(tmp / "other.csv"))
    with pytest.raises(BigPanelError) as info:
        bigpanel.fit(path, "y ~ x1", fe="unit", where=where)
    message = str(info.value)
    assert refused in message and "\n" not in message and SECRET not in message and "HOME=" not in message


def test_allowed_filter_matches_pandas_selection(panel):
    # Reference: statsmodels LSDV on the pandas selection of the same rows.
    df, path, _ = panel
    where = "abs(x1) < 2 AND lower(name) LIKE 'n%' AND period BETWEEN 1 AND 10 AND unit NOT IN (3, 4)"
    res = bigpanel.fit(path, "y ~ x1 + x2", fe="unit", where=where)
    keep = (df["x1"].abs() < 2) & (df["name"] == "north") & df["period"].between(1, 10) & ~df["unit"].isin([3, 4])
    ref = lsdv(df[keep], "y", ["x1", "x2"], ["unit"])
    assert res.rows.after_filter == int(keep.sum())
    assert rel(res.coef, ref.params[:2]) < 1e-8


@pytest.mark.parametrize("where", ["x1 + 1", "name", "coalesce(x1, 0)", "CASE WHEN x1 > 0 THEN 1 ELSE 0 END"])
def test_filter_must_be_a_condition(panel, where):
    # DuckDB would cast a number to a boolean and keep every non-zero row, silently.
    _, path, _ = panel
    with pytest.raises(BigPanelError, match="not a condition"):
        bigpanel.fit(path, "y ~ x1", fe="unit", where=where)


def test_session_loads_no_extension_and_is_locked():
    # The DuckDB settings are read back from the session bigpanel opens.
    con = connect()
    settings = dict(con.execute(
        "SELECT name, value FROM duckdb_settings() WHERE name IN "
        "('autoinstall_known_extensions', 'autoload_known_extensions', 'lock_configuration')").fetchall())
    assert settings == {"autoinstall_known_extensions": "false", "autoload_known_extensions": "false",
                        "lock_configuration": "true"}
    with pytest.raises(duckdb.Error):
        con.execute("SET enable_external_access = true")
    con.close()


@pytest.mark.parametrize("engine", ["duckdb", "memory"])
def test_volatile_filter_draws_one_sample(tmp_path, engine):
    # Common practice: a random subsample is one sample. Drawn again in every pass, the
    # effects of one draw were subtracted from another draw's rows (negative singleton counts,
    # used > after_filter). Every count must add up (no row has a missing value).
    df = make_panel(seed=72, n_units=300, n_periods=3, keep=1.0)
    path = tmp_path / "p.parquet"
    df.to_parquet(path)
    res = bigpanel.fit(str(path), "y ~ x1", fe="unit", where="random() < 0.5", engine=engine)
    rows = res.rows
    assert rows.dropped_incomplete == 0 and rows.dropped_singletons >= 0
    assert rows.used + rows.dropped_singletons == rows.after_filter < rows.source
    assert res.solver.filter == "materialised once (volatile)"


def test_negative_max_iter_is_refused(panel):
    # 0 is allowed (no projection runs, and the report says so: tests/test_trust.py).
    _, path, _ = panel
    with pytest.raises(BigPanelError, match="--max-iter must be 0 or more"):
        bigpanel.fit(path, "y ~ x1", fe="unit", max_iter=-5)


def test_csv_header_with_a_repeated_name_is_refused(tmp_path):
    # DuckDB's reader renames the second 'x' to 'x_1' without a word.
    (tmp_path / "dup.csv").write_text("y,x,x,g\n1,2,3,1\n2,3,4,1\n3,1,2,2\n4,5,6,2\n")
    with pytest.raises(BigPanelError, match="header names column 'x' more than once"):
        bigpanel.fit(str(tmp_path / "dup.csv"), "y ~ x", fe="g")


@pytest.mark.parametrize("engine", ["duckdb", "memory"])
def test_constant_outcome_is_refused(panel, tmp_path, engine):
    # Common practice: with no variation in y~ every slope is 0 and carries no information.
    df, _, _ = panel
    df = df.assign(flat=3.0, per_unit=df["unit"] * 1.5)
    df.to_parquet(tmp_path / "c.parquet")
    with pytest.raises(BigPanelError, match="the outcome does not vary at all"):
        bigpanel.fit(str(tmp_path / "c.parquet"), "flat ~ x1", fe="unit", engine=engine)
    with pytest.raises(BigPanelError, match="within the fixed-effect levels"):
        bigpanel.fit(str(tmp_path / "c.parquet"), "per_unit ~ x1", fe="unit", engine=engine)
