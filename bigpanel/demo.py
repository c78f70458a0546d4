"""Invented demo data: a retail chain's store x product x week sales panel, made in DuckDB."""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

from .errors import BigPanelError
from .output.files import atomic_path
from .engines.duckdb import connect
from .sql.text import Fragment, literal, render

TRUE_COEFFICIENTS = {"log_price": -1.8, "promo": 0.35}
WEEKS = 104
REGIONS = 12
FORMATS = {".parquet": "FORMAT parquet, ROW_GROUP_SIZE 1000000", ".csv": "FORMAT csv, HEADER true"}


@dataclass(frozen=True)
class DemoPanel:
    """What was written: the file, its shape and the coefficients that generated it."""

    path: str
    rows: int
    stores: int
    products: int
    weeks: int
    coefficients: dict[str, float]


def shape_for(rows: int) -> tuple[int, int, int]:
    """Stores, products and weeks for about ``rows`` rows (the last store is partial)."""
    weeks = min(WEEKS, rows)
    products = max(1, min(400, int(math.sqrt(rows / weeks))))
    stores = math.ceil(rows / (weeks * products))
    return stores, products, weeks


def write_demo(path: str, rows: int = 1_000_000, seed: int = 7, threads: int | None = None) -> DemoPanel:
    """Write the demo panel to ``path``: Parquet, or CSV with a header when it ends in ``.csv``.

    log_units = 2 - 1.8 log_price + 0.35 promo + store + product + week effects + noise;
    log price moves with the store and product effects (so pooled OLS is biased),
    0.1% of prices are missing, and shelf_m2 is constant within a store.
    """
    if rows < 1:
        raise BigPanelError(f"--rows must be at least 1, not {rows}")
    fmt = FORMATS.get(Path(path).suffix.lower())
    if fmt is None:
        raise BigPanelError(f"the demo is written as .parquet or .csv, not {Path(path).name!r}")
    stores, products, weeks = shape_for(rows)
    params = {
        "rows": rows,
        "weeks": weeks,
        "products": products,
        "regions": REGIONS,
        "seed": seed,
        "beta_price": TRUE_COEFFICIENTS["log_price"],
        "beta_promo": TRUE_COEFFICIENTS["promo"],
    }
    con = connect(threads=threads)
    try:
        for statement in con.extract_statements(render("demo_macros")):
            con.execute(statement).fetchall()
        with atomic_path(path) as tmp:
            con.execute(render("demo", path=literal(str(tmp)), format=Fragment(fmt)), params).fetchall()
    finally:
        con.close()
    return DemoPanel(str(Path(path)), rows, stores, products, weeks, dict(TRUE_COEFFICIENTS))
