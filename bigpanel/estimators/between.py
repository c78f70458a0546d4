"""The between estimator: OLS of the unit means of y on a constant and the unit means of x.

One observation per unit (G of them); df = G - K - 1. With analytic weights the unit means
are weighted means, xbar_i = sum_t w_it x_it / W_i with W_i = sum_t w_it, and unit i weighs
W_i / T_i (its rows' mean weight) in the regression of the means. Errors clustered by a
column need every unit inside one cluster.
"""

from __future__ import annotations

import numpy as np

from ..errors import BigPanelError
from ..passes.panel import between_view, columns, unit_table
from ..passes.reduce import Start
from .base import Session
from .transformed import PanelEstimator, PanelOutcome, ols_with_constant


class Between(PanelEstimator):
    """Regression of unit means (see the module docstring), solved in numpy on the unit table."""

    name = "between"

    def estimate(self, session: Session, first: Start, before: None) -> PanelOutcome:
        eng, spec = session.eng, session.spec
        units = columns(unit_table(eng, spec))
        m = len(spec.value_aliases)
        g = len(units["n"])
        cols = {f"e{j}": units[f"b{j}"] for j in range(m)}
        cols[f"e{m}"] = np.ones(g)
        for c in spec.cluster_aliases:
            if not (units[f"{c}_min"] == units[f"{c}_max"]).all():
                raise BigPanelError("between-unit errors clustered by a column need every unit inside one cluster")
            cols[c] = units[f"{c}_min"]
        if spec.weights:
            cols["w"] = units["nw"] / units["n"]
        between_view(eng, cols)
        fit = ols_with_constant(eng, spec, m - 1, first.shift, unit_constant=True)
        return PanelOutcome(fit, int(units["n"].sum()), g, {"units": g})
