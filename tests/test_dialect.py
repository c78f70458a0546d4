"""Every translation rewrite of bigpanel.engines.dialect, table-driven, with no server.

The expected texts are what the target engine needs, written from its documentation (from
memory of the PostgreSQL and Spark SQL references): PostgreSQL has no isfinite for float8 and
orders NaN as equal to itself; Spark's grouping() takes one column and grouping_id() many;
PostgreSQL has no approximate distinct count; psycopg takes %(name)s and wants a literal %
doubled; Spark SQL takes :name markers. The semantics are checked on live servers in
test_engines.test_dialect_semantics_match_duckdb.
"""

from __future__ import annotations

import pytest

from bigpanel.engines.dialect import Step, translate

NOT_FINITE_PG = ("NOT x IN (CAST('Infinity' AS DOUBLE PRECISION), CAST('-Infinity' AS DOUBLE PRECISION), "
                 "CAST('NaN' AS DOUBLE PRECISION))")

CASES = [
    # (what, DuckDB-dialect statement, PostgreSQL steps, Spark steps)
    ("isfinite", "SELECT isfinite(x) AS ok FROM t",
     [Step(f"SELECT ({NOT_FINITE_PG}) AS ok FROM t")],
     [Step("SELECT (NOT ISNAN(x) AND ABS(x) <> CAST('inf' AS DOUBLE)) AS ok FROM t")]),
    ("GROUPING bitmask", "SELECT GROUPING(a, b) AS gid FROM t GROUP BY GROUPING SETS ((a), (b))",
     [Step("SELECT GROUPING(a, b) AS gid FROM t GROUP BY GROUPING SETS ((a), (b))")],
     [Step("SELECT GROUPING_ID(a, b) AS gid FROM t GROUP BY GROUPING SETS ((a), (b))")]),
    ("temporary table", "CREATE OR REPLACE TEMP TABLE bp_x AS SELECT a FROM t",
     [Step("DROP TABLE IF EXISTS bp_x"), Step("CREATE TEMPORARY TABLE bp_x AS SELECT a FROM t")],
     [Step("SELECT a FROM t", table="bp_x")]),
    ("temporary view", "CREATE OR REPLACE TEMP VIEW bp_v AS SELECT a FROM t",
     [Step("CREATE OR REPLACE TEMPORARY VIEW bp_v AS SELECT a FROM t")],
     [Step("CREATE OR REPLACE TEMPORARY VIEW bp_v AS SELECT a FROM t")]),
    ("fsum", "SELECT fsum(x) AS s FROM t",
     [Step("SELECT SUM(x) AS s FROM t")],
     [Step("SELECT SUM(x) AS s FROM t")]),
    ("parameters and %", "SELECT a FROM t WHERE b = $gid AND c LIKE 'S0%'",
     [Step("SELECT a FROM t WHERE b = %(gid)s AND c LIKE 'S0%%'")],
     [Step("SELECT a FROM t WHERE b = :gid AND c LIKE 'S0%'")]),
    ("quantile", "SELECT quantile_cont(n, 0.25) AS q FROM t",
     [Step("SELECT PERCENTILE_CONT(0.25) WITHIN GROUP (ORDER BY n) AS q FROM t")],
     [Step("SELECT PERCENTILE(n, 0.25) AS q FROM t")]),
]


@pytest.mark.parametrize("what, sql, postgres, spark", CASES, ids=[c[0] for c in CASES])
def test_rewrite(what, sql, postgres, spark):
    assert list(translate(sql, "postgres")) == postgres
    assert list(translate(sql, "spark")) == spark


def test_isfinite_keeps_its_argument_expression():
    # the rewrite substitutes the whole argument, not a column named like it
    (step,) = translate('SELECT isfinite("a b" * 2) AS ok FROM t', "spark")
    assert step.sql == "SELECT (NOT ISNAN(`a b` * 2) AND ABS(`a b` * 2) <> CAST('inf' AS DOUBLE)) AS ok FROM t"


def test_more_than_one_statement_is_refused():
    from bigpanel import BigPanelError

    with pytest.raises(BigPanelError, match="expected one statement, found 2"):
        translate("SELECT 1; SELECT 2", "postgres")
