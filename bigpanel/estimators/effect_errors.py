"""Standard errors for a within fit's effect tables (the algebra: :mod:`bigpanel.numerics.effect_errors`).

One effect: every level gets its classical standard error (``std_error``: no pass), and with
``clustered`` and one cluster column its CR1 one (``std_error_clustered``), which needs the
residual sums per (cluster, level): one pass over the rows when the effect cuts across the
clusters, none when it is nested (then no level has one). Two or more effects: none, and the
JSON section says why.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pyarrow as pa

from ..numerics.effect_errors import CLASSICAL, CLUSTERED, NOT_IDENTIFIED, classical_errors, clustered_errors
from ..numerics.inference import Inference
from ..numerics.solve import Slopes
from .absorb import Absorption
from .base import Session


def _column(table: pa.Table, name: str, values: np.ndarray) -> pa.Table:
    label = name if name not in table.column_names else f"effect_{name}"
    return table.append_column(label, pa.array(values, type=pa.float64(), from_pandas=True))


def _clustered(ab: Absorption, slopes: Slopes, inf: Inference, xbar: np.ndarray) -> np.ndarray:
    """The CR1 standard error of each level of the one effect, which cuts across the one cluster column."""
    keep = slopes.keep
    cells = ab.back.cluster_cells()
    order = np.argsort(cells.codes[:, 0])  # one column: one cell per cluster, in key order
    q = cells.q[order]
    scores = q[:, keep, 0] - q[:, keep][:, :, keep] @ slopes.beta
    omega = np.zeros(q.shape[1])
    omega[0], omega[keep] = 1.0, -slopes.beta
    pairs = ab.back.cross_sums(0, cells.keys[0], [0])
    return clustered_errors(xbar, ab.red.counts[0], pairs, omega, scores, slopes.bread, inf.small_sample)


def effect_errors(session: Session, ab: Absorption, slopes: Slopes, inf: Inference, effects: dict[str, pa.Table],
                  clustered: bool, ols_scores: bool = True) -> tuple[dict[str, pa.Table], dict[str, Any]]:
    """The effect tables with their standard error columns, and the JSON section ``effect_errors``.
    ``ols_scores`` says the fit's scores are X~'u (not so for instrumental variables, whose
    levels get the classical errors only: the CR1 algebra here is the OLS fit's)."""
    spec = session.spec
    if len(spec.fe) > 1:
        return effects, {"note": NOT_IDENTIFIED}
    name, keep = spec.fe_names[0], slopes.keep
    xbar = ab.proj.alpha[0][:, keep] + ab.first.shift[keep]
    s2 = slopes.rss / (ab.mom.n - len(keep) - ab.absorbed.total)
    table = _column(effects[name], "std_error", classical_errors(xbar, ab.red.counts[0], s2, slopes.bread))
    section: dict[str, Any] = {"effect": name, "std_error": CLASSICAL}
    if clustered and spec.variance == "cr1":
        if not ols_scores:
            section["std_error_clustered"] = "not computed: the fit's scores are not OLS scores (instruments)"
        elif len(spec.cluster) > 1:
            section["std_error_clustered"] = "not computed: multi-way clustering"
        elif all(ab.red.nested[0]):
            section["std_error_clustered"] = (f"none: every level of {name} lies inside one cluster of "
                                              f"{spec.cluster[0]}, whose residuals sum to zero there")
        else:
            se = _clustered(ab, slopes, inf, xbar)
            table = _column(table, "std_error_clustered", se)
            section["std_error_clustered"] = CLUSTERED
            section["levels_without_clustered"] = int(np.isnan(se).sum())
    return {name: table}, section
