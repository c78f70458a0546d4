"""A fit's numbers as Arrow tables: the coefficient table and the labelled variance matrix.

Arrow is the common ground of the data-frame libraries: ``table.to_pandas()`` and
``polars.from_arrow(table)`` turn either into a frame without bigpanel importing them.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import pyarrow as pa
from scipy import stats

from ..errors import BigPanelError

if TYPE_CHECKING:
    from .result import FitResult

COEFFICIENT_COLUMNS = ("term", "estimate", "std_error", "t", "p_value", "ci_low", "ci_high")
FIT_LEVEL = 0.95  # the level of the intervals a fit stores (numerics.inference.with_variance)


def interval(res: FitResult, level: float) -> tuple[np.ndarray, np.ndarray]:
    """The ``level`` confidence interval of each slope: estimate -+ t_{(1+level)/2, df} s.e., on the
    fit's t degrees of freedom (the stored interval when ``level`` is the fit's own 0.95)."""
    if not 0.0 < level < 1.0:
        raise BigPanelError(f"level {level!r} must lie strictly between 0 and 1 (0.95 for a 95% interval)")
    if level == FIT_LEVEL:
        return np.asarray(res.ci_low, float), np.asarray(res.ci_high, float)
    half = stats.t.ppf(0.5 + level / 2.0, res.inference.df) * np.asarray(res.std_error, float)
    return res.coef - half, res.coef + half


def coefficient_table(res: FitResult, level: float = FIT_LEVEL) -> pa.Table:
    """One row per kept regressor with the columns of ``COEFFICIENT_COLUMNS`` (float64, term a string)."""
    low, high = interval(res, level)
    values = [res.coef, res.std_error, res.t, res.p, low, high]
    arrays = [pa.array(list(res.names), pa.string())] + [pa.array(np.asarray(v, float), pa.float64()) for v in values]
    return pa.table(arrays, names=list(COEFFICIENT_COLUMNS)).replace_schema_metadata(
        {"variance": res.inference.kind, "df": repr(res.inference.df), "level": repr(level)})


def vcov_table(res: FitResult) -> pa.Table:
    """The variance matrix with its labels: column ``term``, then one float64 column per term (row i,
    column j holds Cov(b_i, b_j))."""
    v = np.asarray(res.vcov, float)
    columns = [pa.array(list(res.names), pa.string())]
    columns += [pa.array(v[:, j], pa.float64()) for j in range(len(res.names))]
    return pa.table(columns, names=["term", *res.names])
