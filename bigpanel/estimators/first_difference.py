"""First differences: OLS of y_it - y_i,t-1 on a constant and the differenced regressors.

Over pairs of rows of a unit in consecutive periods: the periods present in the sample are
ranked once, so a step over a period that the unit misses is a gap (dropped and counted);
df = N_fd - K - 1. With analytic weights a difference weighs 2 / (1/w_it + 1/w_i,t-1), the
harmonic mean of its two rows' weights (the precision of e_it - e_i,t-1 up to the factor 2).
"""

from __future__ import annotations

import numpy as np

from ..errors import BigPanelError
from ..passes.panel import first_differences
from ..passes.reduce import Start
from .base import Session
from .transformed import PanelEstimator, PanelOutcome, ols_with_constant


class FirstDifference(PanelEstimator):
    """Differences along the period column ``time`` (its own option)."""

    name = "first-difference"
    options = {"time": None}

    def estimate(self, session: Session, first: Start, before: None) -> PanelOutcome:
        spec = session.spec
        counts = first_differences(session.eng, spec)
        m = len(spec.value_aliases)
        fit = ols_with_constant(session.eng, spec, m - 1, np.zeros(m), unit_constant=True)
        extras = {"first_difference": {"usable": counts["usable"], "dropped_gaps": counts["gaps"],
                                       "first_rows": counts["first_rows"]}}
        return PanelOutcome(fit, sum(counts.values()), None, extras)

    def prepare(self) -> None:
        if not self.settings["time"]:
            raise BigPanelError("--estimator first-difference needs --time COL to order the rows within a unit")
