"""Invented benchmark panels of the shapes users have, beside the demo (see sql/shape_*.sql).

* ``store-week``: one row per store and week, 150 weeks, about 3% of cells missing;
* ``store-week-supplier``: the same plus a supplier effect of about 1,000 levels that
  cuts across stores and weeks;
* ``store-week-region``: store-week plus a ``region`` column (50 regions, stores nested in
  them), the clusters of the wild bootstrap's benchmark;
* ``store-week-iv``: store-week with log_price endogenous (it answers the demand noise)
  and two cost shifters that move it, ``cost_index`` and ``rival_price`` (instruments);
* ``store-week-adoption``: store-week plus a staggered adoption: ``first_week``, each store's
  first treated week (missing for the 30% never treated), and an effect on sales from then on
  (the event-study benchmark);
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
from .sql.text import Fragment, literal, render

WEEKS = 150
SUPPLIERS = 1_000
REGIONS = 50
YEARS = 10
STAFF_PER_STORE = 25
# store-week-iv: the cost shifters (instruments) and what they and the demand noise add to log_price
IV_COLUMNS = "bp_normal(i, 17, $seed) AS cost_index, bp_normal(i, 19, $seed) AS rival_price,"
IV_PRICE = "+ 0.8 * bp_normal(i, 17, $seed) + 0.5 * bp_normal(i, 19, $seed) + 0.5 * z_noise"
IV_INSTRUMENTS = ("cost_index", "rival_price")
# the adoption's effect on log sales, invented: 0.05 at the first treated week, 0.002 more per week since
ADOPTION_EFFECT = ("\n             + CASE WHEN first IS NOT NULL AND w + 1 >= first"
                   " THEN 0.05 + 0.002 * (w + 1 - first) ELSE 0 END")


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
    "store-week-region": Shape("store-week-region", "log_sales ~ log_price + promo_share + staff_hours",
                               ("store", "week"), "store",
                               {"log_price": 1.0, "promo_share": -0.5, "staff_hours": 0.25}),
    "store-week-iv": Shape("store-week-iv", "log_sales ~ log_price + promo_share + staff_hours", ("store", "week"),
                           "store", {"log_price": 1.0, "promo_share": -0.5, "staff_hours": 0.25}),
    "store-week-adoption": Shape("store-week-adoption", "log_sales ~ log_price + promo_share + staff_hours",
                                 ("store", "week"), "store",
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
                supplier, iv = name == "store-week-supplier", name == "store-week-iv"
                adoption = name == "store-week-adoption"
                cells = int(rows / 0.97) // WEEKS * WEEKS
                params = {"cells": cells, "weeks": WEEKS, "seed": seed, "suppliers": SUPPLIERS}
                region = name == "store-week-region"
                if region:
                    params["regions"] = REGIONS
                parts = dict(region_column="CAST(s % $regions + 1 AS SMALLINT) AS region," if region else "",
                             supplier_column="CAST(supplier + 1 AS SMALLINT) AS supplier," if supplier else "",
                             supplier_effect="+ 0.3 * bp_normal(supplier, 15, $seed)" if supplier else "",
                             instrument_columns=IV_COLUMNS if iv else "", price_shift=IV_PRICE if iv else "",
                             adoption_column="CAST(first AS SMALLINT) AS first_week," if adoption else "",
                             adoption_effect=ADOPTION_EFFECT if adoption else "",
                             count_column=COUNT_COLUMN if name == "store-week-counts" else "")
                sql = render("shape_store_week", path=literal(str(tmp)),
                             **{slot: Fragment(text) for slot, text in parts.items()})
                con.execute(sql, params).fetchall()
    finally:
        con.close()
    return SHAPES[name]
