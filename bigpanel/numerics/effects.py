"""The estimated fixed effects themselves.

With slopes b, the effect of level l of dimension d is a_d[l](y) - a_d[l](X) b,
the solved level coefficients of the outcome minus those of the regressors.
Normalisation: with one effect, level g gets mean_g(y) - mean_g(x)'b (the
intercept is inside). With two or more, effect 2 has a row-weighted mean of
zero within every connected component of effects 1 and 2, effects 3 and up have
a row-weighted mean of zero, and effect 1 carries the intercept; the fitted
values do not depend on this choice. (When the projections ran in the engine,
the components are not known and effect 2 is centred like effects 3 and up.)
"""

from __future__ import annotations

from typing import Callable

import numpy as np
import pyarrow as pa

from .project import Projection
from ..model.spec import Spec


def recover(
    proj: Projection,
    counts: list[np.ndarray],
    keep: list[int],
    beta: np.ndarray,
    shift: np.ndarray,
    labels: np.ndarray | None,
) -> list[np.ndarray]:
    """Normalised effects per dimension (see the module docstring)."""
    fx = [a[:, 0] - a[:, keep] @ beta for a in proj.alpha]
    fx[0] = fx[0] + (shift[0] - shift[keep] @ beta)
    if len(fx) >= 2 and labels is not None:
        n1 = len(counts[0])
        lab1, lab2 = labels[:n1], labels[n1:]
        n_comp = int(labels.max()) + 1
        wsum = np.bincount(lab2, weights=fx[1] * counts[1], minlength=n_comp)
        wcnt = np.bincount(lab2, weights=counts[1], minlength=n_comp)
        centre = wsum / np.where(wcnt > 0, wcnt, 1.0)
        fx[1] = fx[1] - centre[lab2]
        fx[0] = fx[0] + centre[lab1]
    for d in range(1 if labels is None else 2, len(fx)):
        centre = float(np.average(fx[d], weights=counts[d]))
        fx[d] = fx[d] - centre
        fx[0] = fx[0] + centre
    return fx


def effect_tables(
    spec: Spec, keys_of: Callable[[int], pa.Table], fx: list[np.ndarray], counts: list[np.ndarray]
) -> dict[str, pa.Table]:
    """One Arrow table per effect: the level's key columns, ``effect`` and ``rows``.

    ``keys_of(d)`` gives effect d's level keys in code order.
    """
    out: dict[str, pa.Table] = {}
    for d, name in enumerate(spec.fe_names):
        keys = keys_of(d).rename_columns(list(spec.fe[d]))
        taken = set(spec.fe[d])
        label_effect = "effect" if "effect" not in taken else "effect_estimate"
        label_rows = "rows" if "rows" not in taken else "rows_in_level"
        table = keys.append_column(label_effect, pa.array(fx[d], type=pa.float64()))
        table = table.append_column(label_rows, pa.array(counts[d].astype(np.int64)))
        out[name] = table
    return out
