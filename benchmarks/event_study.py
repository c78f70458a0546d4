"""The event-study measurement of ``benchmarks/run.py --configs event``: ``bigpanel.event`` on the
invented store-week-adoption panel (``bigpanel/shapes.py``), the same controls and effects as
the within fit it is compared with, the default horizon (-5:10), errors clustered by store.

Imported by the child process before its clock starts (the runner is passed by reference), so
the timing covers the work, not the imports.
"""

from __future__ import annotations

import bigpanel
from bigpanel.estimators import event as _loaded  # noqa: F401 - imported before the clock starts
from bigpanel.shapes import SHAPES


def fit(model: dict) -> dict:
    """Run the event study on ``model["source"]``; the fields ``benchmarks/run.py`` records."""
    shape = SHAPES["store-week-adoption"]
    res = bigpanel.event(model["source"], y="log_sales", unit="store", time="week", first_treated="first_week",
                         x=list(shape.coefficients), memory_limit=model.get("memory_limit"),
                         temp_dir=model.get("temp_dir"))
    doc = res.to_dict()
    fit_part = doc["untreated_fit"]
    return {
        "nobs": doc["rows"]["untreated"] + doc["rows"]["imputed"],
        "raw_passes": doc["solver"]["raw_passes"],
        "coefficients": {"overall": {"estimate": doc["overall"]["estimate"]}},
        "solver": {"iterations": fit_part["iterations"], "converged": fit_part["converged"],
                   "strategy": {"name": fit_part["strategy"], "reason": "the untreated rows' fit"},
                   "raw_passes": doc["solver"]["raw_passes"], "implied_weights": doc["solver"]["implied_weights"]},
        "timings": doc["timings"],
    }
