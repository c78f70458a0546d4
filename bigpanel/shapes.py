"""Invented benchmark panels of the shapes users have, beside the demo (see sql/shape_*.sql).

* ``store-week``: one row per store and week, 150 weeks, about 3% of cells missing;
* ``store-week-supplier``: the same plus a supplier effect of about 1,000 levels that
  cuts across stores and weeks;
* ``store-week-counts``: store-week plus ``units``, a count with zeros for the Poisson fit
  (its mean is exp of the linear predictor; ``COUNT_COEFFICIENTS``);
* ``staff``: employee x store x year with job spells (employee x store pairs compress,
  employee x year pairs do not).

Each is generated inside DuckDB from hashed pseudo-random draws, so a seed gives the
same panel whatever the thread count.
"""

from __future__ import annotations

from dataclasses import dataclass

from .errors import BigPanelError
from .output.files import atomic_path
from .engines.duckdb import connect
from .sql.text import literal, render

WEEKS = 150
SUPPLIERS = 1_000
YEARS = 10
STAFF_PER_STORE = 25


@dataclass(frozen=True)
class Shape:
    """A benchmark layout: its model, its effects and the coefficients that generated it."""

    name: str
    formula: str
    effects: tuple[str, ...]
    unit: str
    coefficients: dict[str, float]


SHAPES = {
    "store-week": Shape("store-week", "log_sales ~ log_price + promo_share + staff_hours", ("store", "week"), "store",
                        {"log_price": 1.0, "promo_share": -0.5, "staff_hours": 0.25}),
    "store-week-supplier": Shape("store-week-supplier", "log_sales ~ log_price + promo_share + staff_hours",
                                 ("store", "week", "supplier"), "store",
                                 {"log_price": 1.0, "promo_share": -0.5, "staff_hours": 0.25}),
    "store-week-counts": Shape("store-week-counts", "log_sales ~ log_price + promo_share + staff_hours",
                               ("store", "week"), "store",
                               {"log_price": 1.0, "promo_share": -0.5, "staff_hours": 0.25}),
    "staff": Shape("staff", "log_wage ~ log_hours + training + overtime", ("employee", "store", "year"), "employee",
                   {"log_hours": 0.6, "training": 0.3, "overtime": -0.2}),
}
COUNT_FORMULA = "units ~ log_price + promo_share + staff_hours"  # the Poisson model of store-week-counts
COUNT_COEFFICIENTS = {"log_price": 0.3, "promo_share": -0.5, "staff_hours": 0.25}
COUNT_COLUMN = ("CAST(floor(exp(0.5 + 0.3 * (z1 + 0.5 * z_store) - 0.5 * (z2 + 0.3 * z_week) + 0.25 * z3 "
                "+ 0.5 * z_store + 0.3 * z_week + 0.5 * z_noise - 0.125) + bp_unif(i, 17, $seed)) AS INTEGER) "
                "AS units,")


def write_shape(path: str, name: str, rows: int, seed: int = 11) -> Shape:
    """Write about ``rows`` rows of panel ``name`` (a key of ``SHAPES``) to Parquet at ``path``."""
    if name not in SHAPES:
        raise BigPanelError(f"unknown panel shape {name!r}: choose one of {', '.join(SHAPES)}")
    con = connect()
    try:
        for statement in con.extract_statements(render("demo_macros")):
            con.execute(statement).fetchall()
        with atomic_path(path) as tmp:
            if name == "staff":
                employees = max(1, rows // YEARS)
                params = {"cells": employees * YEARS, "years": YEARS, "seed": seed,
                          "stores": max(2, employees // STAFF_PER_STORE)}
                con.execute(render("shape_staff", path=literal(str(tmp))), params).fetchall()
            else:
                supplier = name == "store-week-supplier"
                cells = int(rows / 0.97) // WEEKS * WEEKS
                params = {"cells": cells, "weeks": WEEKS, "seed": seed, "suppliers": SUPPLIERS}
                sql = render("shape_store_week", path=literal(str(tmp)),
                             supplier_column="CAST(supplier + 1 AS SMALLINT) AS supplier," if supplier else "",
                             supplier_effect="+ 0.3 * bp_normal(supplier, 15, $seed)" if supplier else "",
                             count_column=COUNT_COLUMN if name == "store-week-counts" else "")
                con.execute(sql, params).fetchall()
    finally:
        con.close()
    return SHAPES[name]
