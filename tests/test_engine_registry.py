"""Which engine runs a fit, and the options that do not apply to it: refused in one line, no server needed.

The checks run before any connection is made, so the PostgreSQL URLs here point nowhere.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

import bigpanel
from bigpanel import BigPanelError
from bigpanel.cli import app
from bigpanel.engines.registry import sql_engine

URL = "postgresql://someone@127.0.0.1:1/warehouse"


@pytest.mark.parametrize(
    "location, engine, expected",
    [
        ("panel.parquet", None, "duckdb"),
        ("panel.parquet", "duckdb", "duckdb"),
        ("panel.parquet", "memory", "duckdb"),
        ("panel.parquet", "spark", "spark"),
        (URL, None, "postgresql"),
        (URL, "postgresql", "postgresql"),
        (URL, "memory", "postgresql"),
        ("postgres://h/db", None, "postgresql"),
    ],
)
def test_engine_from_location_and_option(location, engine, expected):
    assert sql_engine(location, engine) == expected


@pytest.mark.parametrize(
    "location, kw, message",
    [
        (URL, {"engine": "spark"}, "--engine spark cannot read a postgresql:// source"),
        (URL, {"engine": "duckdb"}, "--engine duckdb cannot read a postgresql:// source"),
        ("p.parquet", {"engine": "postgresql"}, "--engine postgresql needs a postgresql:// URL"),
        ("p.parquet", {"engine": "oracle"}, "unknown engine 'oracle'"),
        (URL, {"memory_limit": "1GB"}, "--memory-limit applies to duckdb only, not to a postgresql source"),
        (URL, {"threads": 2}, "--threads applies to duckdb only"),
        (URL, {"temp_dir": "/tmp/x"}, "--temp-dir applies to duckdb only"),
        ("p.parquet", {"engine": "spark", "memory_limit": "1GB"},
         "--memory-limit applies to duckdb only, not to --engine spark"),
        ("p.parquet", {"spark_master": "local[1]"}, "--spark-master applies to spark only, not to a duckdb source"),
        ("p.parquet", {"engine": "memory", "spark_master": "local[1]"}, "--spark-master applies to spark only"),
    ],
)
def test_options_that_do_not_apply_are_refused(location, kw, message):
    with pytest.raises(BigPanelError, match=message.replace("[", r"\[")):
        bigpanel.fit(location, "y ~ x", fe="a", table="t", **kw)


def test_cli_refuses_in_one_line_with_exit_2():
    result = CliRunner().invoke(app, ["fit", URL, "y ~ x", "--fe", "a", "--table", "t", "--engine", "spark"])
    assert result.exit_code == 2
    lines = result.output.strip().splitlines()
    assert len(lines) == 1 and "--engine spark cannot read a postgresql:// source" in lines[0]


def test_duckdb_and_memory_report_their_names(to_parquet):
    rng = np.random.default_rng(3)
    df = pd.DataFrame({"a": rng.integers(0, 6, 80), "x": rng.normal(size=80)})
    df["y"] = 2 * df["x"] + rng.normal(size=80)
    path = to_parquet(df)
    assert bigpanel.fit(path, "y ~ x", fe="a").solver.engine == "duckdb"
    assert bigpanel.fit(path, "y ~ x", fe="a", engine="memory").solver.engine == "memory"
    assert bigpanel.fit(path, "y ~ x", fe="a", estimator="between").solver.engine == "duckdb"
