"""The generated SQL, compared with stored snapshots: DuckDB's statements and their bound
parameters, and their translation for PostgreSQL and Spark (no server needed).

Set BIGPANEL_UPDATE_SNAPSHOTS=1 to rewrite the snapshots after a deliberate change, and review the diff.
The three-way snapshot includes the GROUPING bitmask values bound as ``$gid``: an encoder that
reverses the bit order (checked by hand when this test was written) changes them and fails it.
"""

import json
import os
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import bigpanel
import bigpanel.engines.duckdb as duckdb_module
from bigpanel.engines.dialect import translate
from bigpanel.engines.duckdb import DuckDBEngine

SNAPSHOTS = Path(__file__).parent / "snapshots"
UPDATE = bool(os.environ.get("BIGPANEL_UPDATE_SNAPSHOTS"))


@pytest.fixture
def recorded(monkeypatch):
    """The engines a fit opens, each recording (sql, params) of every statement it runs."""
    engines = []

    class Recording(DuckDBEngine):
        def __init__(self, *args, **kwargs):
            super().__init__(*args, **kwargs)
            self.calls = []
            engines.append(self)

        def _execute(self, sql, params):
            self.calls.append((sql, params))
            super()._execute(sql, params)

        def _fetch(self, sql, params):
            self.calls.append((sql, params))
            return super()._fetch(sql, params)

        def _stream(self, sql, params):
            self.calls.append((sql, params))
            return super()._stream(sql, params)

    monkeypatch.setattr(duckdb_module, "DuckDBEngine", Recording)
    return engines


def _check(name: str, text: str) -> None:
    path = SNAPSHOTS / name
    if UPDATE:
        path.write_text(text)
    assert text == path.read_text(), f"{name} changed; regenerate with BIGPANEL_UPDATE_SNAPSHOTS=1 and review"


def _params(params: dict) -> str:
    """The bound parameters; floats (means, slopes) to 6 digits, so summation order cannot move them."""
    shown = {k: float(f"{v:.6g}") if isinstance(v, float) else v for k, v in params.items()}
    return "-- params: " + json.dumps(shown, sort_keys=True, default=str)


def test_generated_sql_matches_snapshot(to_parquet, recorded):
    rng = np.random.default_rng(0)
    df = pd.DataFrame(
        {
            "shop id": rng.integers(0, 5, 60),
            'wk"': rng.integers(0, 4, 60),
            "select": rng.normal(size=60),
            "y": rng.normal(size=60),
            "area": rng.integers(0, 3, 60),
        }
    )
    bigpanel.fit(to_parquet(df), y="y", x=["select"], fe=["shop id", 'wk"'], cluster="area")
    text = "\n;\n".join(recorded[0].statements) + "\n"
    _check("two_way_cluster.sql", text)
    # User identifiers appear only quoted, and only in the filter view.
    assert '"shop id" AS f1_1' in text and '"wk""" AS f2_1' in text and '"select"' in text


@pytest.fixture
def three_way(to_parquet, recorded):
    """A three-way, two-cluster, weighted, filtered fit on the pair-table path: its (sql, params)."""
    rng = np.random.default_rng(1)
    n = 240
    df = pd.DataFrame({
        "shop id": rng.integers(0, 8, n), "week": rng.integers(0, 6, n), "item": rng.integers(0, 5, n),
        "region": rng.integers(0, 3, n), "x1": rng.normal(size=n), "w": rng.uniform(0.5, 2.0, n),
    })
    df["y"] = 0.5 * df["x1"] + rng.normal(size=n)
    bigpanel.fit(to_parquet(df), "y ~ x1", fe=["shop id", "week", "item"], cluster=["region", "shop id"],
                 weights="w", where="x1 > -2.5", strategy="pair tables")
    (eng,) = recorded
    # the file path differs per run: keep the statements that do not name it
    return [(sql, params) for sql, params in eng.calls if "read_parquet" not in sql]


def test_three_way_duckdb_snapshot(three_way):
    text = "\n;\n".join(f"{_params(p)}\n{sql.strip()}" for sql, p in three_way) + "\n"
    _check("three_way.duckdb.sql", text)
    assert any(p.get("gid") not in (None, 0) for _, p in three_way), "the snapshot must hold a non-zero GROUPING value"


@pytest.mark.parametrize("dialect", ["postgres", "spark"])
def test_three_way_translation_snapshot(three_way, dialect):
    blocks = []
    for sql, params in three_way:
        steps = translate(sql, dialect)
        blocks.append("\n;\n".join([_params(params)] + [
            (f"-- materialised as {s.table}\n" if s.table else "") + s.sql for s in steps]))
    _check(f"three_way.{dialect}.sql", "\n;\n".join(blocks) + "\n")


@pytest.mark.parametrize("grouped", [["a"], ["b"], ["c"], ["a", "c"], ["b", "c"], ["a", "b", "c"], []])
def test_grouping_id_matches_duckdbs_bitmask(grouped):
    # sqltext.grouping_id encodes what GROUPING(a, b, c) returns on a grouping set's rows;
    # the reference is DuckDB's own GROUPING (SQL standard: first argument = most significant bit).
    import duckdb

    from bigpanel.sql.text import grouping_id

    con = duckdb.connect()
    got = con.sql(f"SELECT GROUPING(a, b, c) FROM (VALUES (1, 2, 3)) AS t(a, b, c) "
                  f"GROUP BY GROUPING SETS (({', '.join(grouped)}), (a, b, c))").fetchall()
    assert sorted(got) == sorted([(grouping_id(["a", "b", "c"], grouped),), (0,)])


@pytest.mark.parametrize("grouped", [["a"], ["b"], ["c"], ["a", "c"], ["b", "c"], ["a", "b", "c"], []])
def test_grouped_columns_decodes_duckdbs_bitmask(grouped):
    # The decoder the cluster meats use reads DuckDB's own GROUPING(a, b, c) value back into
    # the grouped columns (reference: DuckDB, SQL standard bit order).
    import duckdb

    from bigpanel.sql.text import grouped_columns

    con = duckdb.connect()
    rows = con.sql(f"SELECT GROUPING(a, b, c) FROM (VALUES (1, 2, 3)) AS t(a, b, c) "
                   f"GROUP BY GROUPING SETS (({', '.join(grouped)}), (a, b, c))").fetchall()
    gid = max(r[0] for r in rows)  # the set (a, b, c) gives 0; ours gives the largest value
    assert grouped_columns(gid, 3) == tuple(["a", "b", "c"].index(c) for c in grouped)


def test_render_takes_only_generated_fragments():
    # A slot filled with plain text (not built by the quoting helpers) is refused.
    from bigpanel.sql.text import ident, render

    assert '"my ""col"""' in render("fractional_key", column=ident('my "col"'))
    with pytest.raises(TypeError, match="plain text"):
        render("fractional_key", column='"x"; DROP TABLE t')


@pytest.fixture
def bootstrap_two_way(to_parquet, recorded):
    """A two-way fit clustered by area with the wild bootstrap (week cuts across the areas, shops
    nest in them): pass 2 grouped by (area, level), its per-level roll-up and the cut-across
    sums read back from it; its (sql, params)."""
    rng = np.random.default_rng(2)
    shops = np.repeat(np.arange(12), 5)
    df = pd.DataFrame({"shop id": shops, 'wk"': np.tile(np.arange(5), 12), "area": shops // 3,
                       "select": rng.normal(size=60)})
    df["y"] = 0.4 * df["select"] + rng.normal(size=60)
    bigpanel.fit(to_parquet(df), y="y", x=["select"], fe=["shop id", 'wk"'], cluster="area", strategy="pair tables",
                 wild_bootstrap=True, bootstrap_weights="rademacher", draws=99)
    (eng,) = recorded
    return [(sql, params) for sql, params in eng.calls if "read_parquet" not in sql]


@pytest.mark.parametrize("dialect", ["duckdb", "postgres", "spark"])
def test_bootstrap_two_way_snapshot(bootstrap_two_way, dialect):
    blocks = []
    for sql, params in bootstrap_two_way:
        steps = [sql.strip()] if dialect == "duckdb" else [
            (f"-- materialised as {s.table}\n" if s.table else "") + s.sql for s in translate(sql, dialect)]
        blocks.append(_params(params) + "\n" + "\n;\n".join(steps))
    text = "\n;\n".join(blocks) + "\n"
    assert "bp_cluster_cells" in text and "Per (bootstrap cluster, level" not in text  # no pass for the sums
    _check(f"bootstrap_two_way.{dialect}.sql", text)
