"""The same fit from each kind of source: a Parquet path, a view of a caller's DuckDB connection, an
Arrow table, a pandas and a polars frame.

For each: the best of three wall times, the largest slope difference from the path's fit, and the
process's peak resident memory above what it held before the first fit of that kind (the frame
is built before, so a copy of it made by the fit would show here). Usage:

    python benchmarks/sources.py --rows 5e6 [--fe store --fe week] [--out benchmarks/results_sources.json]
"""

from __future__ import annotations

import argparse
import json
import resource
import tempfile
import time
from pathlib import Path

import duckdb
import numpy as np
import pyarrow.parquet as pq

import bigpanel
from bigpanel.demo import write_demo

FORMULA = "log_units ~ log_price + promo"


def peak_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def measure(label: str, source: object, kw: dict, reference: np.ndarray | None) -> dict:
    before = peak_mib()
    times, res = [], None
    for _ in range(3):
        start = time.perf_counter()
        res = bigpanel.fit(source, FORMULA, **kw)
        times.append(time.perf_counter() - start)
    diff = float(np.max(np.abs(res.coef - reference))) if reference is not None else 0.0
    return {"source": label, "best_s": round(min(times), 3), "max_slope_diff": diff,
            "peak_growth_mib": round(peak_mib() - before, 1)}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--rows", type=float, default=5e6)
    parser.add_argument("--fe", action="append", default=None)
    parser.add_argument("--out", default=None)
    args = parser.parse_args()
    kw = {"fe": args.fe or ["store", "week"], "cluster": "store"}
    with tempfile.TemporaryDirectory() as tmp:
        path = str(Path(tmp) / "sales.parquet")
        write_demo(path, rows=int(args.rows), seed=7)
        rows = [measure("Parquet path", path, kw, None)]
        reference = bigpanel.fit(path, FORMULA, **kw).coef
        con = duckdb.connect()
        con.execute(f"CREATE VIEW sales AS SELECT * FROM read_parquet('{path}')")
        rows.append(measure("DuckDB connection view", con, {**kw, "table": "sales"}, reference))
        table = pq.read_table(path)
        rows.append(measure("Arrow table", table, kw, reference))
        rows.append(measure("pandas DataFrame", table.to_pandas(), kw, reference))
        import polars

        rows.append(measure("polars DataFrame", polars.from_arrow(table), kw, reference))
    report = {"rows": int(args.rows), "effects": kw["fe"], "frame_mib": round(table.nbytes / 2**20, 1),
              "results": rows}
    print(json.dumps(report, indent=2))
    if args.out:
        Path(args.out).write_text(json.dumps(report, indent=2) + "\n")


if __name__ == "__main__":
    main()
