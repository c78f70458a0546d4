"""The generated SQL for a small spec, compared with a stored snapshot.

Set BIGPANEL_UPDATE_SNAPSHOTS=1 to rewrite the snapshot after a deliberate change.
"""

import os
from pathlib import Path

import numpy as np
import pandas as pd

import bigpanel
import bigpanel.engines.duckdb as duckdb_module
from bigpanel.engines.duckdb import DuckDBEngine

SNAPSHOT = Path(__file__).parent / "snapshots" / "two_way_cluster.sql"


def test_generated_sql_matches_snapshot(to_parquet, monkeypatch):
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
    engines = []

    class Recording(DuckDBEngine):
        def __init__(self, *args, **kwargs):
            super().__init__(*args, **kwargs)
            engines.append(self)

    monkeypatch.setattr(duckdb_module, "DuckDBEngine", Recording)
    bigpanel.fit(to_parquet(df), y="y", x=["select"], fe=["shop id", 'wk"'], cluster="area")
    text = "\n;\n".join(engines[0].statements) + "\n"
    if os.environ.get("BIGPANEL_UPDATE_SNAPSHOTS"):
        SNAPSHOT.write_text(text)
    assert text == SNAPSHOT.read_text()
    # User identifiers appear only quoted, and only in the filter view.
    assert '"shop id" AS f1_1' in text and '"wk""" AS f2_1' in text and '"select"' in text
